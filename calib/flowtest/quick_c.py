"""Quick estimate of the Hazen-Williams C of one main from a flow test, without a network model.

The two-gauge method (Walski 1983, "Technique for calibrating network models", J. Water Resour.
Plann. Manage. 109(4); Walski 1984, Analysis of Water Distribution Systems): with the flow Q known in
a main of known length and diameter, the hydraulic grade at its two ends (two gauges, or a known grade
such as a tank level and one gauge) gives the head loss h, and Hazen-Williams solved for C gives the
main's C. The interval carries the gauge accuracy (and optionally the flow's) through the same
equation. The Hazen-Williams constants are the solver's (``calib.hydraulics.headloss``), so a quick C
and a model C mean the same thing. Minor losses along the main are neglected (they raise the apparent
roughness, i.e. lower the C found).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from calib.flowtest._edge import fail, scalar_or_array, si
from calib.flowtest.findings import Finding, fmt_pressure
from calib.hydraulics.headloss import HW_COEFFICIENT, HW_DIAMETER_EXPONENT, HW_FLOW_EXPONENT
from calib.units import GAMMA_WATER, PSI

#: Default accuracy of each pressure gauge, +/- 1 psi [Pa] (common practice for a test gauge).
DEFAULT_GAUGE_ERROR = 1.0 * PSI


def hazen_williams_c(flow, length, diameter, head_loss) -> float:
    """C [-] from a head loss: C = (10.67 L Q^1.852 / (h D^4.8704))^(1/1.852).

    Hazen-Williams, SI form (coefficient and exponents ``calib.hydraulics.headloss``): ``flow`` Q
    [m3/s] > 0, ``length`` L [m], ``diameter`` D inside [m], ``head_loss`` h [m] > 0. Returns inf for
    h <= 0 (no measurable loss: any C above the lower bound fits). Scalars or numpy arrays. Equivalent to C = Q (10.67 L /
    (h D^4.8704))^0.54, so C is proportional to Q and falls as h rises.
    """
    h = np.asarray(head_loss, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        c = (HW_COEFFICIENT * np.asarray(length, dtype=float) * np.asarray(flow, dtype=float) ** HW_FLOW_EXPONENT
             / (h * np.asarray(diameter, dtype=float) ** HW_DIAMETER_EXPONENT)) ** (1.0 / HW_FLOW_EXPONENT)
    return scalar_or_array(np.where(h > 0, c, np.inf))


@dataclass
class QuickC:
    """A quick C estimate: ``c`` and its bounds ``low`` / ``high`` (``high`` may be inf), a first-order
    standard deviation ``sigma`` (inf when unbounded), the ``head_loss`` [m] and its error ``head_error``
    [m] used, and ``findings``."""

    c: float
    low: float
    high: float
    sigma: float
    head_loss: float
    head_error: float
    flow: float
    findings: list[Finding] = field(default_factory=list)

    @property
    def bounded(self) -> bool:
        return math.isfinite(self.high)


def quick_c(flow, length, diameter, upstream_grade, downstream_grade, *,
            upstream_error=DEFAULT_GAUGE_ERROR, downstream_error=DEFAULT_GAUGE_ERROR,
            flow_error: float = 0.0, system: str = "us") -> QuickC:
    """Two-gauge C estimate of one main (Walski 1983; 1984) with its interval.

    ``flow`` Q in the main [m3/s]; ``length`` [m]; ``diameter`` inside [m]; ``upstream_grade`` and
    ``downstream_grade`` hydraulic grades [m] at the two ends (see ``rating.hydraulic_grade``; for a
    known grade such as a tank level pass its accuracy as ``upstream_error``, 0 if exact);
    ``upstream_error`` / ``downstream_error`` gauge accuracy as +/- pressure [Pa] (1 psi each by
    default); ``flow_error`` relative +/- accuracy of Q [-] (0.05 = 5 %).

    Head loss h = H_up - H_down; combined head error e = sqrt(e_up^2 + e_down^2) / gamma (independent
    gauges, root sum of squares). Bounds, exact because C falls monotonically with h and rises with Q:
    low = C(Q (1 - f), h + e), high = C(Q (1 + f), h - e), inf when h <= e (the drop is not larger than
    the gauge error: a finding says so). First-order sigma, treating each +/- as one standard
    uncertainty: sigma_C / C = sqrt(f^2 + (0.54 e / h)^2) (from C proportional to Q h^-0.54).

    Raises ``FlowTestError`` for a non-positive flow, length or diameter, or when the grade rises
    along the flow by more than the gauge error (the readings contradict the flow direction).
    """
    q = si(flow, "flow", "flow")
    length_m = si(length, "length", "length")
    d = si(diameter, "diameter", "diameter")
    h_up = si(upstream_grade, "head", "upstream grade")
    h_dn = si(downstream_grade, "head", "downstream grade")
    e_up = si(upstream_error, "pressure", "upstream error")
    e_dn = si(downstream_error, "pressure", "downstream error")
    for name, value, rng in (("flow", q, "a flow such as 500 - 1500 gpm"),
                             ("length", length_m, "a main length such as 100 - 3000 ft"),
                             ("diameter", d, "an inside diameter such as 4 - 24 in")):
        if not math.isfinite(value) or value <= 0:
            fail(name, f"{name} must be more than zero", rng)
    try:
        flow_error = float(flow_error)
    except (TypeError, ValueError):
        fail("flow error", f"flow error {flow_error!r} is not a number", "a fraction such as 0.05")
    if e_up < 0 or e_dn < 0 or not 0 <= flow_error < 1:
        fail("gauge error", "accuracies must be zero or more (flow error below 1)", "e.g. 1 psi, 0.05")
    h = h_up - h_dn
    e = math.hypot(e_up, e_dn) / GAMMA_WATER
    findings = []
    if h + e <= 0:
        fail("downstream grade", f"the grade rises by {-h:.2f} m along the flow, more than the gauge "
             f"error ({e:.2f} m)", "the upstream grade above the downstream grade")
    c = hazen_williams_c(q, length_m, d, h)
    low = hazen_williams_c(q * (1 - flow_error), length_m, d, h + e)
    high = hazen_williams_c(q * (1 + flow_error), length_m, d, h - e)
    if h <= e:
        sigma = math.inf
        findings.append(Finding(
            "quick-c-unbounded", "warning",
            f"The head loss ({fmt_pressure(max(h, 0.0) * GAMMA_WATER, system)}) is not larger than the "
            f"gauge error ({fmt_pressure(e * GAMMA_WATER, system)}): the test gives only a lower bound "
            f"on C ({low:.0f}). Flow more water for a wider drop.", "Walski 1983"))
    else:
        sigma = c * math.hypot(flow_error, e / (HW_FLOW_EXPONENT * h))
    return QuickC(c=c, low=low, high=high, sigma=sigma, head_loss=h, head_error=e, flow=q,
                  findings=findings)
