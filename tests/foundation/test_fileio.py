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
