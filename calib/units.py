"""Units at the edges: one pint registry for the package, header parsing and the SI conversions.

Inside the package every number is a plain SI float (m, m3/s, Pa, s). pint is used only where values
come in (CSV headers, command-line options, the app's fields) and go out (files, display). pint is
imported on first need: the common units' factors are written out here as pint's own values
(``_FACTORS``, checked against pint by the tests), so a run that meets only those never loads it.

Conventions (printed in reports and outputs):

- Pressures are **gauge** pressures, as the trade reads them.
- Pressure head uses water at 60 degF (pint's ``ft_H2O_60F``): 1 psi = 2.308965 ft of water
  (NIST SP 811 conversion factors; 1 psi = 6894.757293 Pa exactly). The conventional 1000 kg/m3 water
  column would give 2.306659 ft, 0.1 % less.
- ``gpm`` is the US gallon per minute; ``mgd`` million US gallons per day.
"""

from __future__ import annotations

import functools
import re
import sys


def _import_pint():
    """Import pint without the Dask it loads for its dask-array support (a third of pint's import).

    pint's compatibility layer imports ``dask.base`` whenever Dask is installed; no Quantity here
    ever holds a Dask array (the fire-flow scan sends plain SI floats to its workers). While pint is
    imported, ``sys.modules["dask"] = None`` makes Dask look absent (``importlib.util.find_spec``
    answers None for it); the entry is removed at once, so a later ``import dask`` works as usual.
    Where Dask or pint is loaded already, nothing changes.
    """
    if "pint" in sys.modules or "dask" in sys.modules:
        import pint
        return pint
    sys.modules["dask"] = None
    try:
        import pint
    finally:
        if sys.modules.get("dask", ...) is None:
            del sys.modules["dask"]
    return pint


_REGISTRY = {}


def _registry():
    """pint and the package's registry, made on first use (importing pint takes 0.2-0.3 s, and a
    run that meets only the units of ``_FACTORS`` never needs it): (pint, registry, dimensions)."""
    if not _REGISTRY:
        pint = _import_pint()
        try:  # pint keeps its parsed unit definitions in the user's cache folder: 10x faster start
            ureg = pint.UnitRegistry(cache_folder=":auto:")
        except Exception:  # no writable cache folder (e.g. a locked-down tablet): parse them afresh
            ureg = pint.UnitRegistry()
        ureg.define("gpm = gallon / minute")
        ureg.define("mgd = 1e6 * gallon / day")
        ureg.define("lps = liter / second")
        dims = {kind: ureg(unit).dimensionality for kind, unit in SI_UNIT.items()}
        _REGISTRY.update(pint=pint, ureg=ureg, dims=dims)
    return _REGISTRY["pint"], _REGISTRY["ureg"], _REGISTRY["dims"]


def __getattr__(name):
    # ``units.ureg``, ``units.Q_`` and ``units.pint`` as before, pint loaded when first asked for
    if name in ("pint", "ureg", "Q_"):
        pint, ureg, _ = _registry()
        return {"pint": pint, "ureg": ureg, "Q_": ureg.Quantity}[name]
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")


# The constants and the common units' factors below are pint's own values, to the last bit (hence
# 0.30479999999999996 for the foot): written out so that a run that meets only these units does not
# import pint; tests/foundation/test_units.py checks each against pint.
#: Specific weight of water used to turn pressure into head [Pa per m of water], 60 degF water:
#: pint's ``(1 ft_H2O_60F).to("Pa") / 0.3048``.
GAMMA_WATER = 9796.853156649997
#: Standard gravity [m/s2].
G = 9.80665

PSI = 6894.7572931683635  # pint's 1 psi in Pa
FT = 0.3048
INCH = 0.0254
GPM = 6.309019639999999e-05  # pint's 1 gpm (US gallon per minute) in m3/s

#: Display units by system; keys are the physical kinds used across the package.
DISPLAY = {
    "us": {"length": "ft", "elevation": "ft", "head": "ft", "diameter": "in", "flow": "gpm",
           "pressure": "psi", "velocity": "ft/s", "headloss": "ft"},
    "si": {"length": "m", "elevation": "m", "head": "m", "diameter": "mm", "flow": "L/s",
           "pressure": "kPa", "velocity": "m/s", "headloss": "m"},
}
SI_UNIT = {"length": "m", "elevation": "m", "head": "m", "diameter": "m", "flow": "m**3/s",
           "pressure": "Pa", "velocity": "m/s", "headloss": "m"}

#: pint's factor to SI of the units files and displays use most, by dimension (see above).
_FACTORS = {
    "length": {"m": 1.0, "ft": 0.30479999999999996, "in": 0.0254, "mm": 0.001, "cm": 0.01,
               "km": 1000.0},
    "flow": {"m**3/s": 1.0, "gpm": 6.309019639999999e-05, "L/s": 0.0010000000000000002,
             "lps": 0.0010000000000000002, "mgd": 0.043812636388888875,
             "m**3/h": 0.0002777777777777778, "L/min": 1.666666666666667e-05},
    "pressure": {"Pa": 1.0, "kPa": 1000.0, "psi": 6894.7572931683635, "bar": 100000.0,
                 "MPa": 1000000.0},
    "velocity": {"m/s": 1.0, "ft/s": 0.30479999999999996},
}
_DIMENSION_OF = {"length": "length", "elevation": "length", "head": "length", "diameter": "length",
                 "headloss": "length", "flow": "flow", "pressure": "pressure",
                 "velocity": "velocity"}

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


@functools.lru_cache(maxsize=512)  # a few units are asked for again and again; pint is slow
def unit_factor(unit: str, kind: str) -> float:
    """Factor that turns a magnitude in ``unit`` into SI for a physical ``kind`` (see ``SI_UNIT``).

    Raises ``ValueError`` with the unit and the expected dimension when pint does not know the unit or
    it has the wrong dimension. Temperature-like offsets are not supported (none of our kinds has one).
    """
    check_unit_text(unit)
    known = _FACTORS[_DIMENSION_OF[kind]].get(unit)
    if known is not None:
        return known
    pint, ureg, dims = _registry()
    try:
        q = ureg.Quantity(1.0, unit)
    except (pint.errors.UndefinedUnitError, pint.errors.DefinitionSyntaxError, AttributeError,
            TypeError, ValueError, AssertionError) as exc:
        raise ValueError(f"unknown unit '{unit}'") from exc
    if q.dimensionality != dims[kind]:
        raise ValueError(f"unit '{unit}' is not {_article(kind)} {kind} unit (expected something like "
                         f"{DISPLAY['us'][kind]} or {DISPLAY['si'][kind]})")
    return float(q.to(SI_UNIT[kind]).magnitude)


def to_si(value, kind: str, default_unit: str | None = None) -> float:
    """Turn a Quantity, a string such as ``"72 psi"`` or a bare number (in ``default_unit``) into SI.

    A bare number with no ``default_unit`` is taken as already SI. A string is a number and an
    optional unit, read by ``parse_value_text`` (never evaluated as an expression). Raises
    ``ValueError`` naming what is wrong (not a number, unknown unit, wrong dimension, too large).
    NaN and infinity pass through: the caller's range check (``calib.limits``) refuses them.
    """
    pint = sys.modules.get("pint")  # no Quantity can exist before pint is imported
    if pint is not None and isinstance(value, pint.Quantity):
        if value.dimensionality != _registry()[2][kind]:
            raise ValueError(f"'{value:~}' is not {_article(kind)} {kind} (expected a unit such as "
                             f"{DISPLAY['us'][kind]} or {DISPLAY['si'][kind]})")
        try:
            return float(value.to(SI_UNIT[kind]).magnitude)
        except (OverflowError, TypeError) as exc:
            raise ValueError(f"'{value:~}' is not a number of a plausible size") from exc
    if isinstance(value, str):
        magnitude, unit = parse_value_text(value)
        if unit is None:
            return to_si(magnitude, kind, default_unit)
        return magnitude * unit_factor(unit, kind)
    if isinstance(value, bool):
        raise ValueError(f"{value!r} is not a number")
    try:
        magnitude = float(value)
    except OverflowError:
        raise ValueError("the number is too large to be a reading") from None
    if default_unit is None:
        return magnitude
    return magnitude * unit_factor(default_unit, kind)


# --- a value typed or given as text: a number, then a unit ----------------------------------------
# A value is a number and a unit, never an expression: pint would evaluate "9**9**9 psi" (hanging)
# or "2**10" (1024) or read "72,5" as 725. The number is parsed here by a strict pattern (ASCII digits,
# at most 15 of them before and after the point, an exponent of at most 3 digits); only the unit
# text, itself checked by a strict pattern (names, one small power, at most four of them joined by
# * or /), is handed to pint.
_NUMBER_TEXT = r"[+-]?(?:[0-9]{1,15}(?:\.[0-9]{0,15})?|\.[0-9]{1,15})(?:[eE][+-]?[0-9]{1,3})?"
_NOT_FINITE = r"[+-]?(?:nan|inf|infinity)"
_UNIT_WORD = r"[A-Za-z_][A-Za-z0-9_]{0,19}(?:(?:\*\*|\^)[1-3])?"
_UNIT_TEXT = rf"{_UNIT_WORD}(?:\s*[*/]\s*{_UNIT_WORD}){{0,3}}"
_VALUE = re.compile(rf"^\s*(?P<num>{_NUMBER_TEXT}|{_NOT_FINITE})\s*(?P<unit>{_UNIT_TEXT})?\s*$",
                    re.ASCII | re.IGNORECASE)
_UNIT_ONLY = re.compile(rf"^\s*{_UNIT_TEXT}\s*$", re.ASCII)
#: Longest text looked at; a reading or a unit is never longer.
MAX_TEXT = 60


def _shown(text: str) -> str:
    text = str(text).strip()
    return text if len(text) <= 24 else text[:21] + "..."


def check_unit_text(unit) -> None:
    """Raise ``ValueError`` unless ``unit`` looks like a unit (names, small powers, * and /).

    Keeps what reaches pint's parser small and free of numbers to evaluate (``9**9**9``).
    """
    if not isinstance(unit, str) or len(unit) > MAX_TEXT or not _UNIT_ONLY.match(unit):
        raise ValueError(f"unknown unit '{_shown(unit)}' (a unit is a name such as psi, kPa, "
                         "gpm, L/s, ft or m**3/s)")


def parse_number(text: str) -> float:
    """A plain number written as text (a table cell, a bare option): ``parse_value_text`` without
    a unit. Raises ``ValueError`` saying why (a comma, an expression, a unit, junk)."""
    magnitude, unit = parse_value_text(text)
    if unit is not None:
        raise ValueError(f"'{_shown(text)}' is not a number (the unit belongs in the column header "
                         "or is not wanted here)")
    return magnitude


def parse_value_text(text: str) -> tuple[float, str | None]:
    """Split a typed value ``"72.5 psi"`` into ``(72.5, "psi")``; ``"72"`` gives ``(72.0, None)``.

    Strict: ASCII digits with an optional point and exponent, then an optional unit. Refused with a
    ``ValueError`` saying why: a comma (decimal or thousands: never guessed), an expression
    (``2**10``), a percent or degree sign, brackets, a doubled sign, more than 15 digits, junk.
    The magnitude may be NaN or infinite ("nan", "inf", "1e999"): range checks refuse it later.
    """
    raw = str(text)
    shown = _shown(raw)
    if len(raw) > MAX_TEXT:
        raise ValueError(f"'{shown}' is too long to be a reading ({len(raw)} characters)")
    m = _VALUE.match(raw)
    if not m:
        why = "is not a number with a unit"
        if "," in raw:
            why += ": a comma is not read (type a point for decimals, 72.5, and no thousands separator)"
        elif any(ch in raw for ch in "*^()[]%;"):
            why += ": a value is a number and a unit, not an expression or a list"
        elif any(not ch.isascii() for ch in raw):
            why += ": only the digits 0-9, a point, a sign and a unit name are read"
        elif re.search(r"[0-9]{16}", raw):
            why += ": more than 15 digits"
        raise ValueError(f"'{shown}' {why}")
    num = m.group("num")
    magnitude = float(num)  # a checked pattern: float() of it never raises
    return magnitude, m.group("unit")


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
