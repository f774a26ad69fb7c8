"""Atomic writes leave either the whole new file or the old one; formula-like text is neutralized."""

import pandas as pd
import pytest

from calib import fileio


def test_atomic_write_replaces_whole_file(tmp_path):
    target = tmp_path / "out.csv"
    target.write_text("old\n")
    fileio.write_text(target, "new\n")
    assert target.read_text() == "new\n"
    assert list(tmp_path.iterdir()) == [target]  # no temporary left behind


def test_error_mid_write_keeps_old_file_and_leaves_no_temp(tmp_path):
    target = tmp_path / "out.csv"
    target.write_text("old\n")
    with pytest.raises(RuntimeError, match="boom"):
        with fileio.atomic_open(target) as fh:
            fh.write("half")
            raise RuntimeError("boom")
    assert target.read_text() == "old\n"
    assert list(tmp_path.iterdir()) == [target]


def test_csv_cells_that_would_run_as_formulas_are_quoted(tmp_path):
    # OWASP "CSV Injection": cells starting with = + - @ tab or CR run as formulas (common practice).
    frame = pd.DataFrame({"note": ["=HYPERLINK(1)", "@SUM(A1)", "-3.5", "plain"], "v": [1.0, 2, 3, 4]})
    path = fileio.write_csv(tmp_path / "x.csv", frame)
    back = pd.read_csv(path, dtype={"note": str})
    assert list(back["note"]) == ["'=HYPERLINK(1)", "'@SUM(A1)", "-3.5", "plain"]
    assert list(back["v"]) == [1.0, 2.0, 3.0, 4.0]


@pytest.mark.parametrize("mask", [0o022, 0o002, 0o077])
def test_atomic_write_gives_a_new_file_the_mode_of_an_ordinary_write(tmp_path, mask):
    # POSIX open(2): a new file gets the mode asked (0666 for open(path, "w")) less the umask; the
    # reference is Python's own ordinary write, made beside it under the same umask
    import os
    import stat
    old = os.umask(mask)
    try:
        (tmp_path / "plain.csv").write_text("x\n")
        fileio.write_text(tmp_path / "atomic.csv", "x\n")
        fileio.write_csv(tmp_path / "frame.csv", pd.DataFrame({"a": [1]}))
        fileio.write_bytes(tmp_path / "blob.png", b"\x89PNG")
    finally:
        os.umask(old)
    want = stat.S_IMODE((tmp_path / "plain.csv").stat().st_mode)
    assert want == 0o666 & ~mask
    for name in ("atomic.csv", "frame.csv", "blob.png"):
        assert stat.S_IMODE((tmp_path / name).stat().st_mode) == want, name


def test_atomic_write_over_an_existing_file_keeps_its_mode(tmp_path):
    # an ordinary write into an existing file keeps that file's permissions (POSIX open(2), O_TRUNC)
    import os
    import stat
    target = tmp_path / "shared.csv"
    target.write_text("old\n")
    os.chmod(target, 0o640)
    fileio.write_text(target, "new\n")
    assert stat.S_IMODE(target.stat().st_mode) == 0o640 and target.read_text() == "new\n"


def _pandas_csv(columns):
    """The reference text: pandas' DataFrame.to_csv of ``columns`` after what write_csv does first."""
    import io

    frame = pd.DataFrame(columns)
    for col in frame.columns:
        if frame[col].dtype == object or pd.api.types.is_string_dtype(frame[col]):
            frame[col] = frame[col].map(fileio.safe_cell)
    buf = io.StringIO()
    frame.to_csv(buf, index=False, float_format="%.6g", lineterminator="\n")
    return buf.getvalue()


def test_csv_text_is_the_bytes_pandas_to_csv_writes():
    # reference: pandas' DataFrame.to_csv through write_csv's neutralizing, for every kind of
    # column the exports write and the edge cells of each (blank, inf, -0, long, quoted, formula)
    import numpy as np
    import pandas as pd

    from calib import fileio

    columns = {
        "f": np.array([1.5, np.nan, np.inf, -np.inf, -0.0, 1e-7, 123456789.0]),
        "i": np.arange(7) * 1000,
        "b": np.array([True, False] * 3 + [True]),
        "bool list": [True, False] * 3 + [False],
        "text": ["a", "b,c", 'q"uote', "=SUM(A1)", "-3.2", "new\nline", ""],
        "object": np.array(["x", None, "+1", "@a", "\tt", "\u00e9", "y"], dtype=object),
        "fixed width": np.array(["x", "y", "z", "w", "v", "u", "t"]),
        "one value": np.nan,
        "float list": [0.1, 0.2, 1 / 3, 2.0, 1e20, -5.5, 7.0],
        "int list": [1, 2, 3, 4, 5, 6, 7],
        "mixed": ["a", 1.5, None, "b", 2, np.nan, "c"],
        "name, with comma": np.zeros(7),
        'name "quoted"': np.ones(7),
    }
    reference = _pandas_csv(columns)
    assert fileio.csv_text(columns) == reference
    assert fileio.csv_text(list(columns.items())) == reference  # as (name, values) pairs
    # no rows: the header alone, as pandas writes it
    empty = {"a": np.array([], float), "b": []}
    assert fileio.csv_text(empty) == pd.DataFrame(empty).to_csv(index=False, lineterminator="\n")


def test_csv_text_of_repeated_values_is_the_bytes_pandas_to_csv_writes():
    # reference: pandas' DataFrame.to_csv, as above; csv_text formats each distinct value once,
    # so repeats, -0.0 beside 0.0 (different text: "-0" and "0") and NaNs with other payloads
    # must each still come out as pandas writes them
    import struct

    import numpy as np

    from calib import fileio

    other_nan = struct.unpack("<d", struct.pack("<Q", 0x7FF8000000000123))[0]
    floats = np.array([64.44, 0.0, -0.0, np.nan, 64.44, other_nan, -0.0, 1 / 3, 0.0, 64.44])
    assert floats.view(np.int64)[3] != floats.view(np.int64)[5]  # two NaN bit patterns
    columns = {"c": floats, "c32": floats.astype(np.float32),
               "group": ["G1", "G2", "G1", "=G1", None, "G2", "G1", "", "=G1", "G1"],
               "source": np.array(["calibrated", "model"] * 5, dtype=object)}
    reference = _pandas_csv(columns)
    text = fileio.csv_text(columns)
    assert text == reference
    assert text.splitlines()[3].startswith("-0,") and "'=G1" in text


def test_csv_text_refuses_columns_of_different_lengths():
    import numpy as np
    import pytest

    from calib import fileio

    with pytest.raises(ValueError, match="column 'b' has 2 values, the first 3"):
        fileio.csv_text({"a": np.zeros(3), "b": [1, 2]})
