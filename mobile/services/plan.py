"""A plan from the office (``python -m calib plan``'s plan.csv) as the day's list of tests and on the map.

Plain Python, no Kivy: read the plan (columns by name, units from the headers), keep it as the day's
plan on the service, say which planned tests are already done on this device, start a planned test
with its hydrants and outlets set up, and give the map its marks (each planned test's flowing and
gauge hydrants, numbered in the plan's order). The screens only call these functions.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd

from calib import units
from calib.errors import InputError, Problem

REQUIRED = ("test_id", "flow_nodes", "flow", "gauge_nodes")


@dataclass
class PlannedTest:
    test_id: str
    flow_nodes: list
    flow: float  # [m3/s]
    gauge_nodes: list
    expected_drop: list = field(default_factory=list)  # [Pa] per gauge (may be empty)
    aimed_at: str = ""
    outlets: str = ""


def _split(cell) -> list[str]:
    return [p.strip() for p in re.split(r"[;,]", str(cell or "")) if p.strip() and p.strip() != "nan"]


def read_plan(path, area) -> list[PlannedTest]:
    """The planned tests of ``path`` in order; every problem (file, row, field) raised at once."""
    path = Path(path)
    try:
        frame = pd.read_csv(path, dtype=str, keep_default_na=False)
    except (OSError, ValueError, pd.errors.ParserError) as exc:
        raise InputError([Problem(f"cannot read it: {exc}", file=str(path),
                                  expected="a plan.csv from python -m calib plan")]) from None
    cols = {}
    for c in frame.columns:
        name, _, unit = str(c).partition("[")
        cols[name.strip().lower()] = (c, unit.rstrip("] ").strip() or None)
    missing = [c for c in REQUIRED if c not in cols]
    if missing:
        raise InputError([Problem(f"missing column(s) {', '.join(missing)}", file=str(path), row=1,
                                  expected="test_id, flow_nodes, flow [gpm], gauge_nodes")])
    problems, out = [], []
    for i, row in frame.iterrows():
        rown = i + 2
        tid = str(row[cols["test_id"][0]]).strip() or f"row {rown}"
        col, unit = cols["flow"]
        try:
            q = units.to_si(str(row[col]).strip(), "flow", unit or "gpm")
        except ValueError:
            q = float("nan")
        if not (q == q and 0 < q <= 10000 * units.GPM):
            problems.append(Problem(f"flow '{row[col]}' is not a flow", file=str(path), row=rown, id=tid,
                                    field="flow", expected="more than 0 and at most 10000 gpm"))
            continue
        nodes = {"flow_nodes": _split(row[cols["flow_nodes"][0]]), "gauge_nodes": _split(row[cols["gauge_nodes"][0]])}
        bad = False
        for name, ids in nodes.items():
            for h in ids:
                if h not in set(area.hydrants):
                    problems.append(Problem(f"hydrant '{h}' is not in the loaded area", file=str(path),
                                            row=rown, id=tid, field=name, expected="a hydrant id of the area"))
                    bad = True
        if bad or not nodes["flow_nodes"]:
            continue
        drops = []
        if "expected_drop" in cols:
            c, u = cols["expected_drop"]
            try:
                drops = [units.to_si(v, "pressure", u or "psi") for v in _split(row[c])]
            except ValueError:
                drops = []
        out.append(PlannedTest(tid, nodes["flow_nodes"], q, nodes["gauge_nodes"], drops,
                               str(row[cols["aimed_at"][0]]).strip() if "aimed_at" in cols else "",
                               str(row[cols["outlets"][0]]).strip() if "outlets" in cols else ""))
    if problems:
        raise InputError(problems)
    return out


def load(service, path) -> list[PlannedTest]:
    """Read ``path`` (a plan.csv, or the folder holding one) and keep it as the day's plan on
    ``service`` (``service.plan``); raises ``InputError`` naming every problem, the old plan kept."""
    path = Path(path)
    if path.is_dir():
        path = path / "plan.csv"
    planned = read_plan(path, service.area)
    service.plan = planned
    return planned


#: The map's words for the plan's marks (the widget draws them; the shapes are this app's own).
LEGEND = "Numbers: today's plan in order (filled purple square: flow there; purple ring: gauge there)."


def map_marks(plan: list[PlannedTest], data) -> list[dict]:
    """Each planned test's hydrants for the map, in the plan's order: ``{"node", "role" ("flow" or
    "gauge"), "order", "label", "x", "y"}`` (map units). A hydrant the map cannot place is left out;
    a hydrant in two planned tests (a plan from elsewhere) carries both numbers."""
    marks: dict = {}
    for order, p in enumerate(plan, start=1):
        for role, nodes in (("flow", p.flow_nodes), ("gauge", p.gauge_nodes)):
            for n in nodes:
                at = data.where(n) if data is not None else None
                if at is None:
                    continue
                if n in marks:
                    marks[n]["label"] += f",{order}"
                    continue
                marks[n] = {"node": n, "role": role, "order": order, "label": str(order),
                            "x": at[0], "y": at[1]}
    return sorted(marks.values(), key=lambda m: (m["order"], m["role"] != "flow", m["node"]))


def _marker(p: PlannedTest) -> str:
    return f"planned {p.test_id}"


def day_rows(service, plan: list[PlannedTest]) -> list[dict]:
    """The plan as the day's list, in order: what to flow and gauge, and whether it is started."""
    started = {}
    for r in service.list_tests("all"):
        notes = service.header(r["test_id"]).get("notes", "")
        for p in plan:
            if _marker(p) in notes:
                started[p.test_id] = r["test_id"]
    system = service.system
    rows = []
    for order, p in enumerate(plan, start=1):
        from mobile.services import values
        rows.append({"order": order, "plan_id": p.test_id, "flow_nodes": p.flow_nodes,
                     "flow": values.fmt(p.flow, "flow", system), "gauges": p.gauge_nodes,
                     "outlets": p.outlets, "aimed_at": p.aimed_at, "test_id": started.get(p.test_id, "")})
    return rows


def start_planned(service, p: PlannedTest) -> str:
    """A new draft test with the plan's gauges and outlets; returns its id (the plan id in its notes)."""
    tid = service.new_test()
    service.set_gauges(tid, list(p.gauge_nodes))
    text = p.outlets.lower()
    for h in p.flow_nodes:
        if "pumper" in text or "meter" in text:
            service.add_outlet(tid, h, kind="meter", pumper=True)
        else:
            for _ in range(2 if "two" in text else 1):
                service.add_outlet(tid, h, "2.5")
    where = f"aimed at {p.aimed_at}; " if p.aimed_at else ""
    service.set_field(tid, "notes", f"{_marker(p)}: {where}{p.outlets}".strip())
    return tid
