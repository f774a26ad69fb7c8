"""``python -m calib flowtest``: the arithmetic of one hydrant flow test from the command line.

Thin: parses the options into a ``calib.flowtest.FlowTest``, calls ``evaluate`` and prints the
discharge, rated flow, NFPA 291 class, findings and the cautions (or one JSON object with ``--json``).
Bad input raises ``FlowTestError`` naming the option, which the dispatcher turns into exit code 2.
"""

from __future__ import annotations

import argparse
import json
import math
import sys

from calib import limits
from calib.errors import FlowTestError, Problem
from calib.flowtest import CAUTIONS, DEFAULT_TARGET, FlowTest, Outlet, evaluate
from calib.flowtest.findings import fmt_pressure
from calib.flowtest.pitot import OUTLET_COEFFICIENTS
from calib.units import DISPLAY, from_si, parse_value_text, to_si

#: Default unit of a bare number, by option kind and unit system.
_BARE = {"us": {"pressure": "psi", "diameter": "in", "flow": "gpm", "elevation": "ft", "length": "ft"},
         "si": {"pressure": "kPa", "diameter": "mm", "flow": "L/s", "elevation": "m", "length": "m"}}
#: The plausible range of each option, stated once in ``calib.limits``.
_LIMIT = {
    "--static": limits.PRESSURE, "--static-end": limits.PRESSURE, "--residual": limits.PRESSURE,
    "--target": limits.PRESSURE, "--pitot": limits.PITOT, "--outlet": limits.OUTLET_DIAMETER,
    "--flow": limits.FLOW, "--coefficient": limits.COEFFICIENT, "--elevation": limits.ELEVATION,
    "--gauge-height": limits.GAUGE_HEIGHT,
}
#: Options whose unusual values are warned about here (the flow-test findings cover the others).
_WARN_HERE = ("--outlet", "--coefficient", "--gauge-height")
_RANGE = {
    "--residual": "20 psi (140 kPa) up to the static",
    "--target": "0 up to the static, usually 20 psi (140 kPa)",
    "--outlet-shape": "smooth (0.90), square (0.80) or projecting (0.70)",
}


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "flowtest", help="discharge, rated flow, NFPA 291 class and findings of one hydrant flow test",
        description="Arithmetic of one hydrant flow test (NFPA 291 formulas). Values take a unit "
                    "(72psi, 496kPa, 2.5in, 64mm); a bare number is in the --units system "
                    "(psi, in, gpm, ft or kPa, mm, L/s, m). Several --pitot/--outlet pairs for "
                    "several outlets or hydrants; their flows are summed.")
    p.add_argument("--static", required=True, help="static pressure at the residual hydrant")
    p.add_argument("--residual", required=True, help="residual pressure while flowing")
    p.add_argument("--pitot", action="append", default=[], help="pitot reading of an outlet (repeat)")
    p.add_argument("--outlet", action="append", default=[], help="inside diameter of that outlet (repeat)")
    p.add_argument("--outlet-shape", action="append", default=[], choices=sorted(OUTLET_COEFFICIENTS),
                   help="outlet shape: one for all outlets or one per outlet (default smooth)")
    p.add_argument("--coefficient", action="append", default=[],
                   help="outlet coefficient instead of the shape's: one for all or one per outlet")
    p.add_argument("--pumper", action="store_true",
                   help="outlets are pumper outlets read without a flow tube (extra NFPA 291 factor)")
    p.add_argument("--flow", action="append", default=[],
                   help="a flow read directly (meter, or diffuser with its own coefficient); repeat")
    p.add_argument("--target", default=None, help="target residual for the rating (default 20 psi)")
    p.add_argument("--static-end", default=None, help="static pressure read again after the test")
    p.add_argument("--elevation", default=None, help="elevation of the residual hydrant (gives grades)")
    p.add_argument("--gauge-height", default="0", help="height of the gauge above that elevation")
    p.add_argument("--units", choices=("us", "si"), default="us", help="units of bare numbers and output")
    p.add_argument("--json", action="store_true", help="print one JSON object instead of text")
    p.set_defaults(func=run)


def _expected(option: str, units: str) -> str | None:
    if option in _LIMIT:
        return _LIMIT[option].expected(units)
    return _RANGE.get(option)


def _value(text, kind: str, option: str, units: str, warnings: list[str] | None = None) -> float:
    """The SI value of an option: a number and a unit (never an expression), inside its range."""
    try:
        value = to_si(text, kind, _BARE[units][kind])
    except (ValueError, TypeError) as exc:
        message = str(exc).split(" (expected")[0]  # the plausible range below says it better
        raise FlowTestError(Problem(message, field=option, expected=_expected(option, units))) from exc
    limit = _LIMIT.get(option)
    if limit is not None:
        if not math.isfinite(value):
            _bad(option, f"'{text}' is not a finite number", units)
        if limit.refuses(value):
            _bad(option, f"{limit.name} {limit.show(value, units)} {limit.why_refused(value)} "
                 f"(given '{text}')", units)
        if warnings is not None and option in _WARN_HERE and limit.unusual(value):
            warnings.append(limit.warning(value, option, units))
    return value


def _bad(option: str, message: str, units: str = "us"):
    raise FlowTestError(Problem(message, field=option, expected=_expected(option, units)))


def _per_outlet(values: list, n: int, option: str) -> list:
    if not values:
        return [None] * n
    if len(values) == 1:
        return values * n
    if len(values) != n:
        _bad(option, f"{len(values)} values given for {n} outlets: give one for all or one per outlet")
    return values


def build_test(args, warnings: list[str] | None = None) -> FlowTest:
    """The ``FlowTest`` an argument namespace describes; raises ``FlowTestError`` naming the option.

    Unusual but possible values are appended to ``warnings`` (one sentence each, naming the option).
    """
    u = args.units
    static = _value(args.static, "pressure", "--static", u)
    residual = _value(args.residual, "pressure", "--residual", u)
    target = _value(args.target if args.target is not None else "20 psi", "pressure", "--target", u)
    static_end = None if args.static_end is None else _value(args.static_end, "pressure", "--static-end", u)
    if residual >= static:
        _bad("--residual", f"the residual ({fmt_pressure(residual, u)}) must be below the static "
             f"({fmt_pressure(static, u)}); re-read both gauges", u)
    if target >= static:
        _bad("--target", f"the target ({fmt_pressure(target, u)}) must be below the static "
             f"({fmt_pressure(static, u)})", u)
    if len(args.pitot) != len(args.outlet):
        _bad("--outlet", f"{len(args.pitot)} --pitot and {len(args.outlet)} --outlet given: give them "
             "in pairs, one --outlet diameter per --pitot reading", u)
    n = len(args.pitot)
    if n == 0 and not args.flow:
        _bad("--pitot", "give at least one --pitot/--outlet pair or a --flow", u)
    # a coefficient or shape is checked even when no pitot outlet uses it, and then refused: given
    # with --flow alone it would be ignored without a word
    coefficient_values = [_coefficient(text, u) for text in args.coefficient]
    if n == 0 and (args.coefficient or args.outlet_shape):
        option = "--coefficient" if args.coefficient else "--outlet-shape"
        _bad(option, f"{option} applies to outlets read by pitot, and no --pitot is given (a "
             "--flow is taken as measured)", u)
    shapes = _per_outlet(args.outlet_shape, n, "--outlet-shape") if n else []
    coefficients = _per_outlet(coefficient_values, n, "--coefficient") if n else []
    outlets = []
    for i in range(n):
        pitot = _value(args.pitot[i], "pressure", "--pitot", u, warnings)
        diameter = _value(args.outlet[i], "diameter", "--outlet", u, warnings)
        outlets.append(Outlet(diameter=diameter, coefficient=coefficients[i],
                              shape=shapes[i] or "smooth", pitot=pitot, pumper=args.pumper))
    for text in args.flow:
        outlets.append(Outlet(flow=_value(text, "flow", "--flow", u, warnings)))
    elevation = None if args.elevation is None else \
        _value(args.elevation, "elevation", "--elevation", u, warnings)
    gauge_height = _value(args.gauge_height, "length", "--gauge-height", u, warnings)
    return FlowTest(static=static, residual=residual, outlets=outlets, target=target,
                    static_end=static_end, elevation=elevation, gauge_height=gauge_height)


def _coefficient(text: str, units: str) -> float:
    """An outlet coefficient: a plain number (no unit, never an expression) inside its range."""
    try:
        value, unit = parse_value_text(text)
    except ValueError as exc:
        _bad("--coefficient", str(exc), units)
    if unit is not None:
        _bad("--coefficient", f"'{text}' is not a number (a coefficient has no unit)", units)
    if not math.isfinite(value):
        _bad("--coefficient", f"'{text}' is not a finite number", units)
    if limits.COEFFICIENT.refuses(value):
        _bad("--coefficient", f"outlet coefficient {value:g} is out of range", units)
    return value


def format_text(result, system: str) -> str:
    """The text report of a result in ``system`` units."""
    du = DISPLAY[system]
    t = result.test

    def q(v):
        return f"{from_si(v, 'flow', du['flow']):.1f} {du['flow']}"

    lines = [f"Flow test - NFPA 291 arithmetic ({'US' if system == 'us' else 'SI'} units, gauge pressures)",
             f"  static {fmt_pressure(t.static, system)}, residual {fmt_pressure(t.residual, system)}, "
             f"drop {fmt_pressure(result.drop, system)} ({100 * result.drop_fraction:.1f} % of static)"]
    if t.static_end is not None:
        lines.append(f"  static at the end {fmt_pressure(t.static_end, system)}")
    for i, (o, flow) in enumerate(zip(t.outlets, result.outlet_flows), start=1):
        if o.flow is not None:
            lines.append(f"  outlet {i}: measured flow {q(flow)}")
        else:
            d = from_si(o.diameter, "diameter", du["diameter"])
            extra = f", pumper factor {o.factor:.2f}" if o.pumper else ""
            lines.append(f"  outlet {i}: {d:.4g} {du['diameter']}, c {o.coefficient:.2f}{extra}, "
                         f"pitot {fmt_pressure(o.pitot, system)} -> {q(flow)}")
    lines.append(f"  discharge (sum of outlets): {q(result.flow)}")
    lines.append(f"  rated flow at {fmt_pressure(t.target, system)} residual: {q(result.rated_flow)}")
    cls = result.hydrant_class
    if t.target != DEFAULT_TARGET:
        lines.append(f"  flow at {fmt_pressure(DEFAULT_TARGET, system)} residual (the class is by it): "
                     f"{q(result.rated_flow_20psi)}")
    lines.append(f"  class: {cls.describe(system)}")
    lines.append(f"    {cls.note}")
    if result.residual_grade is not None:
        lines.append(f"  hydraulic grade at the gauge: static {from_si(result.static_grade, 'head', du['head']):.2f} "
                     f"{du['head']}, residual {from_si(result.residual_grade, 'head', du['head']):.2f} {du['head']}")
    lines.append("Findings:" if result.findings else "Findings: none")
    lines += [f"  [{f.severity}] {f.message}" for f in result.findings]
    lines.append("Cautions:")
    lines += [f"  - {c}" for c in CAUTIONS]
    return "\n".join(lines)


def run(args: argparse.Namespace) -> int:
    warnings: list[str] = []
    test = build_test(args, warnings)
    for text in warnings:
        print(f"warning: {text}", file=sys.stderr)
    result = evaluate(test, system=args.units)
    if args.json:
        doc = {"command": "flowtest", **result.to_dict(args.units), "cautions": list(CAUTIONS)}
        print(json.dumps(doc, indent=2, allow_nan=False))
    else:
        print(format_text(result, args.units))
    return 0
