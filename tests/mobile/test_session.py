"""A whole test through the service layer: set up, entered, computed, saved, corrected, exported,
read back by the calibration reader - with the numbers checked against published worked values and
against ``calib.flowtest`` itself."""

import json

import pytest

from calib import flowtest
from calib.calibration.tests_io import read_tests
from calib.units import GPM, INCH, PSI

from mobile.services import export, values

# NFPA 291 worked arithmetic (check-values.md, [C] from the NFPA 291 formulas): c 0.90, 2.5 in,
# pitot 22 psi -> 787.02 gpm; static 72, residual 58 -> 1598.53 gpm at 20 psi (class AA).
PITOT_FLOW_GPM = 787.02
RATED_GPM = 1598.53


def _whole_test(service, crew="A. Brennan, K. Mbeki"):
    h = service.area.hydrants
    tid = service.new_test(crew=crew)
    for key in service.checklist_keys():
        assert service.tick(tid, key, True).ok
    assert service.set_gauges(tid, [h[0]]).ok
    assert service.add_outlet(tid, h[1], diameter_text="2.5", shape="smooth").ok
    assert service.enter(tid, f"static@{h[0]}", "72").ok
    assert service.enter(tid, f"residual@{h[0]}", "58").ok
    assert service.enter(tid, "pitot@o1", "22").ok
    return tid


def test_results_match_the_published_worked_example(service):
    tid = _whole_test(service)
    r = service.results(tid)
    assert r.flow / GPM == pytest.approx(PITOT_FLOW_GPM, abs=0.005)  # printed to 0.01 gpm
    assert r.rated_flow / GPM == pytest.approx(RATED_GPM, abs=0.005)
    assert r.class_label == "AA"  # NFPA 291 marking: >= 1500 gpm is AA
    # The drop is 19.4 % of static (check-values): below NFPA 291's 25 %, so a finding says so.
    assert any(code == "drop-below-25pct" for _, code, _ in r.findings)


def test_results_equal_calib_flowtest_on_the_same_readings(service):
    tid = _whole_test(service)
    r = service.results(tid)
    q = flowtest.pitot_discharge(22 * PSI, 2.5 * INCH, flowtest.outlet_coefficient("smooth"))
    assert r.flow == pytest.approx(q, rel=1e-12)
    assert r.rated_flow == pytest.approx(flowtest.rated_flow(q, 72 * PSI, 58 * PSI), rel=1e-12)


def test_two_outlets_sum_their_flows(service):
    """check-values.md: two 2.5 in outlets, c 0.90, pitots 18 and 20 psi: 711.89 + 750.40 = 1462.29
    gpm (NFPA 291 sums flows; never average pitots)."""
    h = service.area.hydrants
    tid = service.new_test(crew="X")
    service.set_gauges(tid, [h[0]])
    service.add_outlet(tid, h[1], "2.5")
    service.add_outlet(tid, h[2], "2.5")
    service.enter(tid, "pitot@o1", "18")
    service.enter(tid, "pitot@o2", "20")
    assert service.results(tid).flow / GPM == pytest.approx(1462.29, abs=0.01)


def test_si_entry_gives_the_same_flow(service):
    assert service.set_units("si").ok
    h = service.area.hydrants
    tid = service.new_test(crew="X")
    service.set_gauges(tid, [h[0]])
    service.add_outlet(tid, h[1], "63.5")  # mm = 2.5 in exactly
    assert service.enter(tid, "pitot@o1", f"{22 * PSI / 1000:.6f}").ok  # kPa
    assert service.results(tid).flow / GPM == pytest.approx(PITOT_FLOW_GPM, abs=0.005)
    stored = service.readings(tid)["pitot@o1"]
    assert stored.unit == "kPa"


def test_residual_above_static_is_refused_and_not_stored(service):
    h = service.area.hydrants
    tid = service.new_test(crew="X")
    service.set_gauges(tid, [h[0]])
    service.enter(tid, f"static@{h[0]}", "60")
    out = service.enter(tid, f"residual@{h[0]}", "61")
    assert not out.ok and "above the static" in out.message
    assert f"residual@{h[0]}" not in service.readings(tid)


def test_low_residual_warns_to_close_slowly(service):
    h = service.area.hydrants
    tid = service.new_test(crew="X")
    service.set_gauges(tid, [h[0]])
    service.enter(tid, f"static@{h[0]}", "60")
    out = service.enter(tid, f"residual@{h[0]}", "15")  # NFPA 291: keep residuals >= 20 psi
    assert out.ok and any("20 psi" in w for w in out.warnings)


def test_finish_needs_checklist_readings_and_crew(service):
    h = service.area.hydrants
    tid = service.new_test()
    out = service.finish(tid)
    assert not out.ok and "crew" in out.message and "checklist" in out.message
    assert service.store.test(tid).status == "draft"


def test_draft_survives_reopening_the_store(service, store, area, tmp_path):
    from mobile.services.session import TestService
    from mobile.store import Store

    tid = service.new_test(crew="X")
    service.set_gauges(tid, [area.hydrants[0]])
    service.enter(tid, f"static@{area.hydrants[0]}", "70")
    store.close()
    again = TestService(Store.open(store.path.parent), area)
    assert again.store.test(tid).status == "draft"
    assert again.reading_text(tid, f"static@{area.hydrants[0]}") == "70.0 psi"


def test_correct_export_and_read_back_by_the_calibration_reader(service, area, tmp_path):
    tid = _whole_test(service)
    assert service.finish(tid).ok
    first = service.results(tid).rated_flow
    fix = service.correct(tid, "residual re-read")
    assert fix.ok and fix.value == 2
    assert service.enter(tid, f"residual@{area.hydrants[0]}", "56").ok
    assert service.finish(tid).ok
    # The old revision still gives the old answer; the new one the corrected answer.
    assert service.results(tid, revision=1).rated_flow == pytest.approx(first)
    corrected = service.results(tid).rated_flow
    assert corrected == pytest.approx(flowtest.rated_flow(PITOT_FLOW_GPM * GPM, 72 * PSI, 56 * PSI),
                                      rel=1e-5)  # 787.02 printed to 0.01 gpm
    done = export.export_tests(service, tmp_path / "out")
    assert done["tests"] == 1
    ts = read_tests(tmp_path / "out", area.network)
    assert ts.test_ids == [tid]
    node = {v: k for k, v in area.network.node_index.items()}
    (flow_node, q), = ts.flows[0].items()
    assert node[flow_node] == area.hydrants[1]
    # flows.csv holds 6 significant digits (calib.fileio.write_csv float_format "%.6g").
    assert q == pytest.approx(service.results(tid).flow, rel=1e-5)
    pressures = dict(zip(ts.kind, ts.pressure))
    assert pressures["static"] == pytest.approx(72 * PSI, rel=1e-6)
    assert pressures["residual"] == pytest.approx(56 * PSI, rel=1e-6)
    record = json.loads((tmp_path / "out" / f"{tid}.json").read_text())
    assert [r["reason"] for r in record["revisions"]] == ["", "residual re-read"]
    typed = [(h["slot"], h["entered_text"], h["unit"]) for h in record["history"]]
    assert (f"residual@{area.hydrants[0]}", "58", "psi") in typed
    assert (f"residual@{area.hydrants[0]}", "56", "psi") in typed
    assert all(record["checklist"][k]["ticked"] for k in record["checklist"])


def test_export_in_si_is_read_back_to_the_same_numbers(service, area, tmp_path):
    tid = _whole_test(service)
    service.finish(tid)
    service.set_units("si")
    export.export_tests(service, tmp_path / "si")
    header = (tmp_path / "si" / "pressures.csv").read_text().splitlines()[0]
    assert "static [kPa]" in header
    ts = read_tests(tmp_path / "si", area.network)
    assert dict(zip(ts.kind, ts.pressure))["static"] == pytest.approx(72 * PSI, rel=1e-5)


def test_drafts_are_left_out_of_the_export_unless_asked(service, tmp_path):
    _whole_test(service)  # not finished
    assert export.export_tests(service, tmp_path / "a")["tests"] == 0
    assert export.export_tests(service, tmp_path / "b", include_drafts=True)["tests"] == 1


def test_list_today_and_search_by_hydrant(service, area):
    tid = _whole_test(service)
    assert [r["test_id"] for r in service.list_tests("today")] == [tid]
    assert service.list_tests(hydrant=area.hydrants[1].lower())[0]["test_id"] == tid
    assert service.list_tests(hydrant="no-such-hydrant") == []


def test_hydrants_come_from_the_area(service):
    tid = service.new_test(crew="X")
    out = service.set_gauges(tid, ["NOPE-1"])
    assert not out.ok and "not a junction of the area" in out.message
    assert service.header(tid)["gauges"] == []


def test_target_residual_setting_changes_the_rating(service):
    assert service.set_target("30").ok
    tid = _whole_test(service)
    r = service.results(tid)
    # check-values.md: same test at 30 psi residual gives 1424.40 gpm; class still taken at 20 psi.
    assert r.rated_flow / GPM == pytest.approx(1424.40, abs=0.01)
    assert r.class_label == "AA"


def test_display_formatting_of_units():
    assert values.fmt(72 * PSI, "pressure") == "72.0 psi"
    assert values.fmt(72 * PSI, "pressure", "si") == "496 kPa"  # 72 psi = 496.42 kPa (NIST SP 811)
    assert values.fmt(None, "flow") == "-"


def test_source_grade_goes_to_boundary_csv_and_the_reader(service, area, tmp_path):
    tid = _whole_test(service)
    source = service.sources()[0]
    assert not service.set_source_grade(tid, "NOT-A-SOURCE", "250").ok
    assert not service.set_source_grade(tid, source, "abc").ok
    assert service.set_source_grade(tid, source, "265.5").ok  # ft
    service.finish(tid)
    export.export_tests(service, tmp_path / "out")
    ts = read_tests(tmp_path / "out", area.network)
    (node, head), = ts.source_head[0].items()
    assert area.network.node_ids[node] == source
    assert head == pytest.approx(265.5 * 0.3048, rel=1e-6)  # 1 ft = 0.3048 m exactly (NIST SP 811)


def test_list_by_area(service, area):
    tid = _whole_test(service)
    other = service.new_test(crew="Y", area="Northfield")
    assert service.areas() == ["Northfield", "Tallowmere"]
    assert [r["test_id"] for r in service.list_tests(area="Northfield")] == [other]
    assert [r["test_id"] for r in service.list_tests(area="Tallowmere")] == [tid]


def test_calib_fit_reads_the_demo_export_as_it_is(store, tmp_path, capsys):
    """The issue's promise: ``python -m calib fit NETWORK EXPORT`` runs on the app's export."""
    from calib.cli import main
    from mobile.services.demo import TALLOWMERE, demo_area, log_demo_tests
    from mobile.services.session import TestService

    area = demo_area()
    service = TestService(store, area)
    made = log_demo_tests(service, area)
    assert len(made) == 3
    export.export_tests(service, tmp_path / "tests")
    code = main(["fit", str(TALLOWMERE), str(tmp_path / "tests"), "--out", str(tmp_path / "fit")])
    assert code == 0, capsys.readouterr().err
    assert (tmp_path / "fit" / "readings.csv").exists()


def test_all_done_never_confirms_a_safety_item(service):
    """ALL DONE ticks the preparation items only; each safety item (traffic, drainage and flooding,
    water hammer, fire service, discoloured water - common practice) needs its own tap, and ALL DONE
    refuses to go on, naming them, until each is confirmed."""
    from mobile.services import checklist
    tid = service.new_test()
    safety = [i for i in checklist.ITEMS if i.safety]
    assert {i.key for i in safety} == {"traffic", "drainage", "slowly", "fire_service", "customers"}
    out = service.tick_all(tid)
    ticks = service.header(tid)["checklist"]
    assert not out.ok and all(i.title in out.message for i in safety)
    assert not any(ticks[i.key] for i in safety)  # none confirmed in bulk
    assert ticks["system_state"] and not ticks["dechlorination"]  # preparation ticked, optional left
    for i in safety[:-1]:
        assert service.tick(tid, i.key, True).ok
    out = service.tick_all(tid)
    assert not out.ok and safety[-1].title in out.message and safety[0].title not in out.message
    assert service.tick(tid, safety[-1].key, True).ok
    assert service.tick_all(tid).ok
    assert checklist.missing_items(service.header(tid)["checklist"]) == []
