"""Head-loss laws of a pipe: Hazen-Williams (regularized near zero flow), Darcy-Weisbach, minor losses.

Every function works on numpy arrays of plain SI floats (m, m3/s) and returns the head loss [m] and,
where the solver needs it, its derivative with respect to flow [m / (m3/s)]. The solver in
``calib.hydraulics.solver`` calls these on whole arrays of pipes at once; no Quantity ever gets here.

Not here: pumps (their head gain is in the solver, since it has a status), equivalent pipes
(``calib.hydraulics.equivalent``).
"""

from __future__ import annotations

import numpy as np

from calib.units import G

#: Hazen-Williams SI coefficient [s^1.852 m^-0.37...]: h = 10.67 L Q^1.852 / (C^1.852 D^4.8704).
HW_COEFFICIENT = 10.67
#: Flow exponent of Hazen-Williams [-].
HW_FLOW_EXPONENT = 1.852
#: Diameter exponent of Hazen-Williams, SI form [-].
HW_DIAMETER_EXPONENT = 4.8704
#: Below this flow [m3/s] (0.016 gpm) the Hazen-Williams law is replaced by a smooth blend.
HW_Q_EPS = 1e-6
#: Kinematic viscosity of water at 60 degF [m2/s] (IAPWS-95 via the ``iapws`` package, 15.56 C,
#: 1 atm: 1.12214e-6), the same water as ``calib.units.GAMMA_WATER``.
NU_WATER_60F = 1.12214e-6

# Blend coefficients: h = r q_eps^n (a x + b x^3), x = q / q_eps, with a + b = 1 (value) and
# a + 3 b = n (slope) at x = 1; both positive, so the blend is monotone and odd like the law itself.
_BLEND_B = (HW_FLOW_EXPONENT - 1.0) / 2.0
_BLEND_A = 1.0 - _BLEND_B

#: Laminar and turbulent ends of the Darcy-Weisbach transition [-].
RE_LAMINAR = 2000.0
RE_TURBULENT = 4000.0


def hazen_williams_resistance(length, diameter, c):
    """Hazen-Williams resistance r of a pipe, such that h = r |Q|^0.852 Q.

    Equation (Hazen-Williams, SI form): ``r = 10.67 L / (C^1.852 D^4.8704)``
    with L length [m], D inside diameter [m], C Hazen-Williams coefficient [-], giving r in
    [m / (m3/s)^1.852]. The US form ``h = 4.727 L Q^1.852 / (C^1.852 D^4.871)`` (ft, cfs), from
    Williams and Hazen's ``V = 1.318 C R^0.63 S^0.54``, gives about 0.1 % more over 4-16 in pipes;
    this package uses the SI form throughout. Holds for water in turbulent flow, C 1-200.

    Example: 8 in, C 100, 1000 ft, 1000 gpm -> h = 9.045 m (29.67 ft).

    Source: the SI form as printed in water distribution texts, e.g. Walski et al., Advanced Water
    Distribution Modeling and Management (2003), table of friction formulas (from memory).
    """
    length = np.asarray(length, dtype=float)
    diameter = np.asarray(diameter, dtype=float)
    c = np.asarray(c, dtype=float)
    return HW_COEFFICIENT * length / (c ** HW_FLOW_EXPONENT * diameter ** HW_DIAMETER_EXPONENT)


def hazen_williams_headloss(q, length, diameter, c):
    """Plain (unregularized) Hazen-Williams head loss h = r |Q|^0.852 Q [m]; Q in [m3/s].

    See ``hazen_williams_resistance`` for r, its units and its source. Sign follows Q.
    """
    q = np.asarray(q, dtype=float)
    r = hazen_williams_resistance(length, diameter, c)
    return r * np.abs(q) ** (HW_FLOW_EXPONENT - 1.0) * q


def hazen_williams_law(q, r, q_eps: float = HW_Q_EPS):
    """Regularized Hazen-Williams head loss and its derivative: ``(h, dh/dQ)``.

    For ``|Q| >= q_eps``: ``h = r |Q|^0.852 Q``, ``dh/dQ = 1.852 r |Q|^0.852`` (Hazen-Williams,
    r from ``hazen_williams_resistance`` [m/(m3/s)^1.852], Q [m3/s], h [m]).

    For ``|Q| < q_eps`` the law, whose slope is zero at Q = 0 (and whose inverse has an infinite
    derivative), is replaced by the odd cubic ``h = r q_eps^1.852 (a x + b x^3)``, ``x = Q/q_eps``,
    with ``b = (1.852 - 1)/2 = 0.426`` and ``a = 1 - b = 0.574`` so that value and slope match the
    law at ``|Q| = q_eps``. The slope at zero flow is then ``0.574 r q_eps^0.852 > 0``, which keeps
    the gradient matrix of the global gradient method positive definite on dead ends and idle pipes.
    The blend departs from the law by at most ``0.076 r q_eps^1.852``; with the default
    q_eps = 1e-6 m3/s (0.016 gpm) that is 2.2e-7 m on a 1000 m, 4 in main of C 60, far below the
    precision of any field reading (common practice: regularize below what can be measured).
    """
    q, r = np.asarray(q, dtype=float), np.asarray(r, dtype=float)
    shape = q.shape
    if q.ndim != 1 or r.shape != shape:  # scalars, matrices, broadcasting: as flat arrays
        q, r = np.broadcast_arrays(q, r)
        shape = q.shape
        q, r = q.ravel(), r.ravel()
    n = HW_FLOW_EXPONENT
    aq = np.abs(q)
    # the blend only where it applies (closed and idle pipes: usually a few of many)
    small = np.flatnonzero(aq < q_eps)
    # Outside the blend: the law itself; r aq ** 0.852 computed once and reused for h and slope,
    # as exp(0.852 ln aq) in place: numpy's vectorised exp and log take half the time of its
    # power on 8k pipes (the whole law 97 against 183 us), the same to 2e-15 relative
    rpw = np.maximum(aq, q_eps, out=aq)
    np.log(rpw, out=rpw)
    rpw *= n - 1.0
    np.exp(rpw, out=rpw)
    rpw *= r
    h = rpw * q
    grad = n * rpw
    if small.size:
        x = q[small] / q_eps
        scale = r[small] * q_eps ** n
        h[small] = scale * (_BLEND_A * x + _BLEND_B * x ** 3)
        grad[small] = scale / q_eps * (_BLEND_A + 3.0 * _BLEND_B * x ** 2)
    return h.reshape(shape), grad.reshape(shape)


def minor_loss_coefficient(k, diameter):
    """Minor-loss resistance m such that h = m |Q| Q [m], Q [m3/s].

    Equation: ``h = K V^2 / (2 g)`` with ``V = 4 Q / (pi D^2)`` gives ``m = 8 K / (g pi^2 D^4)``;
    K the sum of the fittings' loss coefficients [-], D [m], g = 9.80665 m/s2.
    Source: any hydraulics text, e.g. Streeter and Wylie, Fluid Mechanics, minor losses (from memory).
    """
    k = np.asarray(k, dtype=float)
    diameter = np.asarray(diameter, dtype=float)
    return 8.0 * k / (G * np.pi ** 2 * diameter ** 4)


def reynolds_number(q, diameter, nu: float = NU_WATER_60F):
    """Reynolds number of pipe flow, Re = V D / nu = 4 |Q| / (pi D nu) [-]; Q [m3/s], D [m], nu [m2/s]."""
    return 4.0 * np.abs(np.asarray(q, dtype=float)) / (np.pi * np.asarray(diameter, dtype=float) * nu)


def swamee_jain_1976(re, relative_roughness):
    """Darcy friction factor by the explicit Swamee-Jain (1976) formula [-].

    ``f = 0.25 / [log10(e/(3.7 D) + 5.74 / Re^0.9)]^2``, e/D relative roughness [-], Re [-].
    Valid 1e-6 <= e/D <= 1e-2, 5e3 <= Re <= 1e8, within about 1 % of Colebrook there.
    Example: Re 1e5, e/D 1e-4 -> 0.0184524.
    Source: Swamee, P.K. and Jain, A.K. (1976), "Explicit equations for pipe-flow problems",
    J. Hydraulics Division ASCE 102(HY5), 657-664.
    """
    re = np.asarray(re, dtype=float)
    eps = np.asarray(relative_roughness, dtype=float)
    return 0.25 / np.log10(eps / 3.7 + 5.74 / re ** 0.9) ** 2


def _colebrook_x(re, eps, iterations: int = 6):
    """x = 1/sqrt(f) of Colebrook by Newton iterations from Swamee-Jain, and the partials of
    g(x) = x + 2 log10(eps/3.7 + 2.51 x / Re) that the derivatives need."""
    x = 1.0 / np.sqrt(swamee_jain_1976(re, eps))
    ln10 = np.log(10.0)
    for _ in range(iterations):
        inner = eps / 3.7 + 2.51 * x / re
        g = x + 2.0 * np.log10(inner)
        dg = 1.0 + 2.0 / ln10 * (2.51 / re) / inner
        x = x - g / dg
    inner = eps / 3.7 + 2.51 * x / re
    dg_dx = 1.0 + 2.0 / ln10 * (2.51 / re) / inner
    return x, inner, dg_dx


def colebrook(re, relative_roughness, iterations: int = 6):
    """Darcy friction factor of the Colebrook (1939) equation, solved by Newton's method [-].

    ``1/sqrt(f) = -2 log10(e/(3.7 D) + 2.51 / (Re sqrt(f)))``, e/D [-], Re [-] (turbulent flow,
    Re > 4000). Started from Swamee-Jain, six Newton steps on x = 1/sqrt(f) reach machine precision
    over the water-distribution range. Example: Re 1e5, e/D 1e-4 -> 0.0185139.
    Source: Colebrook, C.F. (1939), "Turbulent flow in pipes, with particular reference to the
    transition region between the smooth and rough pipe laws", J. Inst. Civil Engineers 11, 133-156.
    """
    re = np.asarray(re, dtype=float)
    eps = np.asarray(relative_roughness, dtype=float)
    x, _, _ = _colebrook_x(re, eps, iterations)
    return 1.0 / x ** 2


def _colebrook_with_derivatives(re, eps):
    """Colebrook f, df/dRe and df/d(e/D) by implicit differentiation of g(x, Re, eps) = 0."""
    ln10 = np.log(10.0)
    x, inner, dg_dx = _colebrook_x(re, eps)
    dg_dre = 2.0 / ln10 * (-2.51 * x / re ** 2) / inner
    dg_deps = 2.0 / ln10 * (1.0 / 3.7) / inner
    dx_dre = -dg_dre / dg_dx
    dx_deps = -dg_deps / dg_dx
    f = 1.0 / x ** 2
    return f, -2.0 / x ** 3 * dx_dre, -2.0 / x ** 3 * dx_deps


def darcy_friction_factor(re, relative_roughness):
    """Darcy friction factor over all regimes with its derivatives: ``(f, df/dRe, df/d(e/D))``.

    - Re <= 2000: laminar, ``f = 64 / Re`` (Hagen-Poiseuille).
    - Re >= 4000: Colebrook (1939), see ``colebrook``.
    - In between: a cubic Hermite interpolation in Re matching value and slope of the laminar law at
      Re 2000 and of Colebrook at Re 4000. This is a smoothing device of our own (no flow is stable
      there); it keeps dh/dQ continuous so Newton's method does not stall. Common practice in network
      solvers is some such cubic; say so when results hinge on transitional flow.
    Re must be > 0 (the laminar head loss at zero flow is handled by ``darcy_weisbach_law``).
    """
    re = np.asarray(re, dtype=float)
    eps = np.broadcast_to(np.asarray(relative_roughness, dtype=float), re.shape)
    re_safe = np.maximum(re, 1.0)
    f = 64.0 / re_safe
    df_dre = -64.0 / re_safe ** 2
    df_deps = np.zeros_like(re_safe)
    turb = re >= RE_LAMINAR  # Colebrook needed for the transition too (its end values)
    if turb.any():
        re_t = np.maximum(re[turb], RE_TURBULENT)
        ft, dft, dfe = _colebrook_with_derivatives(re_t, eps[turb])
        full = re[turb] >= RE_TURBULENT
        # Transition: Hermite basis on t in [0, 1] between (2000, laminar) and (4000, Colebrook).
        span = RE_TURBULENT - RE_LAMINAR
        t = np.clip((re[turb] - RE_LAMINAR) / span, 0.0, 1.0)
        f0, d0 = 64.0 / RE_LAMINAR, -64.0 / RE_LAMINAR ** 2
        h00, h10 = 2 * t**3 - 3 * t**2 + 1, t**3 - 2 * t**2 + t
        h01, h11 = -2 * t**3 + 3 * t**2, t**3 - t**2
        dh00, dh10 = (6 * t**2 - 6 * t) / span, (3 * t**2 - 4 * t + 1)
        dh01, dh11 = (-6 * t**2 + 6 * t) / span, (3 * t**2 - 2 * t)
        f_tr = h00 * f0 + h10 * span * d0 + h01 * ft + h11 * span * dft
        df_tr = dh00 * f0 + dh10 * d0 + dh01 * ft + dh11 * dft
        # roughness acts in the transition through the Colebrook end value only; the change of the
        # end slope with roughness is left out (approximate dh/de there; the transition is a
        # smoothing device, and roughness barely matters at Re 2000-4000)
        dfe_tr = h01 * dfe
        f[turb] = np.where(full, ft, f_tr)
        df_dre[turb] = np.where(full, dft, df_tr)
        df_deps[turb] = np.where(full, dfe, dfe_tr)
    return f, df_dre, df_deps


def darcy_weisbach_law(q, length, diameter, roughness_height, nu: float = NU_WATER_60F):
    """Darcy-Weisbach head loss with its derivatives: ``(h, dh/dQ, dh/de)``.

    Equation (Darcy-Weisbach): ``h = f (L/D) V^2/(2g) = 8 f L Q |Q| / (g pi^2 D^5)`` [m], with
    L [m], D [m], Q [m3/s], e absolute roughness [m], nu kinematic viscosity [m2/s] and f from
    ``darcy_friction_factor``. In laminar flow this is ``h = 128 nu L Q / (g pi D^4)``, linear and
    finite at zero flow, so no regularization is needed.
    ``dh/dQ = c |Q| (2 f + Re df/dRe)`` with ``c = 8 L / (g pi^2 D^5)`` (exact, including the change
    of f with flow); ``dh/de = c Q|Q| df/d(e/D) / D``.
    Source: Darcy-Weisbach as in any hydraulics text; friction factor see ``darcy_friction_factor``.
    """
    q = np.asarray(q, dtype=float)
    length = np.asarray(length, dtype=float)
    diameter = np.asarray(diameter, dtype=float)
    e = np.asarray(roughness_height, dtype=float)
    c = 8.0 * length / (G * np.pi ** 2 * diameter ** 5)
    aq = np.abs(q)
    re = reynolds_number(q, diameter, nu)
    laminar_k = 128.0 * nu * length / (G * np.pi * diameter ** 4)  # h = k Q below Re 2000
    f, df_dre, df_deps = darcy_friction_factor(re, e / diameter)
    lam = re <= RE_LAMINAR
    h = np.where(lam, laminar_k * q, c * f * q * aq)
    grad = np.where(lam, laminar_k, c * aq * (2.0 * f + re * df_dre))
    dh_de = np.where(lam, 0.0, c * q * aq * df_deps / diameter)
    return h, grad, dh_de
