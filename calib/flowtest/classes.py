"""Hydrant classes by rated flow, as the marking chapter of NFPA 291 defines them.

These are NFPA 291's classes (rated flow at 20 psi residual) and are labelled as such; a local code or
the authority having jurisdiction may use other classes, colours or target pressures.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from calib.flowtest._edge import fail, si
from calib.units import GPM

NOTE = ("Class as marked under NFPA 291 (rated flow at 20 psi residual); local codes and the "
        "authority having jurisdiction may use other classes or colours.")


@dataclass(frozen=True)
class HydrantClass:
    """One NFPA 291 hydrant class: rated flow range [gpm] (lower inclusive, upper exclusive), colour."""

    label: str
    lower_gpm: float
    upper_gpm: float
    colour: str
    note: str = NOTE
    standard: str = "NFPA 291"

    @property
    def title(self) -> str:
        """For display, e.g. ``"NFPA 291 class AA (1500 gpm or more), light blue"``."""
        return self.describe("us")

    def describe(self, system: str = "us") -> str:
        """``title``; with ``"si"`` the bounds also in L/s (the standard defines them in gpm)."""
        def b(gpm):
            return f"{gpm:.0f} gpm" + (f" = {gpm * GPM * 1000:.1f} L/s" if system == "si" else "")
        if math.isinf(self.upper_gpm):
            span = f"{b(self.lower_gpm)} or more"
        elif self.lower_gpm == 0:
            span = f"less than {b(self.upper_gpm)}"
        else:
            span = f"{self.lower_gpm:.0f} - {self.upper_gpm - 1:.0f} gpm" + (
                f" = {self.lower_gpm * GPM * 1000:.1f} - {self.upper_gpm * GPM * 1000:.1f} L/s"
                if system == "si" else "")
        return f"{self.standard} class {self.label} ({span}), {self.colour}"


#: NFPA 291 marking chapter: AA >= 1500 gpm light blue; A 1000 - 1499 green; B 500 - 999 orange;
#: C < 500 red.
CLASSES = (
    HydrantClass("AA", 1500.0, math.inf, "light blue"),
    HydrantClass("A", 1000.0, 1500.0, "green"),
    HydrantClass("B", 500.0, 1000.0, "orange"),
    HydrantClass("C", 0.0, 500.0, "red"),
)


def hydrant_class(rated_flow) -> HydrantClass:
    """NFPA 291 class of a hydrant from its rated flow at 20 psi [m3/s, or a Quantity / string].

    Boundaries (NFPA 291 marking chapter): 1500 gpm is AA, 1499.9 gpm is A, 500 gpm is B. The flow is
    compared in gpm rounded to 1e-6 gpm so that a value converted from 1500 gpm lands in AA.
    """
    q = float(si(rated_flow, "flow", "rated flow"))
    if not math.isfinite(q) or q < 0:
        fail("rated flow", f"rated flow {q} m3/s cannot be classed", "a flow of zero or more")
    gpm = round(q / GPM, 6)
    for cls in CLASSES:
        if gpm >= cls.lower_gpm:
            return cls
    return CLASSES[-1]
