"""Pump head curves ``h = h0 - r q**n`` from the points a pump table gives.

Two ways a table describes a pump: three points of its curve (fitted exactly), or one design point
with the usual single-point convention. SI floats in and out: heads [m], flows [m3/s].
"""

from __future__ import annotations

import math

import numpy as np
from scipy.optimize import brentq

#: Single-point convention (common practice, no published source): shutoff head 1.33 x design head,
#: largest flow (head 0) 2 x design flow.
SHUTOFF_RATIO = 1.33
MAX_FLOW_RATIO = 2.0
#: Exponents accepted for a fitted curve: outside this range three points do not look like a pump.
N_RANGE = (0.2, 5.0)


def three_point_curve(flows, heads) -> tuple[float, float, float]:
    """Fit ``h = h0 - r q**n`` exactly through three points of a pump's head curve.

    Parameters: ``flows`` q_i [m3/s] (>= 0, distinct), ``heads`` h_i [m] at those flows.
    Returns (h0 [m], r [m/(m3/s)**n], n [-]). With the points sorted by flow, n solves
    ``(h1 - h2)/(h2 - h3) = (q2**n - q1**n)/(q3**n - q2**n)`` (scipy.optimize.brentq on ln n), then
    ``r = (h1 - h2)/(q2**n - q1**n)`` and ``h0 = h1 + r q1**n``. The power-law form of a head curve
    is common practice in network analysis (no single published source is claimed here); the fit is
    exact, so it is checked against closed-form curves.

    Raises ``ValueError`` (with the reason) unless the head falls strictly as the flow grows and the
    fitted exponent lies in ``N_RANGE``.
    """
    q = np.asarray(flows, dtype=float)
    h = np.asarray(heads, dtype=float)
    order = np.argsort(q)
    q, h = q[order], h[order]
    if np.any(q < 0) or np.any(np.diff(q) <= 0):
        raise ValueError("the three flows must be distinct and not negative")
    if np.any(np.diff(h) >= 0):
        raise ValueError("the head must fall as the flow grows (a monotone decreasing curve)")
    target = (h[0] - h[1]) / (h[1] - h[2])

    def mismatch(log_n):
        n = math.exp(log_n)
        return (q[1] ** n - q[0] ** n) / (q[2] ** n - q[1] ** n) - target

    lo, hi = (math.log(v) for v in N_RANGE)
    if mismatch(lo) * mismatch(hi) > 0:
        raise ValueError(f"no curve h = h0 - r q^n with n in {N_RANGE[0]}-{N_RANGE[1]} passes "
                         "through the three points")
    n = math.exp(brentq(mismatch, lo, hi, xtol=1e-14))
    r = (h[0] - h[1]) / (q[1] ** n - q[0] ** n)
    return float(h[0] + r * q[0] ** n), float(r), float(n)


def design_point_curve(design_head: float, design_flow: float,
                       shutoff_head: float | None = None) -> tuple[float, float, float]:
    """Head curve from one design point, by the single-point convention (common practice).

    h0 = ``shutoff_head`` or 1.33 x ``design_head`` [m]; the curve reaches zero head at
    q_max = 2 x ``design_flow`` [m3/s]; so ``n = ln(h0 / (h0 - hd)) / ln 2`` and ``r = h0 / q_max**n``.
    Returns (h0, r, n). Raises ``ValueError`` unless h0 > design head > 0 and design flow > 0.
    """
    h0 = SHUTOFF_RATIO * design_head if shutoff_head is None or not np.isfinite(shutoff_head) \
        else float(shutoff_head)
    if not (design_head > 0 and design_flow > 0):
        raise ValueError("the design head and flow must be positive")
    if not h0 > design_head:
        raise ValueError("the shutoff head must be above the design head")
    q_max = MAX_FLOW_RATIO * design_flow
    n = math.log(h0 / (h0 - design_head)) / math.log(MAX_FLOW_RATIO)
    return float(h0), float(h0 / q_max ** n), float(n)


#: Shares of q_max (the flow at zero head) where a writer samples a curve as its three points.
WRITE_SHARES = (0.0, 0.5, 0.9)


def curve_points(h0, r, n) -> list[tuple[np.ndarray, np.ndarray]]:
    """Three points ``(q, h)`` of each curve ``h = h0 - r q**n`` at full speed, for the writers.

    h0 [m], r [m/(m3/s)**n], n [-] per pump (arrays); q at ``WRITE_SHARES`` of
    ``q_max = (h0 / r)**(1/n)`` [m3/s]. ``three_point_curve`` fits them back exactly.
    """
    h0, r, n = (np.asarray(v, dtype=float) for v in (h0, r, n))
    q_max = (h0 / r) ** (1.0 / n)
    return [(share * q_max, h0 - r * (share * q_max) ** n) for share in WRITE_SHARES]
