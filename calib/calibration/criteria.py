"""Calibration accuracy criteria: the share of readings a model reproduces within published tolerances.

Neither source is a standard for every use; both are quoted from memory (see
``/shared/reference/check-values.md``) and printed as such in the report:

- WRc (1989), *Network Analysis - A Code of Practice*, Water Research Centre, UK [from memory,
  medium-high]: heads - 85 % of readings within 0.5 m (or 5 % of the maximum head loss across the
  system, whichever is greater), 95 % within 0.75 m (7.5 %), 100 % within 2 m (15 %).
- AWWA Engineering Computer Applications Committee (1999), *Calibration Guidelines for Water
  Distribution System Modeling* [from memory, medium-low]: e.g. long-range planning +/-5 psi for 100 %
  of readings; design and operations +/-2 psi for 90 %. Presented by its authors as a starting point.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from calib import units

WRC_1989 = "WRc (1989) Network Analysis - A Code of Practice (from memory)"
AWWA_ECAC_1999 = "AWWA ECAC (1999) Calibration Guidelines for Water Distribution System Modeling (from memory)"

# (tolerance [m], share of max head loss, required share of readings)
_WRC_HEADS = ((0.5, 0.05, 0.85), (0.75, 0.075, 0.95), (2.0, 0.15, 1.00))
# (use, tolerance [psi], required share)
_AWWA = (("long-range planning", 5.0, 1.00), ("design and operations", 2.0, 0.90))


@dataclass
class Criterion:
    """One tolerance test: the share of readings within ``tolerance`` [m of head] against the required share."""

    source: str
    label: str
    tolerance: float  # [m of head]
    required: float  # share 0-1
    achieved: float  # share 0-1
    n: int

    @property
    def passed(self) -> bool:
        return self.n > 0 and self.achieved >= self.required - 1e-12


def share_within(abs_error, tolerance) -> float:
    """Share of ``abs_error`` values at or below ``tolerance`` (0 when there are none)."""
    abs_error = np.asarray(abs_error, float)
    return float(np.mean(abs_error <= tolerance + 1e-12)) if abs_error.size else 0.0


def wrc_1989(head_error_m, max_headloss_m: float = 0.0) -> list[Criterion]:
    """WRc 1989 head criteria on absolute head errors [m]; ``max_headloss_m`` widens each tolerance
    to its percentage of the largest head loss across the system, whichever is greater."""
    err = np.abs(np.asarray(head_error_m, float))
    out = []
    for tol, frac, req in _WRC_HEADS:
        t = max(tol, frac * max_headloss_m)
        label = f"{req:.0%} within {tol:g} m" + (f" ({frac:.1%} of max head loss: {t:.2f} m)"
                                                  if t > tol else "")
        out.append(Criterion(WRC_1989, label, t, req, share_within(err, t), err.size))
    return out


def awwa_ecac_1999(pressure_error_pa) -> list[Criterion]:
    """AWWA ECAC 1999 starting-point criteria on absolute pressure errors [Pa]."""
    err_m = units.pressure_to_head(np.abs(np.asarray(pressure_error_pa, float)))
    out = []
    for use, tol_psi, req in _AWWA:
        t = units.pressure_to_head(tol_psi * units.PSI)
        out.append(Criterion(AWWA_ECAC_1999, f"{use}: {req:.0%} within +/-{tol_psi:g} psi", t, req,
                             share_within(err_m, t), err_m.size))
    return out
