"""``python -m calib solve`` in-process: exit codes 0 / 1 / 2, output headers, atomic files.

Outside values: the Hazen-Williams head loss of one pipe from the US form of the formula,
h = 4.727 L Q^1.852 / (C^1.852 D^4.871) [ft, cfs] (Williams and Hazen, Hydraulic Tables; see
../shared/reference/check-values.md, which tabulates 23.828 ft for 6 in, C 120, 500 gpm, 1000 ft); the
SI form the solver may use differs by up to 0.11 %, so the tolerance is 0.2 %. Pressure head with
60 degF water, 1 psi = 2.308965 ft (NIST SP 811 via pint ft_H2O_60F).
"""

import textwrap
from pathlib import Path

import pandas as pd
import pytest

import calib.hydraulics
from calib.cli import main
from calib.cli import solve as solve_cli

DEMO = Path(__file__).resolve().parents[2] / "field_samples" / "tallowmere"
FT_PER_PSI = 2.308965  # NIST SP 811 (60 degF water), as calib.units documents
GPM_CFS = 448.831169  # 1 cfs in gpm: 7.48051948 gal/ft3 x 60 s (NIST SP 811, exact by definition)


def one_pipe(folder: Path, to="J1", extra="") -> Path:
    """Reservoir at 100 ft, one 6 in C 120 pipe of 1000 ft, 500 gpm drawn at J1 (elevation 0)."""
    folder.mkdir(parents=True, exist_ok=True)
    files = {
        "junctions.csv": "id,elevation [ft],demand [gpm]\nJ1,0,500\n",
        "sources.csv": "id,head [ft]\nR1,100\n",
        "pipes.csv": f"id,from,to,length [ft],diameter [in],roughness\nP1,R1,{to},1000,6,120\n"
                     + extra,
    }
    for name, text in files.items():
        (folder / name).write_text(textwrap.dedent(text))
    return folder


def run(capsys, *argv):
    code = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return code, out, err


def test_one_pipe_against_closed_form_hazen_williams(tmp_path, capsys):
    out_file, pipes_file = tmp_path / "out" / "nodes.csv", tmp_path / "out" / "pipes.csv"
    code, out, err = run(capsys, "solve", one_pipe(tmp_path / "net"), "--out", out_file,
                         "--pipes", pipes_file)
    assert code == 0, err
    loss = 4.727 * 1000 * (500 / GPM_CFS) ** 1.852 / (120 ** 1.852 * 0.5 ** 4.871)
    assert loss == pytest.approx(23.828, abs=0.001)  # the check-values table, US form
    assert out_file.read_text().splitlines()[0] == "node,head [ft],pressure [psi]"
    nodes = pd.read_csv(out_file).set_index("node")
    tolerance = 0.002 * loss  # [ft], 0.2 % of the loss (module docstring)
    assert nodes.loc["J1", "head [ft]"] == pytest.approx(100 - loss, abs=tolerance)
    assert nodes.loc["J1", "pressure [psi]"] == pytest.approx((100 - loss) / FT_PER_PSI,
                                                              abs=tolerance / FT_PER_PSI)
    assert nodes.loc["R1", "head [ft]"] == pytest.approx(100, rel=1e-9)
    assert pipes_file.read_text().splitlines()[0] == \
        "pipe,flow [gpm],velocity [ft/s],headloss [ft]"
    pipes = pd.read_csv(pipes_file).set_index("pipe")
    assert pipes.loc["P1", "flow [gpm]"] == pytest.approx(500, rel=1e-6)
    # V = Q / A: 500 gpm in a 6 in bore = 5.6737 ft/s (continuity, closed form)
    assert pipes.loc["P1", "velocity [ft/s]"] == pytest.approx(
        500 / GPM_CFS / (3.141592653589793 * 0.25 ** 2), rel=1e-6)
    assert pipes.loc["P1", "headloss [ft]"] == pytest.approx(loss, rel=0.002)
    assert out.startswith("solved net: 1 junctions, 1 pipes, ") and "iterations" in out
    # (100 - 23.83) ft / 2.309 ft/psi = 33.0 psi, printed to 0.1 psi
    assert "lowest pressure 33.0 psi at J1" in out and "negative pressures: none" in out
    # the caution follows the figures (common practice: model results defer to the AHJ and an engineer)
    assert out.splitlines()[-1] == solve_cli.CAUTION and "licensed engineer" in solve_cli.CAUTION


def test_si_headers(tmp_path, capsys):
    out_file, pipes_file = tmp_path / "n.csv", tmp_path / "p.csv"
    code, _, err = run(capsys, "solve", one_pipe(tmp_path / "net"), "--out", out_file,
                       "--units", "si", "--pipes", pipes_file)
    assert code == 0, err
    assert out_file.read_text().splitlines()[0] == "node,head [m],pressure [kPa]"
    assert pipes_file.read_text().splitlines()[0] == "pipe,flow [L/s],velocity [m/s],headloss [m]"
    nodes = pd.read_csv(out_file).set_index("node")
    assert nodes.loc["R1", "head [m]"] == pytest.approx(30.48, rel=1e-9)  # 100 ft, exact
    flow = pd.read_csv(pipes_file).set_index("pipe").loc["P1", "flow [L/s]"]
    assert flow == pytest.approx(500 * 3.785411784 / 60, rel=1e-6)  # US gallon, NIST SP 811


def test_demand_factor_scales_the_flow(tmp_path, capsys):
    pipes_file = tmp_path / "p.csv"
    code, _, err = run(capsys, "solve", one_pipe(tmp_path / "net"), "--out", tmp_path / "n.csv",
                       "--pipes", pipes_file, "--demand-factor", "0.5")
    assert code == 0, err
    assert pd.read_csv(pipes_file)["flow [gpm]"][0] == pytest.approx(250, rel=1e-6)


def test_negative_pressure_is_reported(tmp_path, capsys):
    folder = one_pipe(tmp_path / "net")
    (folder / "junctions.csv").write_text("id,elevation [ft],demand [gpm]\nJ1,90,500\n")
    code, out, err = run(capsys, "solve", folder, "--out", tmp_path / "n.csv")
    assert code == 0, err
    assert "negative pressures: 1 (J1)" in out


def test_bad_network_exits_2_and_writes_nothing(tmp_path, capsys):
    out_file = tmp_path / "out" / "nodes.csv"
    code, out, err = run(capsys, "solve", one_pipe(tmp_path / "net", to="J9"), "--out", out_file)
    assert code == 2
    assert ("pipes.csv, row 2, id 'P1', field 'to': node 'J9' is not in junctions.csv or "
            "sources.csv") in err
    assert err.startswith("error: ")
    assert not out_file.exists() and out == ""


def test_failed_solve_leaves_an_existing_file_untouched(tmp_path, capsys, monkeypatch):
    out_file = tmp_path / "nodes.csv"
    out_file.write_text("an earlier result\n")

    class OneStep(calib.hydraulics.NetworkSolver):
        def __init__(self, network, **kw):
            super().__init__(network, max_iterations=1, **kw)

    # a real non-convergence: the demo town cannot settle in one iteration
    monkeypatch.setattr(calib.hydraulics, "NetworkSolver", OneStep)
    code, out, err = run(capsys, "solve", DEMO / "network", "--out", out_file)
    assert code == 1
    assert err.startswith("error: ") and out == ""
    assert out_file.read_text() == "an earlier result\n"
    assert [p.name for p in tmp_path.iterdir()] == ["nodes.csv"]  # no temporary file left


def test_bad_demand_factor_exits_2(tmp_path, capsys):
    code, _, err = run(capsys, "solve", one_pipe(tmp_path / "net"), "--out", tmp_path / "n.csv",
                       "--demand-factor", "lots")
    assert code == 2
    assert "field '--demand-factor': demand factor 'lots' is not a number in the plausible range" in err
    assert not (tmp_path / "n.csv").exists()


def test_missing_network_exits_2(tmp_path, capsys):
    code, _, err = run(capsys, "solve", tmp_path / "nowhere", "--out", tmp_path / "n.csv")
    assert code == 2 and "no such folder or file" in err


@pytest.mark.parametrize("network", ["network", "network.geojson"])
def test_demo_town_static_pressures_are_realistic(tmp_path, capsys, network):
    # 45-110 psi: the usual band for a distribution system at ordinary demand (common practice)
    out_file = tmp_path / "n.csv"
    code, out, err = run(capsys, "solve", DEMO / network, "--out", out_file)
    assert code == 0, err
    nodes = pd.read_csv(out_file)
    junctions = nodes[nodes["node"].str.startswith("J")]["pressure [psi]"]
    assert junctions.min() >= 45 and junctions.max() <= 110
    assert "solved tallowmere: 343 junctions, 531 pipes" in out


def test_darcy_weisbach_on_the_demo_town(tmp_path, capsys):
    code, out, err = run(capsys, "solve", DEMO / "network", "--out", tmp_path / "n.csv",
                         "--headloss", "darcy-weisbach", "--units", "si")
    assert code == 0, err
    assert "kPa" in out


def test_darcy_weisbach_without_roughness_heights_exits_2(tmp_path, capsys):
    out_file = tmp_path / "n.csv"
    code, _, err = run(capsys, "solve", one_pipe(tmp_path / "net"), "--out", out_file,
                       "--headloss", "darcy-weisbach")
    assert code == 2 and "roughness_height" in err and "P1" in err
    assert not out_file.exists()


def test_darcy_weisbach_one_pipe_against_colebrook_from_fluids(tmp_path, capsys):
    # Outside reference: fluids.friction.Colebrook (PyPI) for the friction factor, then
    # Darcy-Weisbach h = f L V^2 / (2 g D) with g = 9.80665 m/s2 (standard gravity, CGPM 1901).
    fluids = pytest.importorskip("fluids")
    folder = one_pipe(tmp_path / "net", extra="")
    (folder / "pipes.csv").write_text(
        "id,from,to,length [ft],diameter [in],roughness,roughness_height [mm]\n"
        "P1,R1,J1,1000,6,120,0.26\n")
    pipes_file = tmp_path / "p.csv"
    code, _, err = run(capsys, "solve", folder, "--out", tmp_path / "n.csv", "--units", "si",
                       "--pipes", pipes_file, "--headloss", "darcy-weisbach")
    assert code == 0, err
    from calib.hydraulics.headloss import NU_WATER_60F  # the solver's viscosity, 60 degF water
    d, q, length = 6 * 0.0254, 500 * 3.785411784e-3 / 60, 1000 * 0.3048
    v = q / (3.141592653589793 * d ** 2 / 4)
    f = fluids.friction.Colebrook(v * d / NU_WATER_60F, 0.26e-3 / d)
    expected = f * length * v ** 2 / (2 * 9.80665 * d)
    loss = pd.read_csv(pipes_file)["headloss [m]"][0]
    assert loss == pytest.approx(expected, rel=1e-4)


def test_unwritable_output_exits_2(tmp_path, capsys):
    target = tmp_path / "a_folder"
    target.mkdir()
    code, _, err = run(capsys, "solve", one_pipe(tmp_path / "net"), "--out", target)
    assert code == 2 and "field '--out': cannot write" in err
    assert list(target.iterdir()) == []  # the temporary file was removed
