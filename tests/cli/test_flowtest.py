"""``python -m calib flowtest`` in-process: exit codes, text and JSON.

Numbers from ../shared/reference/check-values.md "Worked arithmetic" [C] (NFPA 291 formulas); the
text prints flows to 0.1 gpm, JSON carries full precision (tolerance 0.005 gpm, the printed 0.01).
"""

import json

import pytest

from calib.cli import main

BASE = ["flowtest", "--static", "72psi", "--residual", "58psi"]


def run(capsys, *argv):
    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


def test_text_report(capsys):
    code, out, err = run(capsys, *BASE, "--pitot", "22psi", "--outlet", "2.5in", "--outlet-shape", "smooth")
    assert code == 0, err
    assert "-> 787.0 gpm" in out                    # 787.02 gpm
    assert "rated flow at 20 psi residual: 1598.5 gpm" in out  # 1598.53 gpm
    assert "NFPA 291 class AA" in out and "local codes" in out
    assert "[warning]" in out and "4.3.6" in out    # drop 19.4 % < 25 %
    assert "slowly" in out and "licensed engineer" in out


def test_json_two_outlets(capsys):
    code, out, err = run(capsys, "flowtest", "--static", "72psi", "--residual", "50psi", "--pitot", "18psi",
                         "--outlet", "2.5in", "--pitot", "20psi", "--outlet", "2.5in", "--json")
    assert code == 0, err
    doc = json.loads(out)
    assert doc["units"]["flow"] == "gpm"
    assert [o["flow"] for o in doc["outlets"]] == pytest.approx([711.89, 750.40], abs=0.005)
    assert doc["flow"] == pytest.approx(1462.29, abs=0.005)  # summed, never averaged pitots
    assert doc["hydrant_class"]["label"] in {"AA", "A", "B", "C"}
    assert doc["cautions"]


def test_target_and_coefficient_options(capsys):
    code, out, _ = run(capsys, *BASE, "--pitot", "22psi", "--outlet", "2.5in", "--coefficient", "0.9",
                       "--target", "30psi", "--json")
    assert code == 0
    assert json.loads(out)["rated_flow"] == pytest.approx(1424.40, abs=0.005)  # check-values.md


def test_measured_flow_taken_as_is(capsys):
    # 800 gpm, 65 / 50 psi -> 1447.89 gpm (check-values.md)
    code, out, _ = run(capsys, "flowtest", "--static", "65psi", "--residual", "50psi", "--flow", "800gpm", "--json")
    assert code == 0
    doc = json.loads(out)
    assert doc["flow"] == pytest.approx(800.0, rel=1e-12)
    assert doc["rated_flow"] == pytest.approx(1447.89, abs=0.005)


def test_us_and_si_inputs_give_the_same_answer(capsys):
    # 72 psi = 496.4225 kPa, 58 psi = 399.8959 kPa, 22 psi = 151.6847 kPa, 20 psi = 137.8951 kPa,
    # 2.5 in = 63.5 mm (NIST SP 811 factors).
    _, us, _ = run(capsys, *BASE, "--pitot", "22psi", "--outlet", "2.5in", "--json", "--units", "si")
    _, si, _ = run(capsys, "flowtest", "--static", "496.42253kPa", "--residual", "399.89592kPa",
                   "--pitot", "151.68466kPa", "--outlet", "63.5mm", "--target", "137.89515kPa",
                   "--units", "si", "--json")
    a, b = json.loads(us), json.loads(si)
    assert b["units"]["flow"] == "L/s"
    assert b["rated_flow"] == pytest.approx(a["rated_flow"], rel=1e-6)
    assert b["flow"] == pytest.approx(787.02 * 3.785411784 / 60, abs=0.005 * 0.0631)
    assert b["hydrant_class"]["label"] == "AA"


def test_bare_numbers_take_the_units_system(capsys):
    _, a, _ = run(capsys, "flowtest", "--static", "72", "--residual", "58", "--pitot", "22", "--outlet", "2.5", "--json")
    assert json.loads(a)["flow"] == pytest.approx(787.02, abs=0.005)


def test_static_end_finding(capsys):
    code, out, _ = run(capsys, *BASE, "--pitot", "22psi", "--outlet", "2.5in", "--static-end", "75psi")
    assert code == 0 and "at the end 75 psi" in out and "gauge drift" in out


@pytest.mark.parametrize("extra, option, words", [
    (["--pitot", "3ft", "--outlet", "2.5in"], "--pitot", "not a pressure"),
    (["--pitot", "abc", "--outlet", "2.5in"], "--pitot", "not a number"),
    (["--pitot", "22psi", "--outlet", "22psi"], "--outlet", "not a diameter"),
    (["--pitot", "22psi"], "--outlet", "in pairs"),
    (["--pitot", "22psi", "--outlet", "2.5in", "--pitot", "20psi"], "--outlet", "in pairs"),
    (["--pitot=-2psi", "--outlet", "2.5in"], "--pitot", "below zero"),
    (["--pitot", "nan psi", "--outlet", "2.5in"], "--pitot", "not a finite number"),
    (["--pitot", "22psi", "--outlet", "2.5in", "--coefficient", "1.4"], "--coefficient", "out of range"),
    (["--pitot", "22psi", "--outlet", "2.5in", "--coefficient", "x"], "--coefficient", "not a number"),
    (["--pitot", "22psi", "--outlet", "2.5in", "--pitot", "20psi", "--outlet", "2.5in",
      "--outlet-shape", "smooth", "--outlet-shape", "square", "--outlet-shape", "square"], "--outlet-shape", "one per outlet"),
    (["--pitot", "22psi", "--outlet", "2.5in", "--target", "80psi"], "--target", "below the static"),
    ([], "--pitot", "at least one"),
    (["--flow", "0gpm"], "--flow", "more than zero"),
])
def test_bad_input_exits_2_naming_the_option(capsys, extra, option, words):
    code, out, err = run(capsys, *BASE, *extra)
    assert code == 2
    assert f"'{option}'" in err and words in err
    assert "expected" in err  # the plausible range


def test_residual_above_static_exits_2(capsys):
    code, _, err = run(capsys, "flowtest", "--static", "55psi", "--residual", "58psi", "--flow", "500gpm")
    assert code == 2
    assert "'--residual'" in err and "58 psi" in err and "55 psi" in err and "re-read" in err


def test_negative_static_exits_2_with_range(capsys):
    code, _, err = run(capsys, "flowtest", "--static=-5psi", "--residual", "3psi", "--flow", "500gpm")
    assert code == 2 and "'--static'" in err and "usually 10 to 200 psi" in err


def test_unknown_outlet_shape_is_an_argparse_error(capsys):
    code, _, err = run(capsys, *BASE, "--pitot", "22psi", "--outlet", "2.5in", "--outlet-shape", "oval")
    assert code == 2 and "--outlet-shape" in err
