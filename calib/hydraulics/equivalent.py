"""Equivalent pipes under Hazen-Williams: resistances of pipes in series and in parallel, and the
diameter of the one pipe that carries the same flow for the same head loss.

Resistance K here is the Hazen-Williams ``h = K Q^1.852`` [m / (m3/s)^1.852] (see
``headloss.hazen_williams_resistance``). Minor losses are not included.
"""

from __future__ import annotations

import numpy as np

from calib.errors import InputError
from calib.hydraulics.headloss import (HW_COEFFICIENT, HW_DIAMETER_EXPONENT, HW_FLOW_EXPONENT,
                                       hazen_williams_resistance)

__all__ = ["hazen_williams_resistance", "series_resistance", "parallel_resistance",
           "equivalent_diameter"]


def _resistances(k, who: str) -> np.ndarray:
    """``k`` as a float array, or an ``InputError`` naming the first value that is not usable."""
    k = np.asarray(k, dtype=float).ravel()
    bad = np.flatnonzero(~(np.isfinite(k) & (k > 0)))
    if k.size == 0 or bad.size:
        what = "no resistance given" if k.size == 0 else f"resistance {k[bad[0]]:g} at index {bad[0]}"
        raise InputError(f"{who}: {what}", field="k",
                         expected="one or more positive finite resistances [m/(m3/s)^1.852]")
    return k


def series_resistance(k) -> float:
    """K of pipes in series: ``K_eq = sum K_i`` (the same flow through each, head losses add).

    K_i [m/(m3/s)^1.852]. Source: the equivalent-pipe method, e.g. Walski et al., Advanced Water
    Distribution Modeling and Management (2003), skeletonization chapter (from memory).
    """
    k = _resistances(k, "series_resistance")
    return float(k.sum())


def parallel_resistance(k, exponent: float = HW_FLOW_EXPONENT) -> float:
    """K of pipes in parallel: ``K_eq = (sum K_i^(-1/n))^(-n)``, n = 1.852 for Hazen-Williams.

    The same head loss h across each: ``Q_i = (h/K_i)^(1/n)`` and ``sum Q_i = (h/K_eq)^(1/n)``.
    K_i [m/(m3/s)^n]. Source: the equivalent-pipe method, as for ``series_resistance``.
    """
    k = _resistances(k, "parallel_resistance")
    return float(np.sum(k ** (-1.0 / exponent)) ** (-exponent))


def equivalent_diameter(k, length, c) -> float:
    """Diameter [m] of one Hazen-Williams pipe of ``length`` [m] and C ``c`` [-] with resistance K.

    Inverts ``K = 10.67 L / (C^1.852 D^4.8704)``: ``D = (10.67 L / (C^1.852 K))^(1/4.8704)``.
    Example: two 1000 ft pipes of 8 in, C 100, in parallel, replaced by one 1000 ft pipe of C 100:
    K_eq = K / 2^1.852, so D = 8 in x 2^(1.852/4.8704) = 10.41 in.
    Source: Hazen-Williams SI form (see ``headloss.hazen_williams_resistance``).
    """
    k, length, c = float(k), float(length), float(c)
    if not (k > 0 and length > 0 and c > 0):
        raise InputError(f"equivalent_diameter needs K, length and C > 0, got {k:g}, {length:g}, "
                         f"{c:g}", field="k, length, c", expected="all three positive")
    return (HW_COEFFICIENT * length / (c ** HW_FLOW_EXPONENT * k)) ** (1.0 / HW_DIAMETER_EXPONENT)
