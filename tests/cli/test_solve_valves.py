"""``python -m calib solve --valves``: the valve table and the zone column.

Reference: a reducing valve's definition (the pressure at its downstream node equals its setting
while it is active; common practice) and the Hazen-Williams closed form of the one-pipe case in
test_solve.py for the pipe upstream of it (Williams and Hazen, Hydraulic Tables, US form
h = 4.727 L Q^1.852 / (C^1.852 D^4.871), see ../shared/reference/check-values.md).
"""

import pandas as pd
import pytest

from calib.cli import main

GPM_CFS = 448.831169  # 1 cfs in gpm (NIST SP 811, exact by definition)
FT_PER_PSI = 2.308965  # NIST SP 811 (60 degF water)


def zoned_folder(folder, setting="45", extra_valve=""):
    """Reservoir 300 ft -> 1000 ft of 6 in C 120 -> J1 (elev 100) -> reducing valve -> J2 (elev 50),
    500 gpm drawn at J2 through 200 ft of 8 in to J3."""
    folder.mkdir(parents=True)
    (folder / "junctions.csv").write_text("id,elevation [ft],demand [gpm]\nJ1,100,0\nJ2,50,0\n"
                                          "J3,50,500\n")
    (folder / "sources.csv").write_text("id,head [ft]\nR1,300\n")
    (folder / "pipes.csv").write_text("id,from,to,length [ft],diameter [in],roughness\n"
                                      "P1,R1,J1,1000,6,120\nP2,J2,J3,200,8,130\n")
    (folder / "valves.csv").write_text("id,from,to,diameter [in],type,pressure [psi],minor_loss\n"
                                       f"V1,J1,J2,8,pressure-reducing,{setting},3\n" + extra_valve)
    return folder


def test_solve_writes_valve_states_and_zones(tmp_path, capsys):
    folder = zoned_folder(tmp_path / "net")
    nodes_file, valves_file = tmp_path / "nodes.csv", tmp_path / "valves_out.csv"
    code = main(["solve", str(folder), "--out", str(nodes_file), "--valves", str(valves_file)])
    out, err = capsys.readouterr()
    assert code == 0, err
    valves = pd.read_csv(valves_file).set_index("valve")
    assert valves.loc["V1", "state"] == "active"
    assert valves.loc["V1", "flow [gpm]"] == pytest.approx(500, rel=1e-6)
    assert valves.loc["V1", "pressure to [psi]"] == pytest.approx(45.0, abs=1e-4)
    # the grade upstream: 300 ft less the Hazen-Williams loss of P1 at 500 gpm (closed form)
    loss = 4.727 * 1000 * (500 / GPM_CFS) ** 1.852 / (120 ** 1.852 * 0.5 ** 4.871)
    grade_j2 = 50 + 45 * FT_PER_PSI
    assert valves.loc["V1", "headloss [ft]"] == pytest.approx(300 - loss - grade_j2, rel=2e-3)
    nodes = pd.read_csv(nodes_file).set_index("node")
    assert list(nodes["zone"]) == ["R1", "V1", "V1", "R1"]
    assert "valves: 1 active, 0 open, 0 closed; 2 zone(s): R1, V1" in out


def test_solve_prints_the_above_supply_warning(tmp_path, capsys):
    folder = zoned_folder(tmp_path / "net", setting="150")  # 50 + 346 ft > 300 ft reservoir
    code = main(["solve", str(folder), "--out", str(tmp_path / "n.csv"), "--valves",
                 str(tmp_path / "v.csv")])
    out, err = capsys.readouterr()
    assert code == 0, err
    assert "id 'V1', field 'pressure': warning: reducing valve setting 150.0 psi" in out
    assert pd.read_csv(tmp_path / "v.csv")["state"].tolist() == ["open"]
