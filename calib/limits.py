"""Plausibility ranges of every physical quantity a person types or a file gives, stated once.

Each ``Limit`` holds, in SI, a hard range (a value outside is refused: it is a typo, a wrong unit or
junk) and, where a value outside the usual range can still be real, a ``usual`` range (a value
outside it is accepted and warned about by name). The readers (``calib.network.tables``,
``calib.calibration.tests_io``), the command line (``calib.cli``) and the field app's value parsing
(``mobile.services.values``) take their ranges from here and nowhere else.

Unless a line names a source, a range is common practice for municipal water distribution and
hydrant flow testing: wide enough for every real system we know of, narrow enough to catch a value
typed in the wrong unit or with a stray digit.

This module holds numbers and their wording only; it does not parse text (``calib.units`` does).
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass

from calib.units import FT, GPM, INCH, PSI, from_si

_M3S = 1.0
_MM = 1e-3


@dataclass(frozen=True)
class Limit:
    """A plausible range of one quantity, SI. ``low_open``: the low end itself is refused (> low)."""

    name: str
    kind: str  # a unit kind of ``calib.units`` (display), or "number" (dimensionless)
    low: float
    high: float
    why: str
    low_open: bool = False
    usual: tuple[float, float] | None = None  # outside: accepted with a warning naming it

    def refuses(self, value: float) -> bool:
        """True when ``value`` is not a finite number inside the hard range."""
        if not isinstance(value, (int, float)) or not math.isfinite(value):
            return True
        return value > self.high or value < self.low or (self.low_open and value <= self.low)

    def unusual(self, value: float) -> bool:
        """True when an accepted ``value`` lies outside the usual range (warn, do not refuse)."""
        return self.usual is not None and not (self.usual[0] <= value <= self.usual[1])

    def why_refused(self, value: float) -> str:
        """Why a refused ``value`` is refused, in a few words (the range goes in ``expected``)."""
        if not isinstance(value, (int, float)) or not math.isfinite(value):
            return "is not a finite number"
        if value < 0 <= self.low:
            return "is below zero"
        if self.low_open and value <= self.low == 0:
            return "must be more than zero"
        return "is below the plausible range" if value <= self.low else "is above the plausible range"

    def show(self, value: float, system: str = "us") -> str:
        """``value`` [SI] as text in the ``us`` or ``si`` display unit, e.g. ``72 psi``."""
        if self.kind == "number":
            return _num(value)
        unit = _UNIT[system][self.kind]
        return f"{_num(from_si(value, self.kind, unit))} {unit}"

    def _span(self, lo: float, hi: float, system: str) -> str:
        if self.kind == "number":
            return f"{_num(lo)} to {_num(hi)}"
        unit = _UNIT[system][self.kind]
        return f"{_num(from_si(lo, self.kind, unit))} to {_num(from_si(hi, self.kind, unit))} {unit}"

    @functools.lru_cache(maxsize=64)  # noqa: B019 - a few frozen limits, built once
    def expected(self, system: str = "us") -> str:
        """The range in words for an error message, both unit systems, the usual range beside."""
        more = "more than " if self.low_open else ""
        text = more + self._span(self.low, self.high, system)
        if self.kind != "number":
            other = "si" if system == "us" else "us"
            text += f" ({more}{self._span(self.low, self.high, other)})"
        if self.usual is not None:
            text += f"; usually {self._span(*self.usual, system)}"
        return text

    def warning(self, value: float, where: str, system: str = "us") -> str:
        """The warning for an unusual value: names ``where`` (option, file/row/field) and the range."""
        return (f"{where}: {self.show(value, system)} is outside the usual "
                f"{self._span(*self.usual, system)} for {_article(self.name)} {self.name}; "
                f"check it was read and typed right")


def _num(value: float) -> str:
    """A number in at most four significant digits, without an exponent in the usual sizes."""
    if value != 0 and 1e4 <= abs(value) < 1e12:
        return f"{value:.0f}"
    return f"{value:.4g}"


def _article(word: str) -> str:
    return "an" if word[:1] in "aeiou" else "a"


_UNIT = {"us": {"pressure": "psi", "flow": "gpm", "diameter": "in", "length": "ft",
                "elevation": "ft", "head": "ft"},
         "si": {"pressure": "kPa", "flow": "L/s", "diameter": "mm", "length": "m",
                "elevation": "m", "head": "m"}}

# --- readings of a hydrant flow test -------------------------------------------------------------
#: Gauge pressure of a static or residual reading. Distribution systems run about 20-150 psi; the
#: 10-200 psi band is the one the flow-test findings treat as usual; 300 psi is above the working
#: rating of common hydrants and fittings, so a higher reading is a wrong unit or a typo.
PRESSURE = Limit("gauge pressure", "pressure", 0.0, 300 * PSI, "common practice",
                 usual=(10 * PSI, 200 * PSI))
#: Pitot reading: NFPA 291 asks for about 10-30 psi for a good reading; above 200 psi impossible
#: from a hydrant on a distribution main.
PITOT = Limit("pitot reading", "pressure", 0.0, 200 * PSI, "NFPA 291 (10-30 psi, from memory); "
              "common practice for the hard range", low_open=True, usual=(10 * PSI, 30 * PSI))
#: Inside diameter of a flowing outlet: hose outlets 2.5 in, pumper outlets 4-4.5 in, diffusers up
#: to about 6 in.
OUTLET_DIAMETER = Limit("outlet diameter", "diameter", 0.5 * INCH, 8 * INCH, "common practice",
                        usual=(1.5 * INCH, 6 * INCH))
#: Outlet coefficient: NFPA 291 outlet figure gives 0.70 (projecting), 0.80 (square), 0.90 (smooth).
COEFFICIENT = Limit("outlet coefficient", "number", 0.5, 1.0, "NFPA 291 outlet figure (0.70-0.90)",
                    usual=(0.70, 0.90))
#: Flow of one test (an outlet, a meter, a diffuser): a single hydrant gives up to a few thousand
#: gpm; 10 000 gpm bounds several hydrants flowed together.
FLOW = Limit("flow", "flow", 0.0, 10000 * GPM, "common practice", low_open=True)
#: Height of the gauge above the node's elevation (the ground or the hydrant's elevation).
GAUGE_HEIGHT = Limit("gauge height", "length", -20 * FT, 30 * FT, "common practice",
                     usual=(0.0, 3 * FT))
#: Stated gauge accuracy (one standard deviation). A test gauge of 0.25 % on 0-200 psi reads to
#: about 0.5 psi; below 0.01 psi no field gauge reads, and the weights 1/sigma^2 would overflow.
SIGMA = Limit("gauge accuracy", "pressure", 0.01 * PSI, 20 * PSI, "common practice")
#: A hydraulic grade (a source's head, a tank level as an elevation). Dead Sea shore about -430 m;
#: the highest served towns lie near 4 000-5 000 m (from memory).
HEAD = Limit("hydraulic grade", "head", -500.0, 6000.0, "common practice; from memory")

#: A tank's water depth above its floor (boundary.csv ``level``, the field app's tank level):
#: standpipes and elevated tanks stand up to some tens of metres; 100 m leaves room.
TANK_LEVEL = Limit("tank level", "head", 0.0, 100.0, "common practice")

# --- the network -------------------------------------------------------------------------------
#: Ground elevation of a node, the same reasoning as ``HEAD``.
ELEVATION = Limit("elevation", "elevation", -500.0, 6000.0, "common practice; from memory")
#: Base demand of a junction (negative: an inflow). 100 000 gpm (6.3 m3/s) is more than a city
#: district's whole demand at one node.
DEMAND = Limit("demand", "flow", -100000 * GPM, 100000 * GPM, "common practice")
#: Pipe inside diameter: service lines from about 3/4 in; the largest water tunnels about 7-8 m
#: (from memory). 10 m leaves room; a 1e9 diameter makes the solver's matrix singular.
PIPE_DIAMETER = Limit("pipe diameter", "diameter", 5 * _MM, 10.0, "common practice; from memory")
#: Pipe length: above zero (``validate`` says so); 100 km bounds a single transmission main link.
PIPE_LENGTH = Limit("pipe length", "length", 0.0, 100e3, "common practice", low_open=True)
#: Hazen-Williams C: new PVC about 150, old unlined cast iron 40-100 (handbook tables, e.g. the
#: priors of ``calib.calibration.priors``); 1-200 is the validation range.
C_FACTOR = Limit("Hazen-Williams C", "number", 1.0, 200.0, "common practice")
#: Minor-loss coefficient K: fittings 0.1-10; a throttled valve can reach some hundreds.
MINOR_LOSS = Limit("minor-loss coefficient", "number", 0.0, 1000.0, "common practice")
#: Darcy-Weisbach absolute roughness: drawn tubing 0.0015 mm, new cast iron about 0.26 mm,
#: riveted steel up to 9 mm (Moody's roughness chart; from memory).
ROUGHNESS_HEIGHT = Limit("roughness height", "length", 0.0, 0.010, "Moody chart; from memory")
#: A pump's head or flow on its curve.
PUMP_HEAD = Limit("pump head", "head", 0.0, 2000.0, "common practice")
PUMP_FLOW = Limit("pump flow", "flow", 0.0, 20.0 * _M3S, "common practice")
#: Relative pump speed.
PUMP_SPEED = Limit("pump speed", "number", 0.0, 2.0, "common practice")
#: Map coordinates without a ``length_unit``: WGS84 longitude and latitude (RFC 7946).
LONGITUDE = Limit("longitude", "number", -180.0, 180.0, "RFC 7946 (WGS84 degrees)")
LATITUDE = Limit("latitude", "number", -90.0, 90.0, "RFC 7946 (WGS84 degrees)")
#: Projected map-grid coordinates [m]: the largest national grids span a few thousand km.
MAP_COORDINATE = Limit("map coordinate", "length", -1e8, 1e8, "common practice")
#: Year a pipe was laid.
INSTALL_YEAR = Limit("install year", "number", 1800, 2100, "common practice")

# --- options of a run --------------------------------------------------------------------------
#: Factor on every base demand (peak hour 1.5-2.5, fire flow studies up to about 4).
DEMAND_FACTOR = Limit("demand factor", "number", 0.0, 20.0, "common practice", usual=(0.0, 5.0))
