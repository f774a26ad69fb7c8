"""Rated flow at a target residual pressure (the 0.54 extrapolation of NFPA 291), its inverse, the
hydrant curve points for a plot on the N^1.85 scale, and the hydraulic grade at a gauge.

No plotting here (``calib`` stays free of matplotlib at import); the app and the report draw.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from calib.flowtest._edge import fail, scalar_or_array, si
from calib.units import PSI, pressure_to_head

#: Exponent of the NFPA 291 extrapolation (about 1/1.852, the Hazen-Williams flow exponent).
EXPONENT = 0.54
#: Target residual pressure of NFPA 291 ratings: 20 psi [Pa].
DEFAULT_TARGET = 20.0 * PSI
#: Exponent of the abscissa of N^1.85 hydraulic graph paper.
N185 = 1.85


def _pressures(static, residual):
    ps = np.asarray(si(static, "pressure", "static"), dtype=float)
    pr = np.asarray(si(residual, "pressure", "residual"), dtype=float)
    if np.any(~np.isfinite(ps)) or np.any(~np.isfinite(pr)):
        fail("static", "static and residual must be finite numbers")
    if np.any(pr >= ps):
        fail("residual", "the residual must be below the static (no pressure drop to extrapolate)",
             "a residual at least 10 psi (70 kPa) below the static")
    return ps, pr


def rated_flow(flow, static, residual, target=DEFAULT_TARGET, exponent: float = EXPONENT):
    """Flow available at the target residual pressure: Q_R = Q_F ((P_s - P_t) / (P_s - P_r))^0.54.

    NFPA 291, Recommended Practice for Fire Flow Testing and Marking of Hydrants (the rating
    formula). ``flow`` Q_F total test flow [m3/s]; ``static`` P_s, ``residual`` P_r and ``target``
    P_t gauge pressures at the residual hydrant [Pa] (20 psi by default); returns Q_R [m3/s]. Assumes
    the source grades and the rest of the demand stay as they were during the test; a target below
    the residual extrapolates, one above it interpolates.

    Example (worked arithmetic): 800 gpm, 65 / 50 psi gives 800 * 3^0.54 = 1447.89 gpm.
    Accepts SI floats, numpy arrays, pint Quantities or strings such as ``"65 psi"``.
    """
    q = np.asarray(si(flow, "flow", "flow"), dtype=float)
    ps, pr = _pressures(static, residual)
    pt = np.asarray(si(target, "pressure", "target"), dtype=float)
    if np.any(q < 0):
        fail("flow", "the test flow must be zero or more", "a flow such as 500 - 1500 gpm")
    if np.any(pt < 0) or np.any(pt >= ps):
        fail("target", "the target residual must be at least zero and below the static",
             "usually 20 psi (138 kPa)")
    return scalar_or_array(q * ((ps - pt) / (ps - pr)) ** exponent)


def residual_at_flow(required, flow, static, residual, exponent: float = EXPONENT):
    """Residual pressure expected at a required flow: P = P_s - (P_s - P_r) (Q / Q_F)^(1/0.54).

    The inverse of ``rated_flow`` (NFPA 291 rating formula solved for the pressure), so that
    ``residual_at_flow(rated_flow(q, ps, pr, pt), q, ps, pr) == pt``. ``required`` Q [m3/s],
    ``flow`` Q_F test flow [m3/s] (> 0), ``static`` / ``residual`` [Pa gauge]; returns [Pa gauge].
    A negative result means the main cannot deliver that flow at all (the formula has left its range).
    """
    qr = np.asarray(si(required, "flow", "required flow"), dtype=float)
    q = np.asarray(si(flow, "flow", "flow"), dtype=float)
    ps, pr = _pressures(static, residual)
    if np.any(q <= 0):
        fail("flow", "the test flow must be more than zero", "a flow such as 500 - 1500 gpm")
    if np.any(qr < 0):
        fail("required flow", "the required flow must be zero or more")
    return scalar_or_array(ps - (ps - pr) * (qr / q) ** (1.0 / exponent))


def n185(flow, exponent: float = N185):
    """Abscissa of N^1.85 graph paper: x = Q^1.85 (Q in any consistent unit, e.g. gpm for a plot).

    N^1.85 hydraulic graph paper is the plotting scale NFPA 291 uses for hydrant curves.

    On this axis a hydrant curve P(Q) = P_s - (P_s - P_r) (Q / Q_F)^1.85 is a straight line; the
    0.54 rating formula (1/0.54 = 1.852) is straight to within drawing accuracy.
    """
    return scalar_or_array(np.asarray(flow, dtype=float) ** exponent)


@dataclass(frozen=True)
class HydrantCurve:
    """The three points of a hydrant curve, SI: flows [m3/s], pressures [Pa gauge]."""

    static: float
    test_flow: float
    residual: float
    rated_flow: float
    target: float

    @property
    def flows(self) -> np.ndarray:
        """Flows of the points: 0 (static), the test flow, the rated flow [m3/s]."""
        return np.array([0.0, self.test_flow, self.rated_flow])

    @property
    def pressures(self) -> np.ndarray:
        """Pressures of the points: static, residual, target [Pa gauge]."""
        return np.array([self.static, self.residual, self.target])

    def line(self, n: int = 50, to_flow: float | None = None) -> tuple[np.ndarray, np.ndarray]:
        """``n`` points of the curve from zero flow to ``to_flow`` (default the rated flow) [m3/s, Pa]."""
        q = np.linspace(0.0, self.rated_flow if to_flow is None else to_flow, n)
        p = self.static - (self.static - self.residual) * (q / self.test_flow) ** (1.0 / EXPONENT)
        return q, p


def hydrant_curve(flow, static, residual, target=DEFAULT_TARGET) -> HydrantCurve:
    """The curve points (static at zero flow, test point, rated point) of a test, SI."""
    q = float(si(flow, "flow", "flow"))
    ps, pr = (float(v) for v in _pressures(static, residual))
    pt = float(si(target, "pressure", "target"))
    return HydrantCurve(ps, q, pr, float(rated_flow(q, ps, pr, pt)), pt)


def hydraulic_grade(pressure, elevation, gauge_height=0.0):
    """Hydraulic grade at a gauge: H = p / gamma + z + h_g [m].

    ``pressure`` gauge pressure [Pa], ``elevation`` z of the node (the ground or the main the
    elevation refers to) [m], ``gauge_height`` h_g of the gauge above that elevation [m]. gamma is
    water at 60 degF (``calib.units.GAMMA_WATER``, 1 psi = 2.308965 ft). Energy balance of a static
    water column (Bernoulli with negligible velocity head at the gauge).
    """
    p = np.asarray(si(pressure, "pressure", "pressure"), dtype=float)
    z = np.asarray(si(elevation, "elevation", "elevation"), dtype=float)
    hg = np.asarray(si(gauge_height, "length", "gauge height"), dtype=float)
    return scalar_or_array(pressure_to_head(p) + z + hg)
