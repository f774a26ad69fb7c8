"""Every finding fires on a test built for it and stays silent on a clean test.

Thresholds and their sources: NFPA 291 (2010 ed., 4.3.6) drop of at least 25 %; Walski 2000 (JAWWA,
"Model calibration data: the good, the bad and the useless") at least 10 psi; NFPA 291 pitot not below
10 psi (from memory) and about 30 psi upper (from memory, low confidence); NFPA 291 residual >= 20 psi;
extrapolation ratio 2, static range 10 - 200 psi and static change 2 psi are common practice.
"""

import pytest

from calib.flowtest import Finding, FlowTest, Outlet, check_test, evaluate
from calib.flowtest.findings import fmt_pressure
from calib.units import GPM, PSI


def _test(static=80, residual=55, pitots=(20,), static_end=None, **kw):
    outlets = [Outlet("2.5 in", pitot=f"{p} psi") for p in pitots]
    return FlowTest(f"{static} psi", f"{residual} psi", outlets,
                    static_end=None if static_end is None else f"{static_end} psi", **kw)


def codes(test, system="us"):
    return [f.code for f in evaluate(test, system).findings]


def test_clean_test_has_no_findings():
    # 80 / 55 psi: drop 25 psi (31 %), pitot 20 psi, rated / tested = (60/25)^0.54 = 1.60; end static 79.
    assert codes(_test(static_end=79)) == []


@pytest.mark.parametrize("kwargs, code, severity", [
    (dict(static=55, residual=58), "residual-above-static", "error"),
    (dict(static=55, residual=55), "no-drop", "error"),
    (dict(static=36, residual=27), "drop-below-10psi", "warning"),         # 9 psi, exactly 25 %
    (dict(static=100, residual=80), "drop-below-25pct", "warning"),        # 20 psi, 20 %
    (dict(pitots=(8,)), "pitot-low", "warning"),
    (dict(pitots=(35,)), "pitot-high", "warning"),
    (dict(static=100, residual=88), "far-extrapolation", "warning"),       # (80/12)^0.54 = 2.79 > 2
    (dict(static=-5, residual=-10), "negative-static", "error"),
    (dict(static=50, residual=-2), "negative-residual", "error"),
    (dict(static=210, residual=150), "static-high", "warning"),
    (dict(static=8, residual=4), "static-low", "warning"),
    (dict(static=60, residual=18), "residual-below-20psi", "error"),
    (dict(static_end=75), "static-changed", "warning"),
    (dict(static_end=77.9), "static-changed", "warning"),
    (dict(residual_on_flowing=True), "gauge-on-flowing-hydrant", "warning"),
    (dict(pitots=(0,)), "no-flow", "error"),
    (dict(target="90 psi"), "target-above-static", "error"),
    (dict(target="-1 psi"), "negative-target", "error"),
])
def test_each_finding_fires_on_its_case(kwargs, code, severity):
    found = {f.code: f for f in evaluate(_test(**kwargs)).findings}
    assert code in found, found
    assert found[code].severity == severity
    assert found[code].message.endswith(".")


def test_readings_exactly_at_a_limit_pass():
    assert "static-changed" not in codes(_test(static_end=78))  # exactly 2 psi: common practice limit
    assert codes(_test(static=40, residual=30, pitots=(10, 30))) == []  # 10 psi and 25 %; pitots 10, 30
    assert "residual-below-20psi" not in codes(_test(static=40, residual=20))


def test_residual_above_static_message_is_plain():
    f = {f.code: f for f in evaluate(_test(static=55, residual=58)).findings}["residual-above-static"]
    assert f.message == "The residual (58 psi) is above the static (55 psi). Re-read both gauges."


def test_drop_messages_name_their_sources():
    by_code = {f.code: f for f in evaluate(_test(static=34, residual=27)).findings}
    assert "Walski 2000" in by_code["drop-below-10psi"].message
    assert "NFPA 291 (2010 ed., 4.3.6)" in by_code["drop-below-25pct"].message
    assert "25 %" in by_code["drop-below-25pct"].message


def test_messages_in_si_units():
    f = {f.code: f for f in evaluate(_test(static=55, residual=58), "si").findings}["residual-above-static"]
    assert f.message == "The residual (400 kPa) is above the static (379 kPa). Re-read both gauges."


def test_residual_below_20_mentions_back_siphonage():
    f = {f.code: f for f in evaluate(_test(static=60, residual=15)).findings}["residual-below-20psi"]
    assert "back-siphonage" in f.message and "NFPA 291" in f.message


def test_interpolation_is_not_extrapolation():
    # Target above the residual: the rated flow is below the test flow, no far-extrapolation finding.
    t = _test(static=100, residual=95, target="97 psi")
    assert "far-extrapolation" not in codes(t)


def test_check_test_directly_in_si():
    out = check_test(80 * PSI, 55 * PSI, [20 * PSI], 700 * GPM, 1100 * GPM)
    assert out == []
    out = check_test(80 * PSI, 55 * PSI, [20 * PSI], 500 * GPM, 1100 * GPM)
    assert [f.code for f in out] == ["far-extrapolation"]


def test_finding_rejects_unknown_severity():
    with pytest.raises(ValueError, match="severity"):
        Finding("x", "fatal", "text")


def test_fmt_pressure():
    assert fmt_pressure(58 * PSI) == "58 psi"
    assert fmt_pressure(58.5 * PSI) == "58.5 psi"
    assert fmt_pressure(400_000.0, "si") == "400 kPa"


def test_negative_static_at_the_end():
    f = {f.code: f for f in evaluate(_test(static_end=-3)).findings}
    assert f["negative-static-end"].severity == "error"
    assert "static-changed" in f  # and it moved by 83 psi
