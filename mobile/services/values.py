"""Turning what the crew typed into checked SI values, and SI values back into display text.

A field value is typed on the keypad as a bare number in the field's unit (``72.5``), or with a unit
(``500 kPa``). The text is parsed here by a strict pattern and a short list of units per kind - never
handed whole to pint's expression parser, so junk text cannot run arithmetic or hang. A value outside
its plausible range is refused with a plain message; it never reaches the store.

Conversions go through ``calib.units`` (one pint registry). Ranges are common practice for hydrant
flow testing, not limits from a standard.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass

from calib import limits, units
from calib.errors import InputError, Problem

#: Units a crew may type, by kind (lower-cased spelling -> pint spelling).
UNITS = {
    "pressure": {"psi": "psi", "kpa": "kPa", "bar": "bar", "pa": "Pa", "mpa": "MPa"},
    "flow": {"gpm": "gpm", "l/s": "L/s", "lps": "L/s", "l/min": "L/min", "m3/h": "m**3/h",
             "m3/s": "m**3/s"},
    "diameter": {"in": "in", "inch": "in", "mm": "mm", "cm": "cm", "m": "m"},
    "length": {"ft": "ft", "m": "m", "in": "in", "cm": "cm"},
}
#: Which unit a field is shown and typed in, by system; trade units in the US system.
FIELD_UNIT = {
    "us": {"pressure": "psi", "flow": "gpm", "diameter": "in", "length": "ft"},
    "si": {"pressure": "kPa", "flow": "L/s", "diameter": "mm", "length": "m"},
}

# ASCII digits only (re.ASCII: a fullwidth or Arabic-Indic digit is not read as a number) and a point
# for decimals: a comma is refused, never guessed (1,004 may be a thousand and four or one).
_NUMBER = re.compile(r"^\s*(?P<num>[+-]?(\d{1,9}(\.\d{0,9})?|\.\d{1,9}))\s*(?P<unit>[A-Za-z0-9/]{0,8})\s*$",
                     re.ASCII)
COMMA_REASON = ("a comma is not read: type a point for decimals (72.5) and no thousands separator "
                "(1004)")


@dataclass(frozen=True)
class FieldSpec:
    """A numeric field: its kind, its plausible range in SI, and the words used in messages."""

    name: str
    kind: str  # key of UNITS
    low: float  # SI
    high: float  # SI
    label: str


def _spec(name: str, kind: str, limit: limits.Limit, label: str) -> FieldSpec:
    """A field whose range is ``limit``'s (a range open at its low end keeps that end out)."""
    low = math.nextafter(limit.low, math.inf) if limit.low_open else limit.low
    return FieldSpec(name, kind, low, limit.high, label)


#: Plausible ranges: the same as the calibration reader's and the command line's (``calib.limits``).
FIELDS = {
    "static": _spec("static", "pressure", limits.PRESSURE, "static pressure"),
    "residual": _spec("residual", "pressure", limits.PRESSURE, "residual pressure"),
    "pitot": _spec("pitot", "pressure", limits.PITOT, "pitot pressure"),
    "flow": _spec("flow", "flow", limits.FLOW, "metered flow"),
    "diameter": _spec("diameter", "diameter", limits.OUTLET_DIAMETER, "outlet diameter"),
    "gauge_height": _spec("gauge_height", "length", limits.GAUGE_HEIGHT, "gauge height"),
    "target": _spec("target", "pressure", limits.PRESSURE, "target residual"),
    # A source's hydraulic grade (tank water level as an elevation), as the calibration reader takes it.
    "source_grade": _spec("source_grade", "length", limits.HEAD, "source grade"),
    # A tank's water depth above its floor, as the operator reads it.
    "tank_level": _spec("tank_level", "length", limits.TANK_LEVEL, "tank level"),
}


def field_unit(kind: str, system: str) -> str:
    if system not in FIELD_UNIT:
        raise InputError(Problem(f"units must be 'us' or 'si', not '{system}'", field="units"))
    return FIELD_UNIT[system][kind]


def _to_si(magnitude: float, unit: str, kind: str) -> float:
    return magnitude * units.unit_factor(unit, kind)


def parse_value(text, field: str, system: str = "us") -> tuple[float, str]:
    """Parse ``text`` typed into ``field`` -> ``(si_value, unit)``; raises ``InputError`` if unusable.

    A bare number is in the field's unit for ``system``; a number followed by a unit uses that unit
    (it must be of the field's kind). The value must lie in the field's plausible range.
    """
    spec = FIELDS[field]
    default_unit = field_unit(spec.kind, system)
    expected = f"{fmt(spec.low, spec.kind, system, bare=True)} to " \
               f"{fmt(spec.high, spec.kind, system)}"
    text = "" if text is None else str(text)
    if "," in text:  # a decimal comma or a thousands separator: which one is never guessed
        raise InputError(Problem(f"'{text.strip()[:20]}': {COMMA_REASON}", field=spec.label,
                                 expected=f"a number such as 72.5, in {default_unit}"))
    if any(ch.isdigit() and not ch.isascii() for ch in text):
        raise InputError(Problem(f"'{text.strip()[:20]}' has digits other than 0-9",
                                 field=spec.label, expected=f"a number such as 72.5 typed with "
                                 f"the digits 0-9, in {default_unit}"))
    m = _NUMBER.match(text)
    if not m:
        raise InputError(Problem(f"'{text.strip()[:20]}' is not a number", field=spec.label,
                                 expected=f"a number such as 72.5, in {default_unit}"))
    unit_text = m.group("unit")
    if unit_text:
        unit = UNITS[spec.kind].get(unit_text.lower())
        if unit is None:
            known = ", ".join(sorted(set(UNITS[spec.kind].values())))
            raise InputError(Problem(f"'{unit_text}' is not a unit for the {spec.label}",
                                     field=spec.label, expected=known))
    else:
        unit = default_unit
    magnitude = float(m.group("num"))
    si = _to_si(magnitude, unit, spec.kind)
    if not math.isfinite(si) or not (spec.low <= si <= spec.high):
        raise InputError(Problem(f"{magnitude:g} {unit} is outside the plausible range",
                                 field=spec.label, expected=expected))
    return si, unit


def convert(si_value: float, kind: str, system: str) -> float:
    """SI value of ``kind`` in the display unit of ``system``."""
    return si_value / _to_si(1.0, field_unit(kind, system), kind)


_DECIMALS = {"psi": 1, "kPa": 0, "gpm": 0, "L/s": 1, "in": 2, "mm": 0, "ft": 1, "m": 2}


def fmt(si_value, kind: str, system: str = "us", bare: bool = False) -> str:
    """Display text of an SI value, e.g. ``fmt(496422, "pressure") == "72.0 psi"``; None -> '-'."""
    if si_value is None or (isinstance(si_value, float) and not math.isfinite(si_value)):
        return "-"
    unit = field_unit(kind, system)
    value = convert(float(si_value), kind, system)
    text = f"{value:,.{_DECIMALS.get(unit, 2)}f}"
    return text if bare else f"{text} {unit}"
