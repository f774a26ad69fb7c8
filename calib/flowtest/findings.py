"""Quality findings for a flow test: what a careful engineer checks before trusting a reading.

Each finding has a code (stable, for programs), a severity (``info`` | ``warning`` | ``error``) and a
plain sentence for the crew, with the reading in the units the crew uses. The thresholds are module
constants with their sources; this module decides nothing else (the app or report decides what to
do with a warning).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from calib import limits
from calib.units import PSI

SEVERITIES = ("info", "warning", "error")

#: NFPA 291 (2010 ed., 4.3.6): the drop should be at least 25 % of the static (or the test should
#: flow the flow needed for fire fighting).
MIN_DROP_FRACTION = 0.25
#: Modelling practice: at least 10 psi of drop so that it dwarfs gauge error (Walski, "Model
#: calibration data: the good, the bad and the useless", JAWWA 2000).
MIN_DROP = 10.0 * PSI
#: NFPA 291 (from memory): avoid pitot readings below about 10 psi; the upper end of the reliable
#: pitot range is about 30 psi (from memory, low confidence). Stated in ``calib.limits.PITOT``.
PITOT_LOW, PITOT_HIGH = limits.PITOT.usual
#: Common practice (our choice): warn when the rated flow is more than twice the flow tested. At a
#: ratio of 2 the extrapolated drop is 2^1.852 = 3.6 times the drop measured, so a 1 psi gauge error
#: becomes about 3.6 psi at the target and the curve leaves the range it was measured in.
MAX_EXTRAPOLATION = 2.0
#: NFPA 291: keep every residual at or above 20 psi during a test (vacuum, back-siphonage).
MIN_RESIDUAL = 20.0 * PSI
#: Common practice: a static outside 10 - 200 psi is implausible for a distribution main; check the
#: gauge, its range and the units.
STATIC_LOW, STATIC_HIGH = limits.PRESSURE.usual  # stated in calib.limits
#: Common practice: a static that moved more than 2 psi between the start and the end of the test
#: points to gauge drift or a system that changed (pump, tank, valve) during the test.
STATIC_CHANGE = 2.0 * PSI
#: Relative slack on every threshold so that a reading exactly at a limit (2 psi entered as psi and
#: converted to Pa) is judged as entered, not by its last binary digit.
_SLACK = 1e-9


@dataclass(frozen=True)
class Finding:
    """One finding: ``code`` (e.g. ``"residual-above-static"``), ``severity``, ``message``, ``source``."""

    code: str
    severity: str
    message: str
    source: str = ""

    def __post_init__(self):
        if self.severity not in SEVERITIES:
            raise ValueError(f"severity must be one of {SEVERITIES}, not '{self.severity}'")


def fmt_pressure(pa: float, system: str = "us") -> str:
    """A pressure for a crew: ``"58 psi"`` / ``"58.5 psi"`` or ``"400 kPa"``."""
    if system == "si":
        return f"{pa / 1000.0:.0f} kPa"
    text = f"{pa / PSI:.1f}".rstrip("0").rstrip(".")
    return f"{text} psi"


def check_pressures(static: float, residual: float, system: str = "us") -> list[Finding]:
    """Negative, implausible or inverted static and residual readings."""
    out = []
    fs, fr = fmt_pressure(static, system), fmt_pressure(residual, system)
    for name, value in (("static", static), ("residual", residual)):
        if value < 0:
            out.append(Finding(f"negative-{name}", "error",
                               f"The {name} reading ({fmt_pressure(value, system)}) is below zero. "
                               "Check the gauge and that it reads gauge pressure, then re-read."))
    if static > STATIC_HIGH * (1 + _SLACK):
        out.append(Finding("static-high", "warning",
                           f"The static ({fs}) is above {fmt_pressure(STATIC_HIGH, system)}, which is "
                           "unusual for a distribution main. Check the gauge range and the units.",
                           "common practice"))
    elif 0 <= static < STATIC_LOW * (1 - _SLACK):
        out.append(Finding("static-low", "warning",
                           f"The static ({fs}) is below {fmt_pressure(STATIC_LOW, system)}. Check the "
                           "gauge; do not flow this hydrant until the low pressure is explained.",
                           "common practice"))
    if residual > static:
        out.append(Finding("residual-above-static", "error",
                           f"The residual ({fr}) is above the static ({fs}). Re-read both gauges."))
    elif residual == static:
        out.append(Finding("no-drop", "error",
                           f"The residual equals the static ({fs}): no pressure drop, so no rated flow "
                           "can be worked out. Flow more water or check the gauge."))
    return out


def check_drop(static: float, residual: float, system: str = "us") -> list[Finding]:
    """Drop too small to extrapolate from: below 10 psi (Walski 2000) and below 25 % (NFPA 291)."""
    drop = static - residual
    if drop <= 0 or static <= 0:
        return []
    out = []
    if drop < MIN_DROP * (1 - _SLACK):
        out.append(Finding("drop-below-10psi", "warning",
                           f"The pressure dropped only {fmt_pressure(drop, system)}: open another outlet "
                           f"or hydrant if it is safe, until it drops at least "
                           f"{fmt_pressure(MIN_DROP, system)}, so that gauge error does not swamp it "
                           "(modelling practice, Walski 2000, JAWWA).",
                           "Walski, Model calibration data: the good, the bad and the useless, JAWWA 2000"))
    if drop < MIN_DROP_FRACTION * static * (1 - _SLACK):
        out.append(Finding("drop-below-25pct", "warning",
                           f"The pressure dropped only {100 * drop / static:.0f} % of the static: open "
                           "another outlet or hydrant if it is safe, until it drops at least 25 %; "
                           "otherwise the rated flow is an extrapolation (NFPA 291 (2010 ed., 4.3.6)).",
                           "NFPA 291 (2010 ed.), 4.3.6"))
    return out


def check_pitots(pitots, system: str = "us") -> list[Finding]:
    """Pitot readings outside about 10 - 30 psi, where the reading is less reliable."""
    out = []
    for i, p in enumerate(np.asarray(pitots, dtype=float).ravel(), start=1):
        if p < PITOT_LOW * (1 - _SLACK):
            out.append(Finding("pitot-low", "warning",
                               f"Outlet {i}: the pitot reading ({fmt_pressure(p, system)}) is below "
                               f"{fmt_pressure(PITOT_LOW, system)}: use a smaller outlet or fewer "
                               "outlets (NFPA 291 advises against such low readings).",
                               "NFPA 291 (from memory)"))
        elif p > PITOT_HIGH * (1 + _SLACK):
            out.append(Finding("pitot-high", "warning",
                               f"Outlet {i}: the pitot reading ({fmt_pressure(p, system)}) is above about "
                               f"{fmt_pressure(PITOT_HIGH, system)}; the stream is hard to read steadily. "
                               "Open a second outlet to spread the flow.",
                               "upper limit from memory, low confidence"))
    return out


def check_extrapolation(test_flow: float, rated: float, system: str = "us") -> list[Finding]:
    """Rated flow far beyond the flowed rate (ratio above ``MAX_EXTRAPOLATION``, common practice)."""
    if not (test_flow > 0 and np.isfinite(rated)) or rated <= MAX_EXTRAPOLATION * test_flow * (1 + _SLACK):
        return []
    return [Finding("far-extrapolation", "warning",
                    f"The rated flow is {rated / test_flow:.2f} times the flow tested; beyond "
                    f"{MAX_EXTRAPOLATION:g} times the curve is guessed, not measured. Flow more water "
                    "for a better rating if it is safe.", "common practice")]


def check_residual_minimum(residual: float, system: str = "us") -> list[Finding]:
    """Residual below 20 psi during the test (NFPA 291): risk of vacuum and back-siphonage."""
    if not (0 <= residual < MIN_RESIDUAL * (1 - _SLACK)):
        return []
    return [Finding("residual-below-20psi", "error",
                    f"The residual fell to {fmt_pressure(residual, system)}, below "
                    f"{fmt_pressure(MIN_RESIDUAL, system)}: close the outlets slowly now and report "
                    "it; lower pressure can pull in dirty water by back-siphonage (NFPA 291 keeps "
                    "every residual at or above 20 psi).", "NFPA 291")]


def check_static_change(static: float, static_end: float | None, system: str = "us") -> list[Finding]:
    """A static at the end below zero, or one that moved more than ``STATIC_CHANGE`` since the start
    (common practice)."""
    if static_end is None:
        return []
    out = []
    if static_end < 0:
        out.append(Finding("negative-static-end", "error",
                           f"The static at the end ({fmt_pressure(static_end, system)}) is below zero. "
                           "Check the gauge and re-read."))
    if abs(static_end - static) > STATIC_CHANGE * (1 + _SLACK):
        out.append(Finding("static-changed", "warning",
                           f"The static was {fmt_pressure(static, system)} at the start and "
                           f"{fmt_pressure(static_end, system)} at the end. A change above "
                           f"{fmt_pressure(STATIC_CHANGE, system)} means gauge drift or a system that "
                           "changed (pump, tank, valve); note it and repeat the test if you can.",
                           "common practice"))
    return out


def check_gauge_position(residual_on_flowing: bool) -> list[Finding]:
    """A residual read on the flowing hydrant measures its lateral, not the system (common practice)."""
    if not residual_on_flowing:
        return []
    return [Finding("gauge-on-flowing-hydrant", "warning",
                    "The residual was read on the flowing hydrant: it includes the loss in the hydrant "
                    "and its lateral. Fine for a rough rating, not for model calibration.",
                    "common practice")]


def check_flow(static: float, residual: float, test_flow: float | None) -> list[Finding]:
    """No flow recorded while the pressure dropped: a pitot or meter reading is missing or wrong."""
    if test_flow is None or test_flow > 0 or not residual < static:
        return []
    return [Finding("no-flow", "error",
                    "No flow was recorded, yet the pressure dropped. Check the pitot or meter readings.")]


def check_test(static: float, residual: float, pitots=(), test_flow: float | None = None,
               rated: float | None = None, static_end: float | None = None, system: str = "us",
               residual_on_flowing: bool = False) -> list[Finding]:
    """All findings for one test, SI inputs [Pa gauge, m3/s], messages in ``system`` units."""
    out = check_pressures(static, residual, system)
    out += check_drop(static, residual, system)
    out += check_residual_minimum(residual, system)
    out += check_pitots(pitots, system)
    out += check_flow(static, residual, test_flow)
    if test_flow is not None and rated is not None:
        out += check_extrapolation(test_flow, rated, system)
    out += check_static_change(static, static_end, system)
    out += check_gauge_position(residual_on_flowing)
    return out
