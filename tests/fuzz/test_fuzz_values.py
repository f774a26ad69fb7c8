"""Fuzz: typed values in the field app, value text in the library, and ``flowtest``'s options.

Oracle (``oracle.py``): a refusal names the field or option; an accepted value is finite, inside its
range (``calib.limits``) and was written as a plain number with an optional unit - never a comma,
an expression or digits other than 0-9 (checked by a simpler, independent pattern).
"""

import json
import math

from hypothesis import given, strategies as st

from calib import limits, units
from calib.errors import InputError
from mobile.services import values

from . import oracle
from .strategies import maybe, must_refuse


@oracle.fuzz_settings(1200)
@given(text=maybe, field=st.sampled_from(sorted(values.FIELDS)), system=st.sampled_from(["us", "si"]))
def test_app_value_parsing(text, field, system):
    with oracle.time_bound():
        try:
            si, unit = values.parse_value(text, field, system)
        except InputError as exc:
            assert values.FIELDS[field].label in str(exc)  # names the field
            oracle.COUNTS[("app values", "refused well")] += 1
            return
    spec = values.FIELDS[field]
    assert math.isfinite(si) and spec.low <= si <= spec.high and unit
    assert "," not in text and oracle.is_plausible_text(text), f"{text!r} read as {si} {unit}"
    oracle.COUNTS[("app values", "accepted")] += 1


@oracle.fuzz_settings(300)
@given(text=must_refuse, field=st.sampled_from(sorted(values.FIELDS)))
def test_app_refuses_every_known_bad_value(text, field):
    with oracle.time_bound():
        try:
            values.parse_value(text, field)
        except InputError:
            oracle.COUNTS[("app values", "refused well")] += 1
            return
    raise AssertionError(f"{text!r} was taken as a {field}")


@oracle.fuzz_settings(700)
@given(text=maybe, kind=st.sampled_from(["pressure", "flow", "diameter", "length", "head"]))
def test_value_text_is_a_number_and_a_unit(text, kind):
    with oracle.time_bound():
        try:
            value = units.to_si(text, kind, "m" if kind in ("length", "head") else None)
        except ValueError as exc:
            assert str(exc)
            oracle.COUNTS[("calib.units.to_si", "refused well")] += 1
            return
    assert isinstance(value, float)
    assert oracle.is_plausible_text(text) or text.strip().lower().lstrip("+-") in (
        "nan", "inf", "infinity") or "nan" in text.lower() or "inf" in text.lower(), text
    oracle.COUNTS[("calib.units.to_si", "accepted")] += 1


OPTIONS = {"--static": "80psi", "--residual": "60psi", "--pitot": "22psi", "--outlet": "2.5in",
           "--flow": "900gpm", "--coefficient": "0.9", "--target": "20psi",
           "--static-end": "79psi", "--elevation": "100ft", "--gauge-height": "2ft"}
KIND = {"--static": limits.PRESSURE, "--residual": limits.PRESSURE, "--pitot": limits.PITOT,
        "--outlet": limits.OUTLET_DIAMETER, "--flow": limits.FLOW,
        "--coefficient": limits.COEFFICIENT, "--target": limits.PRESSURE,
        "--static-end": limits.PRESSURE, "--elevation": limits.ELEVATION,
        "--gauge-height": limits.GAUGE_HEIGHT}


#: Good values by option, US units with the unit written (``--units`` decides bare numbers only).
GOOD = {
    "--pitot": st.builds(lambda v: f"{v:.3g} psi", st.floats(10, 30)),
    "--outlet": st.builds(lambda v: f"{v:.3g}in", st.floats(2, 5)),
    "--flow": st.builds(lambda v: f"{v:.4g} gpm", st.floats(100, 5000)),
    "--coefficient": st.builds(lambda v: f"{v:.2f}", st.floats(0.7, 0.9)),
    "--static-end": st.builds(lambda v: f"{v:.3g}psi", st.floats(70, 90)),
    "--elevation": st.builds(lambda v: f"{v:.4g} ft", st.floats(-100, 8000)),
    "--gauge-height": st.builds(lambda v: f"{v:.2g} ft", st.floats(0, 3)),
}


@oracle.fuzz_settings(300)
@given(data=st.data(), broken=st.lists(st.sampled_from(sorted(OPTIONS)), min_size=1, max_size=3,
                                       unique=True), mode=st.sampled_from(["bad", "maybe", "good"]),
       units_system=st.sampled_from(["us", "si"]))
def test_flowtest_options(data, broken, mode, units_system):
    given_ = dict(OPTIONS)
    if mode == "good":
        broken = [o for o in broken if o in GOOD] or ["--pitot"]
    if "--flow" in broken and "--pitot" not in broken:
        given_.pop("--pitot"), given_.pop("--outlet"), given_.pop("--coefficient")
        if mode == "good":  # a coefficient or outlet without a pitot is refused (it would be unused)
            broken = [o for o in broken if o not in ("--coefficient", "--outlet")]
    strategy = {"bad": lambda o: must_refuse, "maybe": lambda o: maybe, "good": GOOD.get}[mode]
    for option in broken:
        given_[option] = data.draw(strategy(option), label=option)
    argv = ["flowtest", "--json", "--units", units_system]
    for option, value in given_.items():
        argv.append(f"{option}={value}")  # '=' keeps a value starting with '-' a value
    code, out, err = oracle.run_cli(argv)
    refused = oracle.refused_well(code, err, "cli flowtest")
    if mode == "bad":
        assert refused, f"accepted {[(o, given_[o]) for o in broken]}"
        assert any(f"'{o}'" in err for o in given_), err
        return
    if mode == "good":
        assert code == 0, err
    if refused:
        return
    assert code == 0
    doc = json.loads(out)  # allow_nan=False in the writer: every number is finite
    assert doc["flow"] if "flow" in doc else True
    for option in broken:
        text = given_[option]
        assert "," not in text and oracle.is_plausible_text(text), f"{option}={text!r} accepted"
        assert not KIND[option].refuses(units.to_si(text, "pressure" if KIND[option].kind ==
                                                    "pressure" else KIND[option].kind
                                                    if KIND[option].kind != "number" else
                                                    "length", _bare(option, units_system))
                                        if KIND[option].kind != "number" else float(text))


def _bare(option, system):
    from calib.cli.flowtest import _BARE
    kind = {"pressure": "pressure", "diameter": "diameter", "flow": "flow", "elevation": "elevation",
            "length": "length"}[KIND[option].kind]
    return _BARE[system][kind]


@oracle.fuzz_settings(300)
@given(rule=st.one_of(maybe, st.builds(lambda k, e: f"{k}={e}", st.sampled_from(
    ["diameter", "material", "decade", "group"]), maybe), st.builds(
    lambda a, b: f"material,diameter={a},{b}", maybe, maybe)))
def test_group_by_rule(rule):
    from calib.calibration.groups import parse_rule
    with oracle.time_bound():
        try:
            parts = parse_rule(rule)
        except InputError as exc:
            assert "'--group-by'" in str(exc)
            oracle.COUNTS[("fit --group-by rule", "refused well")] += 1
            return
    for key, edges in parts:
        for edge in edges or ():
            assert not limits.PIPE_DIAMETER.refuses(edge * units.INCH), rule
    oracle.COUNTS[("fit --group-by rule", "accepted")] += 1
