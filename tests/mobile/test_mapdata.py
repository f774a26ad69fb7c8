"""The map's geometry without a window: fitting, picking by a tap, nearest first, device position."""

import math

import numpy as np
import pytest

from mobile.services import mapdata, views
from mobile.services.area import Area
from mobile.services.demo import builtin_network


@pytest.fixture
def grid():
    return mapdata.MapData.from_area(Area.from_network(builtin_network(), name="Tallowmere"))


def test_fit_keeps_the_whole_network_in_view_with_one_scale(grid):
    v = grid.fit(800, 600, pad=20)
    px, py = v.to_px(grid.x, grid.y)
    assert px.min() >= 20 - 1e-9 and px.max() <= 780 + 1e-9
    assert py.min() >= 20 - 1e-9 and py.max() <= 580 + 1e-9
    x, y = v.to_map(*v.to_px(750.0, 0.0))
    assert (x, y) == pytest.approx((750.0, 0.0))  # round trip


def test_a_tap_picks_the_nearest_junction_within_reach(grid):
    # the grid is 250 m x 220 m between junctions (builtin_network): TM-101 at (0, 0)
    assert grid.nearest(10.0, -5.0, within=30.0) == "TM-101"
    assert grid.nearest(125.0, 110.0, within=30.0) is None  # open map between junctions
    assert grid.nearest(-300.0, 0.0, within=5.0) is None  # the reservoir is not a junction


def test_nearest_first_by_plain_distance(grid):
    # TM-111 is 220 m north of TM-101, TM-102 250 m east, TM-112 sqrt(250^2 + 220^2) = 333.0 m
    got = grid.nearest_first(0.0, 0.0, count=4)
    assert [i for i, _ in got] == ["TM-101", "TM-111", "TM-102", "TM-112"]
    assert [d for _, d in got] == pytest.approx([0.0, 220.0, 250.0, 333.0], abs=0.05)


def test_device_position_only_on_a_longitude_latitude_map(grid):
    assert not grid.lonlat and grid.position(-1.5, 53.4) is None
    outcome, here = views.located(grid, -1.5, 53.4)
    assert not outcome.ok and here == [] and "tap where you stand" in outcome.message


def test_equirectangular_distance_matches_a_degree_of_latitude():
    # one degree of latitude on a sphere of the IUGG mean radius: 6371008.8 * pi / 180 = 111195.1 m
    assert float(mapdata.equirectangular(0.0, 10.0, 0.0, 11.0)) == pytest.approx(111195.1, abs=0.5)
    # one degree of longitude at 60 deg latitude is half of that (cos 60 = 0.5)
    assert float(mapdata.equirectangular(0.0, 60.0, 1.0, 60.0)) == pytest.approx(111195.1 / 2, abs=0.5)


def test_lonlat_networks_are_recognized():
    net = builtin_network()
    lon = -2.0 + net.x / 1e5
    lat = 53.0 + net.y / 1e5
    m = mapdata.MapData.from_area(Area.from_network(net.replace(x=lon, y=lat), name="T"))
    assert m.lonlat and m.position(-2.0, 53.0) == (-2.0, 53.0)
    (first, d), *_ = m.nearest_first(-2.0, 53.0)
    assert first == "TM-101" and d == pytest.approx(0.0, abs=1e-6)
    assert math.isfinite(np.sum(m.x))


def test_no_coordinates_no_map():
    net = builtin_network()
    nan = np.full(net.n_nodes, np.nan)
    assert mapdata.MapData.from_area(Area.from_network(net.replace(x=nan, y=nan))) is None
