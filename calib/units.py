"""Units at the edges: one pint registry for the package, header parsing and the SI conversions.

Inside the package every number is a plain SI float (m, m3/s, Pa, s). pint is used only where values
come in (CSV headers, command-line options, the app's fields) and go out (files, display).

Conventions (printed in reports and outputs):

- Pressures are **gauge** pressures, as the trade reads them.
- Pressure head uses water at 60 degF (pint's ``ft_H2O_60F``): 1 psi = 2.308965 ft of water
  (NIST SP 811 conversion factors; 1 psi = 6894.757293 Pa exactly). The conventional 1000 kg/m3 water
  column would give 2.306659 ft, 0.1 % less.
- ``gpm`` is the US gallon per minute; ``mgd`` million US gallons per day.
"""

from __future__ import annotations

import re

import pint

try:  # pint keeps its parsed unit definitions in the user's cache folder: 10x faster start
    ureg = pint.UnitRegistry(cache_folder=":auto:")
except Exception:  # no writable cache folder (e.g. a locked-down tablet): parse them afresh
    ureg = pint.UnitRegistry()
ureg.define("gpm = gallon / minute")
ureg.define("mgd = 1e6 * gallon / day")
ureg.define("lps = liter / second")
Q_ = ureg.Quantity

#: Specific weight of water used to turn pressure into head [Pa per m of water], 60 degF water.
GAMMA_WATER = float((1 * ureg.ft_H2O_60F).to("Pa").magnitude / 0.3048)
#: Standard gravity [m/s2].
G = 9.80665

PSI = float((1 * ureg.psi).to("Pa").magnitude)
FT = 0.3048
INCH = 0.0254
GPM = float((1 * ureg.gpm).to("m**3/s").magnitude)

#: Display units by system; keys are the physical kinds used across the package.
DISPLAY = {
    "us": {"length": "ft", "elevation": "ft", "head": "ft", "diameter": "in", "flow": "gpm",
           "pressure": "psi", "velocity": "ft/s", "headloss": "ft"},
    "si": {"length": "m", "elevation": "m", "head": "m", "diameter": "mm", "flow": "L/s",
           "pressure": "kPa", "velocity": "m/s", "headloss": "m"},
}
SI_UNIT = {"length": "m", "elevation": "m", "head": "m", "diameter": "m", "flow": "m**3/s",
           "pressure": "Pa", "velocity": "m/s", "headloss": "m"}
_DIMENSION = {kind: ureg(unit).dimensionality for kind, unit in SI_UNIT.items()}

_HEADER = re.compile(r"^\s*(?P<name>[^\[\]]*?)\s*(\[(?P<unit>[^\[\]]*)\])?\s*$")


def _article(word: str) -> str:
    return "an" if word[:1] in "aeiou" else "a"


def parse_header(header: str) -> tuple[str, str | None]:
    """Split a column header ``"elevation [ft]"`` into ``("elevation", "ft")``; no brackets gives None."""
    m = _HEADER.match(str(header))
    if not m:
        return str(header).strip(), None
    unit = m.group("unit")
    return m.group("name").strip().lower(), (unit.strip() if unit is not None else None)


def unit_factor(unit: str, kind: str) -> float:
    """Factor that turns a magnitude in ``unit`` into SI for a physical ``kind`` (see ``SI_UNIT``).

    Raises ``ValueError`` with the unit and the expected dimension when pint does not know the unit or
    it has the wrong dimension. Temperature-like offsets are not supported (none of our kinds has one).
    """
    try:
        q = ureg.Quantity(1.0, unit)
    except (pint.errors.UndefinedUnitError, pint.errors.DefinitionSyntaxError, AttributeError,
            TypeError, ValueError, AssertionError) as exc:
        raise ValueError(f"unknown unit '{unit}'") from exc
    if q.dimensionality != _DIMENSION[kind]:
        raise ValueError(f"unit '{unit}' is not {_article(kind)} {kind} unit (expected something like "
                         f"{DISPLAY['us'][kind]} or {DISPLAY['si'][kind]})")
    return float(q.to(SI_UNIT[kind]).magnitude)


def to_si(value, kind: str, default_unit: str | None = None) -> float:
    """Turn a Quantity, a string such as ``"72 psi"`` or a bare number (in ``default_unit``) into SI.

    A bare number with no ``default_unit`` is taken as already SI. Raises ``ValueError`` naming what
    is wrong (not a number, unknown unit, wrong dimension).
    """
    if isinstance(value, pint.Quantity):
        if value.dimensionality != _DIMENSION[kind]:
            raise ValueError(f"'{value:~}' is not {_article(kind)} {kind} (expected a unit such as "
                             f"{DISPLAY['us'][kind]} or {DISPLAY['si'][kind]})")
        return float(value.to(SI_UNIT[kind]).magnitude)
    if isinstance(value, str):
        text = value.strip()
        try:
            q = ureg.Quantity(text)
        except Exception as exc:  # pint raises many types on junk text
            raise ValueError(f"'{value}' is not a number with a unit") from exc
        if not isinstance(q, pint.Quantity) or q.dimensionless:
            magnitude = float(q.magnitude if isinstance(q, pint.Quantity) else q)
            return to_si(magnitude, kind, default_unit)
        return to_si(q, kind)
    magnitude = float(value)
    if default_unit is None:
        return magnitude
    return magnitude * unit_factor(default_unit, kind)


def from_si(value, kind: str, unit: str):
    """Express an SI magnitude (float or array) of ``kind`` in ``unit``."""
    return value / unit_factor(unit, kind)


def display_unit(kind: str, system: str = "us") -> str:
    """The unit shown for ``kind`` in the ``us`` or ``si`` system."""
    if system not in DISPLAY:
        raise ValueError(f"units must be 'us' or 'si', not '{system}'")
    return DISPLAY[system][kind]


def pressure_to_head(pressure_pa):
    """Gauge pressure [Pa] to pressure head [m of water at 60 degF]: h = p / gamma."""
    return pressure_pa / GAMMA_WATER


def head_to_pressure(head_m):
    """Pressure head [m of water at 60 degF] to gauge pressure [Pa]: p = gamma h."""
    return head_m * GAMMA_WATER
