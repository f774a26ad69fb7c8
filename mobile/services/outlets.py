"""Outlet sizes offered on the set-up screen, in the units chosen in the settings.

The common hydrant outlets are 2.5 in hose outlets and 4 or 4.5 in large (steamer) outlets (common
practice; NFPA 291 tests use either). In SI they are offered as exact conversions of those inches
(1 in = 25.4 mm exactly, NIST SP 811), so that an SI crew's pitot gives the same flow as a US crew's.
Any other size can be typed.
"""

from __future__ import annotations

from calib.units import INCH

STANDARD_IN = (2.5, 4.0, 4.5)


def _exact_mm(inches: float) -> str:
    return f"{inches * 25.4:.1f}"  # 2.5 in -> '63.5': 25.4 mm per inch has one decimal


SIZES = {"us": [f"{d:g}" for d in STANDARD_IN], "si": [_exact_mm(d) for d in STANDARD_IN]}


def sizes(system: str) -> list[str]:
    """Outlet diameters to offer, as bare numbers in the display unit of ``system``."""
    return list(SIZES[system])


def standard_si() -> list[float]:
    """The standard outlet diameters [m]."""
    return [d * INCH for d in STANDARD_IN]
