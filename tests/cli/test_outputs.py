"""Outputs never overwrite an input or each other, and ``fit`` writes its folder all or none with no
stale file of its own kind left from an earlier run (issue 9; ``calib.fileio.output_folder``)."""

import shutil
from pathlib import Path

import pytest

from calib.calibration import export
from calib.cli import fit as cli_fit
from calib.cli import main

ROOT = Path(__file__).resolve().parents[2]
NETWORK = ROOT / "field_samples" / "tallowmere" / "network"
TESTS = ROOT / "field_samples" / "tallowmere" / "tests"


def run(capsys, *argv):
    code = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    assert "Traceback" not in err
    return code, out, err


@pytest.fixture()
def net_copy(tmp_path):
    return Path(shutil.copytree(NETWORK, tmp_path / "network"))


def test_solve_out_onto_an_input_file_is_refused(net_copy, capsys):
    before = (net_copy / "junctions.csv").read_bytes()
    code, _, err = run(capsys, "solve", net_copy, "--out", net_copy / "junctions.csv")
    assert code == 2
    assert "field '--out'" in err and "is an input of this run" in err
    assert (net_copy / "junctions.csv").read_bytes() == before


def test_solve_pipes_equal_to_out_is_refused(net_copy, tmp_path, capsys):
    target = tmp_path / "result.csv"
    code, _, err = run(capsys, "solve", net_copy, "--out", target, "--pipes", target)
    assert code == 2
    assert "field '--pipes'" in err and "also the --out output" in err
    assert not target.exists()


def test_solve_out_onto_the_geojson_it_reads_is_refused(tmp_path, capsys):
    from calib.network.io import read_network, write_network_geojson
    path = write_network_geojson(read_network(NETWORK), tmp_path / "town.geojson")
    before = path.read_bytes()
    code, _, err = run(capsys, "solve", path, "--out", tmp_path / "nodes.csv",
                       "--pipes", tmp_path / "." / "town.geojson")
    assert code == 2 and "field '--pipes'" in err
    assert path.read_bytes() == before


def test_fit_out_onto_its_geojson_input_is_refused(tmp_path, capsys):
    from calib.network.io import read_network, write_network_geojson
    path = write_network_geojson(read_network(NETWORK), tmp_path / "pipes.geojson")
    before = path.read_bytes()
    code, _, err = run(capsys, "fit", path, TESTS, "--out", tmp_path, "--quiet")
    assert code == 2 and "field '--out'" in err and "pipes.geojson" in err
    assert path.read_bytes() == before


def test_fit_no_report_removes_an_old_report_and_fails_leave_the_folder_alone(tmp_path, capsys,
                                                                              monkeypatch):
    out = tmp_path / "out"
    out.mkdir()
    (out / "report.html").write_text("an earlier run's report")
    (out / "notes.txt").write_text("the modeler's own notes")
    code, text, err = run(capsys, "fit", NETWORK, TESTS, "--out", out, "--quiet", "--no-report")
    assert code == 0, err
    assert not (out / "report.html").exists()  # it would pass for this run's before
    assert (out / "notes.txt").read_text() == "the modeler's own notes"
    written = {p.name for p in out.iterdir()}
    assert "notes.txt" in written and written - {"notes.txt"} <= set(cli_fit.OUTPUTS)
    assert {"groups.csv", "roughness.csv", "readings.csv", "pipes.geojson"} <= written
    assert not [p for p in tmp_path.iterdir() if p.name.endswith(".partial")]
    groups = (out / "groups.csv").read_bytes()

    # a failure half-way through the writing leaves the earlier outputs as they were
    real = export.write_outputs

    def broken(result, folder, system="us"):
        real(result, folder, system)
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(export, "write_outputs", broken)
    with pytest.raises(OSError):
        main(["fit", str(NETWORK), str(TESTS), "--out", str(out), "--quiet", "--units", "si"])
    assert (out / "groups.csv").read_bytes() == groups
    assert not [p for p in tmp_path.iterdir() if p.name.endswith(".partial")]


def test_fit_outputs_list_matches_what_fit_can_write():
    # every name fit writes must be in OUTPUTS, or a stale copy of it could survive a later run
    source = (ROOT / "calib" / "calibration" / "export.py").read_text() + \
        (ROOT / "calib" / "calibration" / "report.py").read_text()
    import re
    written = set(re.findall(r'out / "([a-z_]+\.(?:csv|geojson|html))"', source)) | \
        set(re.findall(r'Path\(out\) / "([a-z_]+\.html)"', source))
    assert written and written <= set(cli_fit.OUTPUTS)


@pytest.mark.parametrize("argv, option", [
    (["--sigma=1e-300psi"], "--sigma"),
    (["--sigma=9**9**9 psi"], "--sigma"),
    (["--c-bounds", "40,1e400"], "--c-bounds"),
    (["--c-bounds", "2**5,160"], "--c-bounds"),
])
def test_fit_options_refused_before_any_work(tmp_path, capsys, argv, option):
    code, _, err = run(capsys, "fit", NETWORK, TESTS, "--out", tmp_path / "o", "--quiet", *argv)
    assert code == 2 and f"field '{option}'" in err and "expected" in err
    assert not (tmp_path / "o").exists()


def test_fit_header_only_pressures_exits_2_naming_the_file(tmp_path, capsys):
    tests = Path(shutil.copytree(TESTS, tmp_path / "tests"))
    (tests / "pressures.csv").write_text("test_id,node,static [psi],residual [psi]\n")
    code, _, err = run(capsys, "fit", NETWORK, tests, "--out", tmp_path / "o", "--quiet")
    assert code == 2 and "pressures.csv" in err


@pytest.mark.parametrize("value", ["1e300", "9**9**9", "2,5", "-1"])
def test_solve_demand_factor_refused(net_copy, tmp_path, capsys, value):
    code, _, err = run(capsys, "solve", net_copy, "--out", tmp_path / "n.csv",
                       f"--demand-factor={value}")
    assert code == 2 and "field '--demand-factor'" in err


@pytest.mark.parametrize("rule", ["diameter=8,1e400", "diameter=8,nan", "diameter=0"])
def test_fit_group_by_band_edges_outside_pipe_diameters_are_refused(tmp_path, capsys, rule):
    # accepted before: an infinite or NaN band edge grouped pipes silently
    code, _, err = run(capsys, "fit", NETWORK, TESTS, "--out", tmp_path / "o", "--quiet",
                       f"--group-by={rule}")
    assert code == 2 and "field '--group-by'" in err and "plausible pipe diameter" in err
    assert not (tmp_path / "o").exists()


def test_fireflow_outputs_beside_out_never_overwrite_the_network(tmp_path, capsys):
    # fireflow writes OUT.csv, OUT.geojson and OUT.html: --out town.csv beside town.geojson would
    # have replaced the network it read
    from calib.network.io import read_network, write_network_geojson
    path = write_network_geojson(read_network(NETWORK), tmp_path / "town.geojson")
    before = path.read_bytes()
    code, _, err = run(capsys, "fireflow", path, "--out", tmp_path / "town.csv", "--workers", "0",
                       "--quiet")
    assert code == 2 and "field '--out'" in err and "town.geojson" in err
    assert path.read_bytes() == before


@pytest.mark.parametrize("argv, option", [
    (["--demand-factor", "1_0"], "--demand-factor"), (["--demand-factor", "2**3"], "--demand-factor"),
    (["--residual", "9**9**9 psi"], "--residual"), (["--system-minimum", "20,5"], "--system-minimum"),
])
def test_fireflow_options_are_numbers_and_units(tmp_path, capsys, argv, option):
    code, _, err = run(capsys, "fireflow", NETWORK, "--out", tmp_path / "f.csv", "--workers", "0",
                       "--quiet", *argv)
    assert code == 2 and f"field '{option}'" in err
