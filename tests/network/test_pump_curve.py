"""Pump head curves h = h0 - r q^n: the three-point fit against closed-form curves, the single-point
convention (common practice: shutoff 1.33 x design head, zero head at 2 x design flow), pumps.csv."""

import math

import numpy as np
import pytest

from calib.errors import NetworkError
from calib.network.io import read_network
from calib.network.pump_curve import design_point_curve, three_point_curve

FT, GPM = 0.3048, 3.785411784e-3 / 60  # NIST SP 811, exact


@pytest.mark.parametrize("h0, r, n", [(50.0, 2000.0, 2.0), (80.0, 150.0, 1.5), (30.0, 5e4, 2.6)])
def test_three_points_of_a_known_curve_give_it_back(h0, r, n):
    q = np.array([0.01, 0.05, 0.09])
    h = h0 - r * q ** n  # closed-form curve, evaluated exactly
    got = three_point_curve(q, h)
    np.testing.assert_allclose(got, (h0, r, n), rtol=1e-9)


def test_three_points_in_any_order():
    q, h = np.array([0.0, 0.04, 0.08]), 60.0 - 3000.0 * np.array([0.0, 0.04, 0.08]) ** 2
    np.testing.assert_allclose(three_point_curve(q[::-1], h[::-1]), (60.0, 3000.0, 2.0), rtol=1e-9)


def test_rising_curve_is_refused():
    with pytest.raises(ValueError, match="monotone decreasing"):
        three_point_curve([0.0, 0.04, 0.08], [50.0, 52.0, 40.0])


def test_design_point_convention():
    h0, r, n = design_point_curve(40.0, 0.05)
    assert h0 == pytest.approx(1.33 * 40.0, rel=1e-15)  # common practice: shutoff 1.33 x design
    assert h0 - r * 0.05 ** n == pytest.approx(40.0, rel=1e-12)  # passes the design point
    assert h0 - r * 0.10 ** n == pytest.approx(0.0, abs=1e-9)  # zero head at 2 x design flow
    assert n == pytest.approx(math.log(1.33 / 0.33) / math.log(2), rel=1e-12)


def test_pumps_table_three_points_and_design_point(make_folder):
    folder = make_folder(
        sources="id,head [ft]\nR1,120\n",
        pipes="id,from,to,length [ft],diameter [in],roughness\nP1,J1,J2,500,6,120\n",
        pumps="id,from,to,head_1 [ft],flow_1 [gpm],head_2 [ft],flow_2 [gpm],head_3 [ft],"
              "flow_3 [gpm],design_head [ft],design_flow [gpm],speed\n"
              "PU1,R1,J1,200,0,180,500,120,1000,,,\n"
              "PU2,R1,J1,,,,,,,150,600,0.9\n")
    net = read_network(folder)
    pumps = net.pumps
    assert list(pumps.ids) == ["PU1", "PU2"]
    q = np.array([0, 500, 1000]) * GPM
    h = pumps.shutoff_head[0] - pumps.curve_r[0] * q ** pumps.curve_n[0]
    np.testing.assert_allclose(h, np.array([200, 180, 120]) * FT, rtol=1e-9)
    assert pumps.shutoff_head[1] == pytest.approx(1.33 * 150 * FT, rel=1e-12)
    np.testing.assert_allclose(pumps.speed, [1.0, 0.9])


def test_pump_without_curve_is_reported(make_folder):
    folder = make_folder(
        pumps="id,from,to,head_1 [ft],flow_1 [gpm],speed\nPU1,R1,J2,200,0,1\n")
    with pytest.raises(NetworkError) as err:
        read_network(folder)
    assert "pumps.csv, row 2, id 'PU1', field 'head_1': the pump has no head curve" in str(err.value)
