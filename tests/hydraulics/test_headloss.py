"""Head-loss laws against published values, reference libraries and closed forms."""

import numpy as np
import pytest
from scipy.optimize import brentq

from calib.hydraulics import headloss as hl
from calib.units import FT, G, GPM, INCH

# Hazen-Williams table, shared/reference/check-values.md "Hazen-Williams head loss" [C]: the values
# computed from the SI form h = 10.67 L Q^1.852 / (C^1.852 D^4.8704), printed to 0.001 ft.
HW_TABLE_SI = [  # D in, C, Q gpm, L ft, head loss ft
    (8, 100, 1000, 1000, 29.674),
    (8, 130, 1000, 1000, 18.254),
    (6, 120, 500, 1000, 23.809),
    (12, 130, 1500, 1000, 5.368),
    (12, 100, 2000, 1000, 14.868),
    (16, 120, 3000, 1000, 5.536),
    (4, 150, 250, 1000, 31.433),
]
# The same rows by the US form h = 4.727 L Q^1.852/(C^1.852 D^4.871) (ft, cfs), same source.
HW_TABLE_US = [29.694, 18.266, 23.828, 5.371, 14.874, 5.538, 31.467]


@pytest.mark.parametrize("row", HW_TABLE_SI)
def test_hazen_williams_table_si_form(row):
    d, c, q, length, expected = row
    h = hl.hazen_williams_headloss(q * GPM, length * FT, d * INCH, c) / FT
    assert h == pytest.approx(expected, abs=0.0006)  # printed precision 0.001 ft


@pytest.mark.parametrize("row,us", list(zip(HW_TABLE_SI, HW_TABLE_US)))
def test_hazen_williams_within_documented_gap_of_us_form(row, us):
    # check-values.md: the SI and US forms agree within 0.11 % over 4-16 in [C]
    d, c, q, length, _ = row
    h = hl.hazen_williams_headloss(q * GPM, length * FT, d * INCH, c) / FT
    assert abs(h / us - 1) < 0.0011


def test_hazen_williams_back_calculated_c():
    # check-values.md: 8 in, 2000 ft, 1000 gpm, 46.1332 ft (20 psi) gives C = 114.611 (US form);
    # the SI form gives a C about 0.04 % lower, inside the 0.11 % gap between the forms.
    c = brentq(lambda c: hl.hazen_williams_headloss(1000 * GPM, 2000 * FT, 8 * INCH, c)
               / FT - 46.1332, 50, 150, xtol=1e-10)
    assert c == pytest.approx(114.611, rel=0.0011)


def test_hazen_williams_law_is_the_law_above_q_eps():
    # closed form: above q_eps the regularized law is exactly r |Q|^0.852 Q, slope 1.852 r |Q|^0.852
    r = 1500.0
    q = np.array([-0.05, -1e-4, 2e-6, 1e-3, 0.2])
    h, g = hl.hazen_williams_law(q, r, q_eps=1e-6)
    np.testing.assert_allclose(h, r * np.abs(q) ** 0.852 * q, rtol=1e-14)
    np.testing.assert_allclose(g, 1.852 * r * np.abs(q) ** 0.852, rtol=1e-14)


def test_hazen_williams_law_by_exp_and_log_is_the_power_law_over_the_whole_range():
    # reference: numpy's power r |Q|^0.852 Q (the closed form) from q_eps to 20 m3/s, both signs,
    # each pipe its own r; the law computes |Q|^0.852 as exp(0.852 ln|Q|), which must agree to
    # rounding (a few ulp), not just to the solver's tolerances
    rng = np.random.default_rng(3)
    q = np.geomspace(1e-6, 20.0, 4001) * rng.choice([-1.0, 1.0], 4001)
    r = rng.uniform(1.0, 1e6, q.size)
    h, g = hl.hazen_williams_law(q, r, q_eps=1e-6)
    np.testing.assert_allclose(h, r * np.power(np.abs(q), 0.852) * q, rtol=4e-15, atol=0)
    np.testing.assert_allclose(g, 1.852 * r * np.power(np.abs(q), 0.852), rtol=4e-15, atol=0)


def test_hazen_williams_blend_matches_value_and_slope_and_is_monotone():
    # common practice: a C1 blend, odd, with positive slope at zero flow
    r, qe = 1500.0, 1e-6
    below, _ = hl.hazen_williams_law(np.array([qe * (1 - 1e-12)]), r, qe)
    above, _ = hl.hazen_williams_law(np.array([qe]), r, qe)
    assert below[0] == pytest.approx(above[0], rel=1e-9)
    _, g_below = hl.hazen_williams_law(np.array([qe * (1 - 1e-12)]), r, qe)
    assert g_below[0] == pytest.approx(1.852 * r * qe ** 0.852, rel=1e-9)
    q = np.linspace(-2 * qe, 2 * qe, 2001)
    h, g = hl.hazen_williams_law(q, r, qe)
    assert np.all(np.diff(h) > 0) and np.all(g > 0)
    np.testing.assert_allclose(h, -h[::-1], atol=1e-25)
    # slope by central differences agrees with the analytic slope (common practice)
    dq = 1e-10
    hp, _ = hl.hazen_williams_law(q + dq, r, qe)
    hm, _ = hl.hazen_williams_law(q - dq, r, qe)
    np.testing.assert_allclose((hp - hm) / (2 * dq), g, rtol=1e-4)


def test_hazen_williams_law_per_pipe_resistances_both_sides_of_q_eps_and_any_shape():
    # closed forms: r |Q|^0.852 Q above q_eps, r q_eps^1.852 (a x + b x^3) below (x = Q/q_eps,
    # b = 0.426, a = 0.574: the blend of the docstring), each pipe with its own r
    qe = 1e-6
    q = np.array([0.0, 3e-7, -0.01, -5e-7, 2e-3, qe])
    r = np.array([10.0, 2e3, 5e4, 7.0, 900.0, 1e5])
    x = q / qe
    law = r * np.abs(q) ** 0.852 * q
    blend = r * qe ** 1.852 * (0.574 * x + 0.426 * x ** 3)
    h, g = hl.hazen_williams_law(q, r, qe)
    np.testing.assert_allclose(h, np.where(np.abs(q) < qe, blend, law), rtol=1e-13, atol=0)
    slope = np.where(np.abs(q) < qe, r * qe ** 0.852 * (0.574 + 3 * 0.426 * x ** 2),
                     1.852 * r * np.abs(q) ** 0.852)
    np.testing.assert_allclose(g, slope, rtol=1e-13)
    h0, g0 = hl.hazen_williams_law(2e-7, 50.0, qe)  # scalars in, 0-d arrays out
    assert np.shape(h0) == () and float(h0) == pytest.approx(
        50.0 * qe ** 1.852 * (0.574 * 0.2 + 0.426 * 0.2 ** 3), rel=1e-13)
    h2, g2 = hl.hazen_williams_law(q.reshape(2, 3), r.reshape(2, 3), qe)
    np.testing.assert_array_equal(h2, h.reshape(2, 3))
    np.testing.assert_array_equal(g2, g.reshape(2, 3))


def test_minor_loss_is_k_v2_over_2g():
    # closed form h = K V^2 / (2 g)
    k, d, q = 3.5, 0.2, 0.04
    v = q / (np.pi * d ** 2 / 4)
    assert hl.minor_loss_coefficient(k, d) * q * q == pytest.approx(k * v ** 2 / (2 * G), rel=1e-13)


# --- Darcy-Weisbach -----------------------------------------------------------------------------

def test_colebrook_and_swamee_jain_published_values():
    # check-values.md: fluids.friction.Colebrook(1e5, 1e-4) = 0.018513866,
    # Swamee_Jain_1976(1e5, 1e-4) = 0.018452424 (printed to 9 digits)
    assert hl.colebrook(1e5, 1e-4) == pytest.approx(0.018513866, abs=1e-9)
    # fluids writes the constant as (6.97/Re)^0.9 = 5.7398/Re^0.9 where the paper prints 5.74:
    # about 1e-6 relative in f
    assert hl.swamee_jain_1976(1e5, 1e-4) == pytest.approx(0.018452424, rel=1e-5)


@pytest.mark.parametrize("re", [4e3, 1e4, 1e5, 1e6, 1e7, 1e8])
@pytest.mark.parametrize("rr", [1e-6, 1e-5, 1e-4, 1e-3, 1e-2])
def test_friction_factor_against_fluids(re, rr):
    # reference library: fluids (PyPI), friction.Colebrook and friction.Swamee_Jain_1976
    fluids = pytest.importorskip("fluids")
    assert hl.colebrook(re, rr) == pytest.approx(fluids.friction.Colebrook(re, rr), rel=1e-10)
    assert hl.swamee_jain_1976(re, rr) == pytest.approx(  # 5.74 vs (6.97)^0.9, see above
        fluids.friction.Swamee_Jain_1976(re, rr), rel=1e-4)
    f, _, _ = hl.darcy_friction_factor(np.array([re]), rr)
    assert f[0] == pytest.approx(fluids.friction.Colebrook(re, rr), rel=1e-10)


def test_laminar_friction_and_head_loss():
    # Hagen-Poiseuille: f = 64/Re, h = 128 nu L Q / (g pi D^4)
    f, _, _ = hl.darcy_friction_factor(np.array([500.0, 1999.0]), 1e-4)
    np.testing.assert_allclose(f, 64 / np.array([500.0, 1999.0]), rtol=1e-14)
    d, length, nu = 0.1, 100.0, 1.0e-6
    q = 1000 * np.pi * d * nu / 4  # Re = 1000
    h, g, _ = hl.darcy_weisbach_law(np.array([q, 0.0]), length, d, 1e-4, nu)
    assert h[0] == pytest.approx(128 * nu * length * q / (G * np.pi * d ** 4), rel=1e-12)
    assert h[1] == 0.0 and g[1] > 0


def test_transition_is_continuous_in_value_and_slope():
    # our cubic Hermite between Re 2000 and 4000 (documented in headloss.darcy_friction_factor)
    rr = 1e-4
    for re0 in (2000.0, 4000.0):
        f, df, _ = hl.darcy_friction_factor(np.array([re0 * (1 - 1e-9), re0 * (1 + 1e-9)]), rr)
        assert f[0] == pytest.approx(f[1], rel=1e-6)
        assert df[0] == pytest.approx(df[1], rel=1e-4)


def test_darcy_weisbach_derivatives_by_finite_differences():
    # common practice: analytic derivative against central differences, in every regime
    d, length = 0.15, 250.0
    area = np.pi * d ** 2 / 4
    nu = hl.NU_WATER_60F
    q = np.array([-0.05, 1500 * area * nu / d, 3000 * area * nu / d, 0.002, 0.08])
    e = np.full_like(q, 2.6e-4)
    h, g, dh_de = hl.darcy_weisbach_law(q, length, d, e)
    step = 1e-9
    hp, _, _ = hl.darcy_weisbach_law(q + step, length, d, e)
    hm, _, _ = hl.darcy_weisbach_law(q - step, length, d, e)
    np.testing.assert_allclose((hp - hm) / (2 * step), g, rtol=1e-5)
    turbulent = hl.reynolds_number(q, d) > 4000
    de = 1e-8
    hp, _, _ = hl.darcy_weisbach_law(q, length, d, e + de)
    hm, _, _ = hl.darcy_weisbach_law(q, length, d, e - de)
    np.testing.assert_allclose(((hp - hm) / (2 * de))[turbulent], dh_de[turbulent], rtol=1e-5)


def test_viscosity_constant_against_iapws():
    # reference library: iapws (PyPI), IAPWS-95 at 60 degF, 1 atm (tests only, GPL)
    iapws = pytest.importorskip("iapws")
    water = iapws.IAPWS95(T=273.15 + (60 - 32) * 5 / 9, P=0.101325)
    assert hl.NU_WATER_60F == pytest.approx(water.nu, rel=1e-4)


def test_iapws_viscosity_table_values():
    # check-values.md: IAPWS-95 kinematic viscosity at 10, 15, 20 C printed to 5 digits
    iapws = pytest.importorskip("iapws")
    for t, nu in ((10, 1.3063e-6), (15, 1.1386e-6), (20, 1.0034e-6)):
        assert iapws.IAPWS95(T=273.15 + t, P=0.101325).nu == pytest.approx(nu, rel=1e-4)


def test_blend_departs_from_the_law_by_at_most_the_documented_bound():
    # closed form: max over 0 <= x <= 1 of |0.574 x + 0.426 x^3 - x^1.852| = 0.0764 (at x = 0.323)
    r, qe = hl.hazen_williams_resistance(1000.0, 4 * INCH, 60.0), 1e-6
    q = np.linspace(-qe, qe, 20001)
    h, _ = hl.hazen_williams_law(q, r, qe)
    gap = np.abs(h - r * np.abs(q) ** 0.852 * q).max()
    assert gap <= 0.0765 * r * qe ** 1.852
    assert gap == pytest.approx(2.2e-7, rel=0.01)
