"""The fit's exports written without pandas (``fileio.write_table``) are the bytes pandas wrote.

Reference: the same tables as DataFrames (``export.*_frame``) written by ``fileio.write_csv``
(pandas' ``to_csv``), which wrote every export before; the demo town's fit gives every column kind
the exports hold (text, floats with NaN, integers, booleans, a scalar column, a covariance).
"""

import numpy as np
import pytest

from calib import fileio
from calib.calibration import export, fit
from calib.calibration.tests_io import TextTable


@pytest.fixture(scope="module")
def demo_result(demo_day):
    net, tests = demo_day
    return fit(net, tests)


@pytest.mark.parametrize("name, frame", [("groups.csv", export.groups_frame),
                                         ("roughness.csv", export.roughness_frame),
                                         ("readings.csv", export.readings_frame),
                                         ("covariance.csv", export.covariance_frame)])
def test_each_demo_export_is_the_bytes_pandas_wrote(demo_result, tmp_path, name, frame):
    written = export.write_outputs(demo_result, tmp_path / "new")
    assert tmp_path / "new" / name in written
    reference = fileio.write_csv(tmp_path / "ref" / name, frame(demo_result))
    assert (tmp_path / "new" / name).read_bytes() == reference.read_bytes()


def test_the_demo_exports_hold_the_kinds_of_cell_compared(demo_result):
    # the check above is only as wide as the cells it sees: blanks (no prior spread is missing
    # here, but influence and flag are mostly empty), text, integers and booleans
    groups = export.groups_columns(demo_result)
    readings = export.readings_columns(demo_result)
    assert np.asarray(groups["determined"]).dtype.kind == "b"
    assert np.asarray(groups["n_pipes"]).dtype.kind in "iu"
    assert any(f == "" for f in readings["flag"]) and any(f for f in readings["flag"])
    assert np.asarray(readings["used"]).dtype.kind == "b"


def test_other_parameters_rows_are_the_frame(demo_result):
    class Fake:
        pass
    res = Fake()
    est = Fake()
    est.x, est.low, est.high = np.array([1.2345678, 0.5]), np.array([1.0, 0.1]), np.array([1.5, 0.9])
    p1, p2 = Fake(), Fake()
    p1.name, p1.kind, p2.name, p2.kind = "demand 2026-05-14", "demand", "offset R1 T01", "offset"
    res.estimate, res.params = est, [p1, p2]
    rows = export.other_parameters_rows(res)
    frame = export.other_parameters_frame(res)
    assert frame.values.tolist() == rows and list(frame.columns) == list(export.OTHER_PARAMETERS)


def test_the_tests_table_keeps_its_text_and_gives_the_frame(demo_day):
    from pathlib import Path

    import pandas as pd
    demo_town = Path(__file__).resolve().parents[2] / "field_samples" / "tallowmere"
    _, tests = demo_day
    info = tests.info
    assert isinstance(info, TextTable) and not info.empty and len(info) == tests.n_tests
    ref = pd.read_csv(demo_town / "tests" / "tests.csv", dtype=str, keep_default_na=False)
    assert info.columns == list(ref.columns)
    assert info.to_frame().values.tolist() == ref.map(str.strip).values.tolist()
    assert info["test_id"].tolist() == tests.test_ids
    # a column as calib.loop reads it (a Series of text before): astype, iteration
    assert [str(t).strip() for t in info["test_id"].astype(str)] == tests.test_ids
