"""A tank's floor and greatest depth in sources.csv: a level becomes a grade; impossible ones refused.

Grade = floor elevation + water depth (closed form: the water surface lies the depth above the floor).
"""

import dataclasses
import json

import numpy as np
import pytest

from calib import units
from calib.calibration import read_tests
from calib.errors import InputError, NetworkError
from calib.network import tanks
from calib.network.io import read_network, write_network_geojson

TANK = """\
id,head [ft],kind,floor [ft],level_max [ft]
R1,300,tank,260,50
"""


def test_floor_and_level_max_are_read_into_the_model(make_folder):
    net = read_network(make_folder(sources=TANK))
    assert net.source_floor[0] == pytest.approx(260 * units.FT)
    assert net.source_level_max[0] == pytest.approx(50 * units.FT)
    # grade = floor + level: 260 ft + 28 ft = 288 ft
    assert tanks.grade_from_level(net, "R1", 28 * units.FT) == pytest.approx(288 * units.FT)


def test_a_network_without_them_reads_as_before(make_folder):
    net = read_network(make_folder())
    assert np.isnan(net.source_floor).all() and np.isnan(net.source_level_max).all()
    with pytest.raises(InputError, match="no floor"):
        tanks.grade_from_level(net, "R1", 10 * units.FT)


def test_impossible_level_or_grade_names_the_tank_range(make_folder):
    net = read_network(make_folder(sources=TANK))
    with pytest.raises(InputError) as e:
        tanks.grade_from_level(net, "R1", 60 * units.FT)
    assert "level 0 to 50.0 ft (grade 260.0 to 310.0 ft)" in str(e.value)
    with pytest.raises(InputError, match="260.0 to 310.0"):
        tanks.check_grade(net, "R1", 28 * units.FT)  # a depth typed as a grade
    assert tanks.check_grade(net, "R1", 300 * units.FT) == pytest.approx(300 * units.FT)


@pytest.mark.parametrize("row, field", [("R1,300,tank,260,-5", "level_max"),
                                         ("R1,300,tank,,50", "floor"),
                                         ("R1,350,tank,260,50", "head")])
def test_bad_tank_rows_are_problems(make_folder, row, field):
    with pytest.raises(NetworkError) as e:
        read_network(make_folder(sources="id,head [ft],kind,floor [ft],level_max [ft]\n" + row + "\n"))
    assert any(p.field == field and p.row == 2 for p in e.value.problems), e.value


def test_geojson_keeps_floor_and_level_max(make_folder, tmp_path):
    net = read_network(make_folder(sources=TANK))
    path = tmp_path / "n.geojson"
    write_network_geojson(net, path)
    props = [f["properties"] for f in json.loads(path.read_text())["features"]
             if f["properties"].get("kind") == "source"][0]
    assert props["floor [ft]"] == pytest.approx(260) and props["level_max [ft]"] == pytest.approx(50)
    back = read_network(path)
    assert back.source_floor[0] == pytest.approx(net.source_floor[0])
    assert back.source_level_max[0] == pytest.approx(net.source_level_max[0])


def _tests_folder(tmp_path, boundary):
    folder = tmp_path / "tests"
    folder.mkdir(parents=True)
    (folder / "flows.csv").write_text("test_id,node,flow [gpm]\nA,J2,500\n")
    (folder / "pressures.csv").write_text("test_id,node,static [psi],residual [psi]\nA,J1,80,70\n")
    (folder / "boundary.csv").write_text(boundary)
    return folder


def test_boundary_level_becomes_the_grade(make_folder, tmp_path):
    net = read_network(make_folder(sources=TANK))
    ts = read_tests(_tests_folder(tmp_path, "test_id,source,level [ft]\nA,R1,28\n"), net)
    assert ts.source_head[0][net.n_junctions] == pytest.approx(288 * units.FT)


def test_boundary_level_beyond_the_tank_is_a_problem(make_folder, tmp_path):
    net = read_network(make_folder(sources=TANK))
    with pytest.raises(InputError) as e:
        read_tests(_tests_folder(tmp_path, "test_id,source,level [ft]\nA,R1,80\n"), net)
    p = e.value.problems[0]
    assert (p.file, p.row, p.field) == ("boundary.csv", 2, "level [ft]")
    assert "260.0 to 310.0" in p.expected
    with pytest.raises(InputError, match="no 'head' or 'level'"):
        read_tests(_tests_folder(tmp_path / "x", "test_id,source\nA,R1\n"), net)


def test_demo_tank_has_a_floor():
    from mobile.services.demo import TALLOWMERE

    net = read_network(TALLOWMERE)
    s = list(map(str, net.source_ids)).index("HILLTANK")
    assert np.isfinite(net.source_floor[s]) and net.source_level_max[s] > 0
    assert dataclasses.is_dataclass(net)
