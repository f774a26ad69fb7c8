"""valves.csv and GeoJSON valves: parsing, units, every problem at once, the above-supply warning.

Values are invented test data; unit factors come from pint (1 psi = 6894.757 Pa, NIST SP 811).
"""

import json

import numpy as np
import pytest

from calib.errors import NetworkError
from calib.network.io import read_network, write_network_geojson, write_network_tables
from calib.network.model import ValveMode, ValveType
from calib.units import GPM, PSI

JUNCTIONS = """\
id,elevation [ft],demand [gpm]
J1,100,50
J2,60,20
J3,55,10
"""
PIPES = """\
id,from,to,length [ft],diameter [in],roughness
P1,R1,J1,1000,8,100
P2,J2,J3,500,6,120
"""
VALVES = """\
id,from,to,diameter [in],type,pressure [kPa],flow [gpm],loss_coefficient,status,minor_loss
V1,J1,J2,8,pressure-reducing,400,,,,3
"""


def test_valves_read_in_si_with_units(make_folder):
    folder = make_folder(junctions=JUNCTIONS, pipes=PIPES)
    (folder / "valves.csv").write_text(VALVES)
    net = read_network(folder)
    v = net.valves
    assert list(v.ids) == ["V1"]
    assert v.kind[0] == ValveType.REDUCING and v.mode[0] == ValveMode.ACTIVE
    assert v.setting[0] == pytest.approx(400e3)  # kPa -> Pa, pint
    assert v.diameter[0] == pytest.approx(8 * 0.0254)
    assert v.minor_loss[0] == 3.0
    assert net.warnings == []  # 400 kPa = 58 psi = 134 ft over J2 at 60 ft: 194 ft < 300 ft


def test_every_valve_problem_at_once(make_folder):
    folder = make_folder(junctions=JUNCTIONS, pipes=PIPES)
    (folder / "valves.csv").write_text(
        "id,from,to,diameter [in],type,pressure [psi],flow [gpm],loss_coefficient,status\n"
        "V1,J1,J2,8,pressure-reducing,,,,\n"        # no setting
        "V2,J1,J2,-1,flow-limiting,,0,,\n"          # diameter, flow <= 0
        "V3,J1,J9,8,gate,,,,\n"                     # unknown node and type
        "V4,J1,J2,8,throttle,,,5,half\n"            # bad status
        "P1,J2,J3,8,pressure-sustaining,500,,,\n")  # duplicate id, pressure out of range
    with pytest.raises(NetworkError) as err:
        read_network(folder)
    got = [str(p) for p in err.value.problems]
    expect = [
        "valves.csv, row 2, id 'V1', field 'pressure': a pressure-reducing valve needs its setting",
        "valves.csv, row 3, id 'V2', field 'flow': the flow setting must be positive",
        "valves.csv, row 3, id 'V2', field 'diameter': the diameter must be positive",
        "valves.csv, row 4, id 'V3', field 'to': node 'J9' is not in",
        "valves.csv, row 4, id 'V3', field 'type': 'gate' is not a valve type",
        "valves.csv, row 5, id 'V4', field 'status': 'half' is not a valve status",
        "valves.csv, row 6, id 'P1', field 'id': duplicate pipe, pump or valve id 'P1'",
        "valves.csv, row 6, id 'P1', field 'pressure': pressure setting 500 psi is out of range",
    ]
    for e in expect:
        assert any(g.startswith(e) for g in got), (e, got)


def test_reducing_valve_above_supply_is_a_warning_not_an_error(make_folder):
    folder = make_folder(junctions=JUNCTIONS, pipes=PIPES)
    # 120 psi x 2.308965 ft/psi = 277 ft + 60 ft elevation = 337 ft > the 300 ft reservoir
    (folder / "valves.csv").write_text("id,from,to,diameter [in],type,pressure [psi]\n"
                                       "V1,J1,J2,8,pressure-reducing,120\n")
    net = read_network(folder)
    assert len(net.warnings) == 1
    text = str(net.warnings[0])
    assert text.startswith("valves.csv, row 2, id 'V1', field 'pressure': warning")
    assert "300.0 ft" in text


def test_valves_round_trip_through_tables_and_geojson(make_folder, tmp_path):
    folder = make_folder(junctions=JUNCTIONS, pipes=PIPES)
    (folder / "valves.csv").write_text(
        "id,from,to,diameter [in],type,pressure [psi],flow [gpm],loss_coefficient,status,"
        "minor_loss\n"
        "V1,J1,J2,8,pressure-reducing,50,,,,2\n"
        "V2,J2,J3,6,throttle,,,40,,\n"
        "V3,J2,J3,6,flow-limiting,,300,,closed,\n")
    net = read_network(folder)
    out = write_network_tables(net, tmp_path / "copy", units="si")
    back = read_network(out)
    geo = read_network(write_network_geojson(net, tmp_path / "net.geojson"))
    for other in (back, geo):
        assert list(other.valves.ids) == ["V1", "V2", "V3"]
        np.testing.assert_allclose(other.valves.setting, [50 * PSI, 40, 300 * GPM], rtol=1e-9)
        np.testing.assert_array_equal(other.valves.mode, [0, 0, int(ValveMode.CLOSED)])
        np.testing.assert_array_equal(other.valves.kind, net.valves.kind)
    features = json.loads((tmp_path / "net.geojson").read_text())["features"]
    assert sum(f["properties"]["kind"] == "valve" for f in features) == 3
