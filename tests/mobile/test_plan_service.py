"""The field app loads an office plan (plan.csv of python -m calib plan) as the day's list."""

import pandas as pd
import pytest

from calib import units
from calib.errors import InputError
from mobile.services import plan as plan_service


def _plan(tmp_path, area, rows=None):
    h = area.hydrants
    rows = rows or [{"test_id": "P01", "flow_nodes": h[5], "flow [gpm]": "1000", "gauge_nodes": f"{h[0]};{h[1]}",
                     "expected_drop [psi]": "12.0;10.5", "aimed_at": "CI", "sd_before": 15, "sd_after": 7,
                     "outlets": "two 2.5 in hose outlets read by pitot at about 11 psi"},
                    {"test_id": "P02", "flow_nodes": h[8], "flow [gpm]": "2000", "gauge_nodes": h[9],
                     "expected_drop [psi]": "11", "aimed_at": "DI", "sd_before": 10, "sd_after": 5,
                     "outlets": "4.5 in pumper outlet through a flow meter"}]
    path = tmp_path / "plan.csv"
    pd.DataFrame(rows).to_csv(path, index=False)
    return path


def test_a_plan_becomes_the_days_list_and_starts_tests(service, area, tmp_path):
    plan = plan_service.read_plan(_plan(tmp_path, area), area)
    assert [p.test_id for p in plan] == ["P01", "P02"]
    assert plan[0].flow == pytest.approx(1000 * units.GPM) and len(plan[0].expected_drop) == 2
    rows = plan_service.day_rows(service, plan)
    assert [r["order"] for r in rows] == [1, 2] and not any(r["test_id"] for r in rows)
    tid = plan_service.start_planned(service, plan[0])
    h = service.header(tid)
    assert h["gauges"] == plan[0].gauge_nodes
    assert len(h["outlets"]) == 2 and all(o["hydrant"] == plan[0].flow_nodes[0] for o in h["outlets"])
    tid2 = plan_service.start_planned(service, plan[1])
    assert service.header(tid2)["outlets"][0]["kind"] == "meter"
    rows = plan_service.day_rows(service, plan)
    assert [r["test_id"] for r in rows] == [tid, tid2]


def test_a_bad_plan_names_row_and_field(area, tmp_path):
    path = _plan(tmp_path, area, [{"test_id": "P01", "flow_nodes": "NOPE", "flow [gpm]": "lots",
                                   "gauge_nodes": area.hydrants[0]},
                                  {"test_id": "P02", "flow_nodes": area.hydrants[1], "flow [gpm]": "900",
                                   "gauge_nodes": "ALSO-NOPE"}])
    with pytest.raises(InputError) as err:
        plan_service.read_plan(path, area)
    text = str(err.value)
    assert "flow 'lots' is not a flow" in text and "ALSO-NOPE" in text and "row 3" in text


def test_the_plan_command_output_loads(area, tmp_path):
    """plan.csv as python -m calib plan writes it, on the built-in network (one implementation)."""
    from calib.loop.plan import Planner, plan_frame
    from calib.loop.state import default_grouping, handbook_state
    net = area.network
    g = default_grouping(net)
    st = handbook_state(net, g, 2026.0)
    plan = Planner(net, g, st.mean).plan(2, st.cov)
    path = tmp_path / "plan.csv"
    plan_frame(plan).to_csv(path, index=False)
    loaded = plan_service.read_plan(path, area)
    assert [p.test_id for p in loaded] == [t.test_id for t in plan.tests]


def test_the_plan_on_the_map_numbers_each_tests_hydrants_in_order(service, area, tmp_path):
    """load() keeps the plan on the service; the map view gives each planned hydrant its test's number
    and role, at the hydrant's own map position, and the legend says what the marks mean."""
    from mobile.services import mapdata, views
    h = area.hydrants
    rows = [{"test_id": "P01", "flow_nodes": f"{h[5]};{h[6]}", "flow [gpm]": "2500",
             "gauge_nodes": f"{h[0]};{h[1]}", "outlets": "on each of the 2 hydrants: two 2.5 in hose outlets"},
            {"test_id": "P02", "flow_nodes": h[8], "flow [gpm]": "2000", "gauge_nodes": h[9],
             "outlets": "4.5 in pumper outlet through a flow meter"}]
    planned = plan_service.load(service, _plan(tmp_path, area, rows))
    assert service.plan is planned and [p.test_id for p in planned] == ["P01", "P02"]
    data = mapdata.MapData.from_area(area)
    view = views.map_view(service, "", data)
    marks = {m["node"]: m for m in view["planned"]}
    assert {n: (m["role"], m["label"]) for n, m in marks.items()} == {
        h[5]: ("flow", "1"), h[6]: ("flow", "1"), h[0]: ("gauge", "1"), h[1]: ("gauge", "1"),
        h[8]: ("flow", "2"), h[9]: ("gauge", "2")}
    for n, m in marks.items():
        assert (m["x"], m["y"]) == data.where(n)
    assert [m["label"] for m in view["planned"]] == ["1"] * 4 + ["2"] * 2  # in the plan's order
    assert "plan" in view["legend"] and view["title"] == "today's plan: 2 tests"
    # a test open: its own hydrants and the plan together
    tid = plan_service.start_planned(service, planned[1])
    view = views.map_view(service, tid, data)
    assert view["flows"] == [h[8]] and len(view["planned"]) == 6 and view["title"] == ""
    # a bad plan leaves the day's plan as it was
    bad = _plan(tmp_path, area, [{"test_id": "X", "flow_nodes": "NOPE", "flow [gpm]": "1", "gauge_nodes": h[0]}])
    with pytest.raises(InputError):
        plan_service.load(service, bad)
    assert service.plan is planned


def test_a_hydrant_in_two_planned_tests_carries_both_numbers(area):
    from mobile.services import mapdata
    h = area.hydrants
    plan = [plan_service.PlannedTest("P01", [h[0]], 0.1, [h[1]]),
            plan_service.PlannedTest("P02", [h[2]], 0.1, [h[1]])]
    marks = {m["node"]: m["label"] for m in plan_service.map_marks(plan, mapdata.MapData.from_area(area))}
    assert marks == {h[0]: "1", h[1]: "1,2", h[2]: "2"}
