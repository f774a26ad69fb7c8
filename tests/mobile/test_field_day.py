"""What a full field day met (issue 10, part A): tank levels, SI mode, any junction, stale messages,
corrections and exports that never drop a test, the model-check verdict kept with the test.

Numbers: grade = floor elevation + water depth (closed form); 2.5 in = 63.5 mm and 20 psi =
137.895 kPa (NIST SP 811 exact inch and psi definitions, from memory).
"""

import json

import numpy as np
import pytest

from calib.units import FT, INCH, PSI

from mobile.services import export, values, views
from mobile.services.area import Area
from mobile.services.session import TestService


@pytest.fixture
def tank_service(store, area):
    """The built-in grid with its source as a tank: floor 250 ft, up to 40 ft deep (invented)."""
    net = area.network.replace(source_floor=np.array([250 * FT]),
                               source_level_max=np.array([40 * FT]),
                               source_kind=np.array(["tank"], dtype=object))
    return TestService(store, Area.from_network(net, name="Tallowmere"))


# --- A2: the tank box ---------------------------------------------------------------------------
def test_operator_level_becomes_the_grade(tank_service):
    s = tank_service
    tid = s.new_test(crew="X")
    src = s.sources()[0]
    out = s.set_tank_level(tid, src, "28")
    assert out.ok, out.message
    b = s.header(tid)["boundary"][0]
    assert b["si"] == pytest.approx(278 * FT)  # 250 ft floor + 28 ft of water
    assert b["entered"] == "level" and b["level"] == pytest.approx(28 * FT)
    assert "level 28.0 ft (grade 278.0 ft)" in views.setup_view(s, tid)["boundary"]


def test_a_depth_typed_as_a_grade_is_refused_naming_the_tank_range(tank_service):
    s = tank_service
    tid = s.new_test(crew="X")
    src = s.sources()[0]
    out = s.set_source_grade(tid, src, "28")
    assert not out.ok
    assert "level 0 to 40.0 ft (grade 250.0 to 290.0 ft)" in out.message, out.message
    assert not s.set_tank_level(tid, src, "45").ok  # deeper than the tank
    assert s.header(tid).get("boundary", []) == []
    assert s.set_source_grade(tid, src, "270").ok


def test_noted_value_can_be_cleared(tank_service):
    s = tank_service
    tid = s.new_test(crew="X")
    src = s.sources()[0]
    assert s.set_tank_level(tid, src, "10").ok
    assert s.clear_source(tid, src).ok
    assert s.header(tid)["boundary"] == []
    assert "none noted" in views.setup_view(s, tid)["boundary"]


def test_a_level_needs_a_floor_in_the_network(service):
    tid = service.new_test(crew="X")
    assert views.setup_boxes(service, tid, service.sources()[0])["tank_by"] == "grade"
    out = service.set_tank_level(tid, service.sources()[0], "10")
    assert not out.ok and "no floor" in out.message and "grade instead" in out.message


def _whole(service, crew="A. Brennan"):
    h = service.area.hydrants
    tid = service.new_test(crew=crew)
    for key in service.checklist_keys():
        service.tick(tid, key, True)
    assert service.set_gauges(tid, [h[0]]).ok
    assert service.add_outlet(tid, h[1], diameter_text="2.5").ok
    for slot, text in ((f"static@{h[0]}", "72"), (f"residual@{h[0]}", "58"), ("pitot@o1", "22")):
        assert service.enter(tid, slot, text).ok
    return tid


# --- A1: a reopened test never vanishes from the export -------------------------------------------
def test_reopening_asks_first_with_its_reason_and_a_draft_needs_no_correction(service):
    tid = _whole(service)
    assert not service.correction_question(tid, "gauge re-read").ok  # still a draft
    assert service.finish(tid).ok
    assert not service.correction_question(tid, "  ").ok  # a reason is needed
    ask = service.correction_question(tid, "gauge re-read")
    assert ask.ok and tid in ask.message and "gauge re-read" in ask.message
    assert service.store.test(tid).status == "finished"  # asking changes nothing


def test_a_test_under_correction_is_exported_as_its_finished_revision(service, area, tmp_path):
    from calib.calibration.tests_io import read_tests

    tid = _whole(service)
    assert service.finish(tid).ok
    assert service.correct(tid, "residual re-read").ok
    assert service.enter(tid, f"residual@{area.hydrants[0]}", "50").ok  # not finished yet
    done = export.export_tests(service, tmp_path / "out")
    assert done["tests"] == 1 and done["left_out"] == []
    assert any(tid in n and "finished revision 1" in n for n in done["notes"]), done["notes"]
    assert "finished revision 1" in export.done_message(done)
    ts = read_tests(tmp_path / "out", area.network)
    assert ts.test_ids == [tid]
    assert dict(zip(ts.kind, ts.pressure))["residual"] == pytest.approx(58 * PSI, rel=1e-6)
    record = json.loads((tmp_path / "out" / f"{tid}.json").read_text())
    assert record["exported_revision"] == 1 and record["current_revision"] == 2


def test_export_lists_what_it_leaves_out_before_writing(service, tmp_path):
    done_id = _whole(service)
    service.finish(done_id)
    draft = service.new_test(crew="B")
    plan = export.plan_text(service)
    assert f"{draft} (a draft never finished)" in plan and "1 test(s) to export" in plan
    done = export.export_tests(service, tmp_path / "out")
    assert done["left_out"] == [(draft, "a draft never finished")]
    assert draft in export.done_message(done)


# --- A3: the model check's verdict is kept -------------------------------------------------------
def test_verdict_is_saved_shown_until_readings_change_and_exported(service, area, tmp_path):
    from mobile.services import check, verdicts

    tid = _whole(service)
    at = verdicts.stamp(service, tid)
    result = check.check_test(service, tid)
    assert result.ok, result.message
    assert verdicts.save(service, tid, result, at).ok
    shown = views.results_view(service, tid)
    assert shown["verdict"].startswith("MODEL CHECK") and "Tallowmere" in shown["verdict"]
    assert shown["findings"].startswith("MODEL CHECK")
    assert shown["suspect"] == any(g.suspect for g in result.gauges)
    assert views.check_summary(service, tid).startswith(shown["verdict"])
    service.finish(tid)
    export.export_tests(service, tmp_path / "out")
    record = json.loads((tmp_path / "out" / f"{tid}.json").read_text())
    (kept,) = record["model_checks"]
    assert kept["revision"] == 1 and kept["in_force"] and kept["verdict"]["message"] == result.message
    assert kept["verdict"]["gauges"][0]["predicted_static"] == pytest.approx(
        result.gauges[0].predicted_static)
    # a reading entered after the check makes its verdict out of date on the screen
    service.correct(tid, "static re-read")
    service.enter(tid, f"static@{area.hydrants[0]}", "73")
    assert views.results_view(service, tid)["verdict"] == ""
    assert views.results_view(service, tid, revision=1)["verdict"].startswith("MODEL CHECK")


def test_a_check_that_could_not_run_is_no_verdict(store):
    from mobile.services import check, verdicts

    bare = TestService(store, Area("No area loaded"))
    tid = bare.new_test(crew="X")
    result = check.check_test(bare, tid)
    assert not verdicts.save(bare, tid, result, verdicts.stamp(bare, tid)).ok
    assert store.checks(tid) == []


# --- A4: SI mode ---------------------------------------------------------------------------------
def test_standard_outlets_in_si_are_exact_conversions():
    from mobile.services import outlets

    # 1 in = 25.4 mm exactly (NIST SP 811): 2.5 in = 63.5 mm, 4 in = 101.6 mm, 4.5 in = 114.3 mm
    assert outlets.sizes("si") == ["63.5", "101.6", "114.3"]
    for text, inches in zip(outlets.sizes("si"), outlets.STANDARD_IN):
        assert values.parse_value(text, "diameter", "si")[0] == pytest.approx(inches * INCH, rel=1e-12)


def test_same_pitot_same_flow_in_us_and_si(service):
    """The issue's 1.6 %: a 64 mm default gave more flow than 2.5 in; 63.5 mm gives the same."""
    from mobile.services import outlets

    h = service.area.hydrants
    us = service.new_test(crew="X")
    service.set_gauges(us, [h[0]])
    service.add_outlet(us, h[1], outlets.sizes("us")[0])
    service.enter(us, "pitot@o1", "22")
    service.set_units("si")
    si = service.new_test(crew="X")
    service.set_gauges(si, [h[0]])
    service.add_outlet(si, h[1], outlets.sizes("si")[0])
    service.enter(si, "pitot@o1", "22 psi")
    assert service.results(si).flow == pytest.approx(service.results(us).flow, rel=1e-12)


def test_one_figure_for_the_20_psi_target():
    # 20 psi = 137.895 kPa (NIST SP 811): shown as 138 kPa wherever SI is chosen
    note = views.target_note("si")
    assert "138 kPa" in note and "140" not in note
    assert values.fmt(20 * PSI, "pressure", "si") == "138 kPa"
    from calib.flowtest import CAUTIONS

    assert not any("140 kPa" in c for c in CAUTIONS)


def test_boxes_are_reshown_in_the_new_units(tank_service):
    s = tank_service
    tid = s.new_test(crew="X")
    src = s.sources()[0]
    assert s.set_gauge_height(tid, "3").ok  # ft
    assert s.set_source_grade(tid, src, "270").ok  # ft
    us = views.setup_boxes(s, tid, src)
    assert (us["height"], us["tank"], us["tank_by"]) == ("3", "270", "grade")
    s.set_units("si")
    si = views.setup_boxes(s, tid, src)
    assert (si["height"], si["tank"]) == ("0.914", "82.296")  # 3 ft, 270 ft in m (0.3048 m/ft)
    assert s.set_source_grade(tid, src, si["tank"]).ok  # SET again stores the same grade
    assert s.header(tid)["boundary"][0]["si"] == pytest.approx(270 * FT, abs=1e-3)


def test_a_unit_chosen_on_the_keypad_is_honoured(service):
    from mobile.widgets.keypad import Keypad

    service.set_units("si")
    pad = Keypad()
    pad.units = views.keypad_units("pressure", "si")
    pad.unit = pad.units[0]
    assert pad.unit == "kPa"
    for key in "72":
        pad.press(key)
    pad.press("unit")
    assert pad.typed() == "72 psi"
    h = service.area.hydrants
    tid = service.new_test(crew="X")
    service.set_gauges(tid, [h[0]])
    out = service.enter(tid, f"static@{h[0]}", pad.typed())
    assert out.ok and out.value == pytest.approx(72 * PSI)
    assert service.store.readings(tid)[f"static@{h[0]}"].unit == "psi"


# --- A5: any junction, helpful and fresh messages ---------------------------------------------------
def test_any_junction_can_be_picked_with_a_note(store):
    from mobile.services.demo import builtin_network

    net = builtin_network()
    hydrant = net.hydrant.copy()
    hydrant[5] = False  # the model lists no hydrant at TM-122
    s = TestService(store, Area.from_network(net.replace(hydrant=hydrant), name="Tallowmere"))
    plain = str(net.junction_ids[5])
    assert plain not in s.area.hydrants
    tid = s.new_test(crew="X")
    out = s.add_gauge(tid, plain)
    assert out.ok and any("no hydrant" in w for w in out.warnings), out
    out = s.add_outlet(tid, plain.lower(), "2.5")
    assert out.ok and s.outlets(tid)[0]["hydrant"] == plain and out.warnings
    assert not s.add_gauge(tid, s.area.hydrants[0]).warnings  # a listed hydrant: no note
    assert any(r["key"] == plain and "junction" in r["text"]
               for r in views.hydrant_rows(s.area, plain[:4]))


def test_a_missing_id_gets_a_message_that_helps(service):
    tid = service.new_test(crew="X")
    out = service.add_gauge(tid, "QQ-9")
    assert not out.ok and "e.g. none" not in out.message
    assert "QQ-9" in out.message and "painted on the hydrant" in out.message, out.message
    out = service.add_gauge(tid, "TM-9")
    assert "TM-1" in out.message  # close ids offered
    out = service.add_gauge(tid, "")
    assert not out.ok and "tap one in the list" in out.message


# --- B: plain words ---------------------------------------------------------------------------------
def test_home_rows_say_what_the_figure_is_and_the_state_in_words(service):
    tid = _whole(service)
    service.finish(tid)
    service.correct(tid, "re-read")
    (row,) = views.test_rows(service, "all")
    assert row["figure"] == "1,599 gpm"  # NFPA 291 worked example: 1598.53
    assert row["state"] == ("DRAFT, not finished, corrected 1 time;  flow at 20.0 psi residual "
                            "1,599 gpm, class AA")
    assert views.ALL_AREAS == "every area"


def test_load_area_error_names_the_missing_files(tmp_path):
    from calib.errors import CalibError
    from mobile.services.session import _first_message

    with pytest.raises(CalibError) as e:
        Area.load(tmp_path)
    text = _first_message(e.value)
    assert "junctions.csv" in text and "sources.csv" in text and "pipes.csv" in text


# --- C: timer, static after closing, remembered outlets, crew carried over --------------------------
def test_flow_timer_duration_is_saved_and_exported(service, tmp_path, monkeypatch):
    from mobile.services import timing

    tid = _whole(service)
    assert not service.stop_flow(tid).ok  # not started
    clock = iter(["2026-05-14T09:30:00+00:00", "2026-05-14T09:34:05+00:00"])
    monkeypatch.setattr(timing, "now", lambda: next(clock))
    assert service.start_flow(tid).ok
    assert timing.running(service.header(tid))
    out = service.stop_flow(tid)
    assert out.ok and out.value == 245 and "4:05" in out.message  # 9:30:00 -> 9:34:05
    service.finish(tid)
    export.export_tests(service, tmp_path / "out")
    tests_csv = (tmp_path / "out" / "tests.csv").read_text()
    assert "flow_duration [s]" in tests_csv.splitlines()[0] and ",245" in tests_csv
    record = json.loads((tmp_path / "out" / f"{tid}.json").read_text())
    assert record["flow_timer"]["duration_s"] == 245


def test_static_after_closing_is_optional_and_checked(service):
    tid = _whole(service)
    g = service.area.hydrants[0]
    assert service.missing(tid) == []  # not needed to finish
    slots = [s for s, _, _ in service.slots(tid)]
    assert slots[-1] == f"static_end@{g}"
    assert service.enter(tid, f"static_end@{g}", "60").ok  # 12 psi below the 72 psi start
    codes = [c for _, c, _ in service.results(tid).findings]
    assert "static-changed" in codes  # calib.flowtest finding (common practice threshold)
    rows = views.reading_rows(service, tid)
    assert all(r["when"].startswith("read ") for r in rows)


def test_outlets_are_remembered_per_hydrant_and_the_crew_carried_over(service):
    h = service.area.hydrants
    first = service.new_test(crew="R. Okafor")
    assert service.add_outlet(first, h[1], "4.5", "square", "pitot", pumper=True).ok
    fresh = service.remembered_outlet(h[2])
    assert fresh == {"diameter": "2.5", "shape": "smooth", "kind": "pitot", "pumper": False,
                     "remembered": False}
    second = service.new_test()
    assert service.header(second)["crew"] == "R. Okafor"
    assert service.add_remembered_outlet(second, h[1]).ok
    o = service.outlets(second)[0]
    assert (o["diameter"], o["shape"], o["pumper"]) == (pytest.approx(4.5 * INCH), "square", True)
    service.set_units("si")
    assert service.remembered_outlet(h[1])["diameter"] == "114.3"  # 4.5 in exactly (NIST SP 811)


def test_export_folder_choices_and_new_folder(tmp_path):
    from mobile.services import folders

    assert folders.shared_documents()  # plyer's documents folder, or ~/Documents
    ok, path = folders.make_folder(tmp_path, "May tests")
    assert ok and (tmp_path / "May tests").is_dir() and path.endswith("May tests")
    assert folders.make_folder(tmp_path, "May tests")[0]  # already there: fine, opened
    for bad in ("", "a/b", ".hidden", "x:y"):
        ok, why = folders.make_folder(tmp_path, bad)
        assert not ok and why
    assert sorted(p.name for p in tmp_path.iterdir()) == ["May tests"]


def test_layout_words_hold_in_both_orientations():
    """The set-up no longer points 'on the right' (the picker is below in portrait), and the bar
    never cuts the test id (it wraps to two lines instead)."""
    from pathlib import Path

    import mobile

    kv = {p.name: p.read_text() for p in Path(mobile.__file__).parent.rglob("*.kv")}
    assert not any("on the right" in text for text in kv.values())
    bar = kv["common.kv"].split("<Bar>:")[1].split("\n<")[0]
    assert "shorten: True" not in bar and "max_lines: 2" in bar
