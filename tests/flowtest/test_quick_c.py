"""Quick C (two-gauge method, Walski 1983 J. Water Resour. Plann. Manage. 109(4); Walski 1984 book):
back-calculation against a handbook-form value, recovery of a synthetic C, and the interval."""

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from calib.errors import FlowTestError
from calib.flowtest import hazen_williams_c, hydraulic_grade, quick_c
from calib.units import FT, GAMMA_WATER, GPM, INCH, PSI


def us_form_headloss_ft(c, d_in, q_gpm, l_ft):
    """Hazen-Williams US form written out (check-values.md [M, high]): h = 4.727 L Q^1.852 / (C^1.852
    D^4.871), h, L, D in ft, Q in cfs; independent of the package's SI constants."""
    q_cfs = q_gpm * 0.0022280093  # 1 gpm = 0.0022280093 cfs (231 in3 gallon)
    return 4.727 * l_ft * q_cfs ** 1.852 / (c ** 1.852 * (d_in / 12) ** 4.871)


def test_back_calculation_check_value():
    # check-values.md [C]: 8 in, 2000 ft, 1000 gpm, 20 psi loss (46.1332 ft) gives C = 114.611 with the
    # US form. Ours is the solver's SI form (10.67, D^4.8704); the two forms differ by up to 0.11 %
    # (check-values.md), here 0.04 %: tolerance 0.11 %.
    c = hazen_williams_c(1000 * GPM, 2000 * FT, 8 * INCH, 46.1332 * FT)
    assert c == pytest.approx(114.611, rel=1.1e-3)


@pytest.mark.parametrize("c_true, d_in, q_gpm", [(130, 8, 1000), (120, 6, 500), (100, 12, 2000), (150, 4, 250)])
def test_recovers_the_c_of_a_synthetic_reading(c_true, d_in, q_gpm):
    # The reading is made with the independent US form; recovery within the 0.11 % form gap.
    h_ft = us_form_headloss_ft(c_true, d_in, q_gpm, 1000.0)
    up = hydraulic_grade(60 * PSI, 100 * FT)
    down = up - h_ft * FT
    est = quick_c(q_gpm * GPM, 1000 * FT, d_in * INCH, up, down)
    assert est.c == pytest.approx(c_true, rel=1.1e-3)
    assert est.low < est.c < est.high
    assert est.findings == []


@settings(deadline=None)  # no timed assertions in this suite
@given(c=st.floats(40.0, 160.0), q=st.floats(100.0, 3000.0), d=st.floats(4.0, 24.0), length=st.floats(100.0, 5000.0))
def test_round_trip_against_the_si_form_written_out(c, q, d, length):
    # Hazen-Williams SI form (check-values.md): h = 10.67 L Q^1.852 / (C^1.852 D^4.8704), written here.
    qs, ls, ds = q * GPM, length * FT, d * INCH
    h = 10.67 * ls * qs ** 1.852 / (c ** 1.852 * ds ** 4.8704)
    assert hazen_williams_c(qs, ls, ds, h) == pytest.approx(c, rel=1e-9)


def test_interval_widens_as_the_drop_shrinks():
    # Same main and C, less flow -> smaller head loss -> the same +/- 1 psi gauges weigh more.
    widths = []
    for q_gpm in (1500, 1000, 700, 500):
        h_ft = us_form_headloss_ft(110, 8, q_gpm, 2000.0)
        est = quick_c(q_gpm * GPM, 2000 * FT, 8 * INCH, 200 * FT, 200 * FT - h_ft * FT)
        widths.append((est.high - est.low) / est.c)
    assert all(b > a for a, b in zip(widths, widths[1:])), widths


def test_bounds_are_exact_evaluations_at_h_plus_minus_the_combined_error():
    est = quick_c(1000 * GPM, 2000 * FT, 8 * INCH, 150.0, 140.0)  # grades in m: 10 m of loss
    e = math.hypot(PSI, PSI) / GAMMA_WATER  # two +/- 1 psi gauges, root sum of squares
    assert est.head_error == pytest.approx(e, rel=1e-12)
    assert est.low == pytest.approx(hazen_williams_c(1000 * GPM, 2000 * FT, 8 * INCH, 10.0 + e), rel=1e-12)
    assert est.high == pytest.approx(hazen_williams_c(1000 * GPM, 2000 * FT, 8 * INCH, 10.0 - e), rel=1e-12)


def test_first_order_sigma_matches_a_numerical_derivative():
    # sigma = |dC/dh| e (+) |dC/dQ| f; checked against central differences (common practice).
    q, length, d, h = 1000 * GPM, 2000 * FT, 8 * INCH, 12.0
    est = quick_c(q, length, d, 100.0 + h, 100.0, upstream_error=0.0, flow_error=0.03)
    step = 1e-6
    dc_dh = (hazen_williams_c(q, length, d, h + step) - hazen_williams_c(q, length, d, h - step)) / (2 * step)
    dc_dq = (hazen_williams_c(q * (1 + step), length, d, h) - hazen_williams_c(q * (1 - step), length, d, h)) / (2 * step)
    expected = math.hypot(dc_dh * PSI / GAMMA_WATER, dc_dq * 0.03)
    assert est.sigma == pytest.approx(expected, rel=1e-5)


def test_flow_uncertainty_widens_the_interval():
    a = quick_c(1000 * GPM, 2000 * FT, 8 * INCH, 150.0, 140.0)
    b = quick_c(1000 * GPM, 2000 * FT, 8 * INCH, 150.0, 140.0, flow_error=0.05)
    assert b.low < a.low and b.high > a.high and b.sigma > a.sigma and b.c == a.c


def test_known_grade_with_one_gauge():
    # A tank level taken as exact: only the downstream gauge's error counts.
    est = quick_c(1000 * GPM, 2000 * FT, 8 * INCH, "150 m", "140 m", upstream_error=0.0)
    assert est.head_error == pytest.approx(PSI / GAMMA_WATER, rel=1e-12)


def test_drop_not_larger_than_gauge_error_is_unbounded_above():
    est = quick_c(300 * GPM, 500 * FT, 12 * INCH, 100.0, 99.2)  # 0.8 m of loss, 1.0 m combined error
    assert est.high == math.inf and est.sigma == math.inf and not est.bounded
    assert est.low > 0 and math.isfinite(est.c)
    assert [f.code for f in est.findings] == ["quick-c-unbounded"]
    assert "lower bound" in est.findings[0].message


@pytest.mark.parametrize("kwargs, field", [
    (dict(flow=0.0), "flow"),
    (dict(length=-5.0), "length"),
    (dict(diameter="8 psi"), "diameter"),
    (dict(downstream_grade=120.0), "downstream grade"),  # grade rises 20 m along the flow
    (dict(flow_error="lots"), "flow error"),
])
def test_bad_input_raises(kwargs, field):
    args = dict(flow=1000 * GPM, length=600.0, diameter=0.2, upstream_grade=100.0, downstream_grade=95.0)
    args.update(kwargs)
    with pytest.raises(FlowTestError, match=f"field '{field}'"):
        quick_c(**args)


def test_hazen_williams_c_takes_arrays():
    h = np.array([10.0, 5.0, 0.0])
    c = hazen_williams_c(1000 * GPM, 600.0, 0.2, h)
    assert c.shape == (3,) and c[2] == math.inf
    assert c[0] == pytest.approx(hazen_williams_c(1000 * GPM, 600.0, 0.2, 10.0), rel=1e-14)
    assert c[1] / c[0] == pytest.approx(2 ** (1 / 1.852), rel=1e-12)  # C ~ h^(-1/1.852), closed form
