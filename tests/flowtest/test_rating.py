"""Rated flow (NFPA 291 0.54 formula), its inverse, the curve points and the hydraulic grade.

Worked values from ../shared/reference/check-values.md "Worked arithmetic" [C] (computed from the
NFPA 291 formula), printed to 0.01 gpm.
"""

import math

import numpy as np
import pytest
from hypothesis import assume, given, settings
from hypothesis import strategies as st

from calib.errors import FlowTestError
from calib.flowtest import (hydrant_curve, hydraulic_grade, n185, pitot_discharge, rated_flow,
                            residual_at_flow)
from calib.flowtest.rating import EXPONENT
from calib.units import FT, GPM, PSI, Q_

PRINTED = 0.005  # gpm


def test_q20_worked_example_800_gpm_65_50():
    # check-values.md: Q20 = 800 x 3^0.54 = 1447.89 gpm (3^0.54 = 1.8098621), NFPA 291 formula.
    assert 3 ** 0.54 == pytest.approx(1.8098621, abs=5e-8)
    assert rated_flow("800 gpm", "65 psi", "50 psi") / GPM == pytest.approx(1447.89, abs=PRINTED)


def test_the_22_psi_example():
    # check-values.md: c 0.90, 2.5 in, 22 psi -> 787.02 gpm; static 72, residual 58 -> Q20 1598.53,
    # Q at 30 psi 1424.40, at 40 psi 1229.87; drop 19.4 % of static.
    q = pitot_discharge("22 psi", "2.5 in", 0.9)
    assert q / GPM == pytest.approx(787.02, abs=PRINTED)
    assert rated_flow(q, "72 psi", "58 psi") / GPM == pytest.approx(1598.53, abs=PRINTED)
    assert rated_flow(q, "72 psi", "58 psi", "30 psi") / GPM == pytest.approx(1424.40, abs=PRINTED)
    assert rated_flow(q, "72 psi", "58 psi", "40 psi") / GPM == pytest.approx(1229.87, abs=PRINTED)
    assert (72 - 58) / 72 == pytest.approx(0.194, abs=5e-4)


def test_us_and_si_inputs_give_the_same_answer():
    # Same test in SI: 800 gpm = 50.4721 L/s, 65 psi = 448.1592 kPa, 50 psi = 344.7379 kPa,
    # 20 psi = 137.8951 kPa (NIST SP 811 factors: 1 gal = 3.785411784 L; 1 psi = 6.894757293 kPa).
    us = rated_flow("800 gpm", "65 psi", "50 psi", "20 psi")
    si = rated_flow("50.47215712 L/s", "448.1592240 kPa", "344.7378647 kPa", "137.8951459 kPa")
    assert si == pytest.approx(us, rel=1e-8)
    assert residual_at_flow("1447.89 gpm", "800 gpm", "65 psi", "50 psi") == pytest.approx(
        residual_at_flow(f"{1447.89 * 3.785411784 / 60:.9f} L/s", "50.47215712 L/s", "448.1592240 kPa",
                         "344.7378647 kPa"), rel=1e-7)


def test_arrays_are_rated_elementwise():
    q = rated_flow(np.array([800.0, 1000.0]) * GPM, 65 * PSI, np.array([50.0, 45.0]) * PSI)
    assert q.shape == (2,)
    assert q[0] / GPM == pytest.approx(1447.89, abs=PRINTED)
    assert q[1] / GPM == pytest.approx(1000 * (45 / 20) ** 0.54, rel=1e-12)  # formula written out


pressures = st.tuples(st.floats(20.0, 200.0), st.floats(0.05, 0.95), st.floats(0.0, 0.99))


@settings(deadline=None)  # no timed assertions in this suite
@given(flow=st.floats(10.0, 5000.0), p=pressures, lower=st.floats(0.01, 0.99))
def test_lower_target_gives_more_rated_flow(flow, p, lower):
    # Property of the NFPA 291 formula: Q_R decreases as P_t rises.
    ps, fr, ft = p
    pr = ps * fr
    pt = ps * ft
    assume(pt * lower < pt - 1e-6)
    assert rated_flow(flow * GPM, ps * PSI, pr * PSI, pt * lower * PSI) > rated_flow(flow * GPM, ps * PSI, pr * PSI, pt * PSI)


@settings(deadline=None)  # no timed assertions in this suite
@given(flow=st.floats(10.0, 5000.0), p=pressures)
def test_target_equal_to_residual_returns_the_test_flow(flow, p):
    ps, fr, _ = p
    pr = ps * fr * PSI
    assert rated_flow(flow * GPM, ps * PSI, pr, pr) == pytest.approx(flow * GPM, rel=1e-12)


@settings(deadline=None)  # no timed assertions in this suite
@given(flow=st.floats(10.0, 5000.0), p=pressures)
def test_inverse_round_trip(flow, p):
    # residual_at_flow is rated_flow solved for the pressure: both ways round.
    ps, fr, ft = p
    ps, pr, pt = ps * PSI, ps * fr * PSI, ps * ft * PSI
    q = flow * GPM
    qr = rated_flow(q, ps, pr, pt)
    assert residual_at_flow(qr, q, ps, pr) == pytest.approx(pt, abs=1e-6 * ps)
    assert residual_at_flow(q, q, ps, pr) == pytest.approx(pr, rel=1e-12)
    assert residual_at_flow(0.0, q, ps, pr) == ps


def test_residual_at_flow_worked_value():
    # Inverse of the 65/50 example: at 1447.89 gpm the residual is back at 20 psi (to print precision).
    assert residual_at_flow("1447.89 gpm", "800 gpm", "65 psi", "50 psi") / PSI == pytest.approx(20.0, abs=0.01)


def test_curve_points_and_n185_axis():
    c = hydrant_curve("800 gpm", "65 psi", "50 psi")
    np.testing.assert_allclose(c.flows / GPM, [0.0, 800.0, 1447.89], atol=PRINTED)
    np.testing.assert_allclose(c.pressures / PSI, [65.0, 50.0, 20.0], rtol=1e-12)
    # Closed form: with x = Q^(1/0.54) the three points are collinear (the formula is a straight
    # line P = P_s - k x); the N^1.85 paper axis (exponent 1.85) is within drawing accuracy of it.
    x = n185(c.flows / GPM, exponent=1.0 / EXPONENT)
    slopes = np.diff(c.pressures) / np.diff(x)
    assert slopes[0] == pytest.approx(slopes[1], rel=1e-10)
    assert n185(1000.0) == pytest.approx(1000.0 ** 1.85, rel=1e-12)
    x185 = n185(c.flows / GPM)
    s185 = np.diff(c.pressures) / np.diff(x185)
    assert s185[0] == pytest.approx(s185[1], rel=0.01)
    q, p = c.line(11)
    assert q[0] == 0 and p[0] == pytest.approx(c.static) and p[-1] == pytest.approx(c.target, rel=1e-9)


def test_hydraulic_grade_at_the_gauge():
    # H = p / gamma + z + h_g, 60 degF water: 1 psi = 2.308965 ft (NIST SP 811 via pint ft_H2O_60F).
    h = hydraulic_grade("50 psi", "100 ft", "2 ft")
    assert h / FT == pytest.approx(50 * 2.308965 + 102.0, abs=5e-4)
    assert hydraulic_grade(0.0, 30.0) == 30.0
    assert hydraulic_grade(Q_(0, "psi"), Q_(10.0, "m"), Q_(0.5, "m")) == pytest.approx(10.5)


@pytest.mark.parametrize("args, field", [
    (("800 gpm", "50 psi", "65 psi"), "residual"),
    (("800 gpm", "50 psi", "50 psi"), "residual"),
    (("800 gpm", "65 psi", "50 psi", "70 psi"), "target"),
    (("800 gpm", "65 psi", "50 psi", "-1 psi"), "target"),
    (("-800 gpm", "65 psi", "50 psi"), "flow"),
    (("800 ft", "65 psi", "50 psi"), "flow"),
    (("800 gpm", "65 m", "50 psi"), "static"),
])
def test_rated_flow_rejects_bad_input(args, field):
    with pytest.raises(FlowTestError, match=f"field '{field}'"):
        rated_flow(*args)


def test_residual_at_flow_rejects_zero_test_flow():
    with pytest.raises(FlowTestError, match="field 'flow'"):
        residual_at_flow("100 gpm", 0.0, "65 psi", "50 psi")
