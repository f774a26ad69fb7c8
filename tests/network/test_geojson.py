"""GeoJSON (RFC 7946) networks: lengths from geometry against closed forms, and the same Network as
from the CSV tables."""

import json
import math
from pathlib import Path

import numpy as np
import pytest

from calib.errors import NetworkError
from calib.network.geojson import EARTH_RADIUS, haversine_length, planar_length
from calib.network.io import read_network, write_network_geojson

DEMO = Path(__file__).resolve().parents[2] / "field_samples" / "tallowmere"
FT = 0.3048  # NIST SP 811, exact


def assert_same_network(a, b, rtol=1e-12):
    assert list(a.node_ids) == list(b.node_ids) and list(a.pipe_ids) == list(b.pipe_ids)
    for name in ("elevation", "demand", "source_head", "length", "diameter", "roughness",
                 "minor_loss", "roughness_height", "installed", "x", "y"):
        np.testing.assert_allclose(getattr(a, name), getattr(b, name), rtol=rtol, atol=1e-9,
                                   equal_nan=True, err_msg=name)
    for name in ("pipe_from", "pipe_to", "status", "hydrant"):
        np.testing.assert_array_equal(getattr(a, name), getattr(b, name), err_msg=name)
    for name in ("group", "material", "source_kind", "zone"):
        assert list(getattr(a, name)) == list(getattr(b, name)), name


def test_earth_radius_is_the_iugg_mean_radius():
    assert EARTH_RADIUS == 6371008.8  # Moritz 1980, Geodetic Reference System 1980: R1


def test_one_degree_of_latitude_is_pi_r_over_180():
    # closed form: an arc of a great circle is R times its central angle
    assert haversine_length([10.0, 10.0], [45.0, 46.0]) == pytest.approx(
        math.pi * EARTH_RADIUS / 180, rel=1e-12)
    assert math.pi * EARTH_RADIUS / 180 == pytest.approx(111195.08, abs=0.01)


def test_quarter_meridian_and_quarter_equator():
    quarter = math.pi * EARTH_RADIUS / 2  # closed form, as above
    assert haversine_length([0.0, 0.0], [0.0, 90.0]) == pytest.approx(quarter, rel=1e-12)
    assert haversine_length([0.0, 90.0], [0.0, 0.0]) == pytest.approx(quarter, rel=1e-12)
    # a polyline adds its segments
    assert haversine_length([0.0, 45.0, 90.0], [0.0, 0.0, 0.0]) == pytest.approx(quarter, rel=1e-12)


def test_haversine_against_the_spherical_law_of_cosines():
    # spherical law of cosines for the central angle (any spherical trigonometry text); it is
    # well conditioned for points this far apart
    lon, lat = np.radians([-3.0, 21.5]), np.radians([52.0, 37.25])
    angle = math.acos(math.sin(lat[0]) * math.sin(lat[1])
                      + math.cos(lat[0]) * math.cos(lat[1]) * math.cos(lon[1] - lon[0]))
    assert haversine_length([-3.0, 21.5], [52.0, 37.25]) == pytest.approx(
        EARTH_RADIUS * angle, rel=1e-10)


def test_planar_length_is_the_sum_of_segments():
    assert planar_length([0, 3, 3], [0, 4, 10]) == pytest.approx(5 + 6, rel=1e-15)  # 3-4-5


def _collection(features, **top):
    return {"type": "FeatureCollection", **top, "features": features}


def _point(ident, kind, x, y, **props):
    return {"type": "Feature", "geometry": {"type": "Point", "coordinates": [x, y]},
            "properties": {"id": ident, "kind": kind, **props}}


def _line(ident, frm, to, coords, **props):
    return {"type": "Feature", "geometry": {"type": "LineString", "coordinates": coords},
            "properties": {"id": ident, "from": frm, "to": to, "diameter [in]": 8,
                           "roughness": 120, **props}}


def _nodes(lonlat=False):
    a, b, c = ((0.0, 0.0), (0.0, 0.01), (0.01, 0.01)) if lonlat else ((0, 0), (300, 400),
                                                                      (300, 700))
    return [_point("R1", "reservoir", *a, **{"head [ft]": 250}),
            _point("J1", "junction", *b, **{"elevation [ft]": 100, "demand [gpm]": 40}),
            _point("J2", "junction", *c, **{"elevation [ft]": 105, "demand [gpm]": 10,
                                            "hydrant": True})]


def test_projected_feet_lengths_from_geometry(tmp_path):
    path = tmp_path / "town.geojson"
    features = _nodes() + [_line("P1", "R1", "J1", [[0, 0], [300, 400]]),
                           _line("P2", "J1", "J2", [[300, 400], [300, 700]], **{"length [ft]": 310})]
    path.write_text(json.dumps(_collection(features, length_unit="ft")))
    net = read_network(path)
    np.testing.assert_allclose(net.length, [500 * FT, 310 * FT], rtol=1e-14)  # 3-4-5; property
    np.testing.assert_allclose(net.x, [300 * FT, 300 * FT, 0.0])  # junctions first, in metres
    np.testing.assert_allclose(net.pipe_geometry[0], [(0.0, 0.0), (300 * FT, 400 * FT)],
                               rtol=1e-14)
    assert list(net.source_kind) == ["reservoir"] and list(net.hydrant) == [False, True]


def test_lon_lat_lengths_by_haversine(tmp_path):
    path = tmp_path / "town.geojson"
    features = _nodes(lonlat=True) + [_line("P1", "R1", "J1", [[0.0, 0.0], [0.0, 0.01]]),
                                      _line("P2", "J1", "J2", [[0.0, 0.01], [0.01, 0.01]])]
    path.write_text(json.dumps(_collection(features)))
    net = read_network(path)
    assert net.length[0] == pytest.approx(math.pi * EARTH_RADIUS * 0.01 / 180, rel=1e-12)
    # along a parallel the great circle is a hair shorter than R cos(lat) dlon: check both sides
    along_parallel = EARTH_RADIUS * math.cos(math.radians(0.01)) * math.radians(0.01)
    assert net.length[1] == pytest.approx(along_parallel, rel=1e-8)
    assert net.x[2] == 0.0 and net.y[2] == 0.0  # source R1 kept in degrees


def test_demo_geojson_and_csv_give_the_same_network():
    assert_same_network(read_network(DEMO / "network"), read_network(DEMO / "network.geojson"))


@pytest.mark.parametrize("units, length_unit", [("us", "ft"), ("si", "m")])
def test_write_and_read_back(tmp_path, units, length_unit):
    net = read_network(DEMO / "network")
    calibrated = net.replace(roughness=net.roughness * 0.9)
    path = write_network_geojson(calibrated, tmp_path / "calibrated.geojson", units=units,
                                 length_unit=length_unit)
    assert_same_network(calibrated, read_network(path))
    assert not [p for p in tmp_path.iterdir() if p.name.endswith(".tmp")]


def test_pumps_round_trip(make_folder, tmp_path):
    folder = make_folder(pumps="id,from,to,design_head [ft],design_flow [gpm],speed\n"
                               "PU1,R1,J2,60,300,0.95\n")
    net = read_network(folder)
    back = read_network(write_network_geojson(net, tmp_path / "p.geojson"))
    for name in ("shutoff_head", "curve_r", "curve_n", "speed"):
        np.testing.assert_allclose(getattr(back.pumps, name), getattr(net.pumps, name),
                                   rtol=1e-9, err_msg=name)


def test_geojson_problems_name_the_feature(tmp_path):
    path = tmp_path / "bad.geojson"
    features = _nodes() + [
        _line("P1", "R1", "J9", [[0, 0], [300, 400]]),
        {"type": "Feature", "geometry": {"type": "Point", "coordinates": [1, 2]},
         "properties": {"id": "X1"}},
        _line("P3", "J1", "J2", [[300, 400]]),
    ]
    path.write_text(json.dumps(_collection(features, length_unit="ft")))
    with pytest.raises(NetworkError) as err:
        read_network(path)
    got = [str(p) for p in err.value.problems]
    assert ("bad.geojson, row 4, id 'P1', field 'to': node 'J9' is not in the nodes "
            "(expected the id of a junction or a source)") in got
    assert ("bad.geojson, row 5, id 'X1', field 'kind': the feature has no kind (expected "
            "junction, source (reservoir or tank), pipe, pump or valve)") in got
    assert ("bad.geojson, row 6, id 'P3', field 'geometry': a LineString needs at least two "
            "positions (expected a LineString geometry)") in got


def test_not_a_feature_collection(tmp_path):
    path = tmp_path / "x.geojson"
    path.write_text('{"type": "Feature"}')
    with pytest.raises(NetworkError, match="x.geojson: is not a GeoJSON FeatureCollection"):
        read_network(path)


def test_tank_kinds_and_pumps_in_geojson(tmp_path):
    path = tmp_path / "t.geojson"
    features = _nodes() + [
        _point("T1", "tank", 0, 900, **{"head [ft]": 240, "elevation [ft]": 150}),
        _point("R2", "source", 0, 950, **{"head [ft]": 235, "source_kind": "tank"}),
        _line("P1", "R1", "J1", [[0, 0], [300, 400]]),
        _line("P2", "J1", "J2", [[300, 400], [300, 700]]),
        _line("P3", "T1", "J2", [[0, 900], [300, 700]]),
        _line("P4", "R2", "J2", [[0, 950], [300, 700]]),
        {"type": "Feature", "geometry": {"type": "LineString", "coordinates": [[0, 0], [1, 1]]},
         "properties": {"id": "PU1", "kind": "pump", "from": "R1", "to": "J1",
                        "design_head [ft]": 60, "design_flow [gpm]": 300}},
    ]
    path.write_text(json.dumps(_collection(features, length_unit="ft")))
    net = read_network(path)
    assert list(net.source_ids) == ["R1", "T1", "R2"]
    assert list(net.source_kind) == ["reservoir", "tank", "tank"]
    # a source without an elevation takes its head (the model contract)
    np.testing.assert_allclose(net.elevation[2:], [250 * FT, 150 * FT, 235 * FT], rtol=1e-14)
    assert list(net.pumps.ids) == ["PU1"]
