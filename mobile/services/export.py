"""Export to the office: the tests folder that ``python -m calib fit`` reads, plus one JSON per test.

Tables (units in brackets, in the units chosen in the settings):

- ``flows.csv``: ``test_id, node, flow`` per flowing outlet, with the pitot, outlet diameter and
  coefficient it came from (the flow is the one the app showed; the reader takes it as it is);
- ``pressures.csv``: ``test_id, node, static, residual, gauge_height`` per gauge hydrant;
- ``boundary.csv``: ``test_id, source, head`` where the crew noted a source grade (may be empty);
- ``tests.csv``: ``test_id, date, time, crew, area, weather, notes, revision, ...``;
- ``<test_id>.json``: everything recorded - every revision's set-up, every reading as typed with its
  unit and time, the checklist, the computed results and the cautions.

Only finished tests are exported unless drafts are asked for. Every file is written atomically through
``calib.fileio``, so a full card or a pulled cable never leaves half a table.
"""

from __future__ import annotations

import json
from dataclasses import asdict
from pathlib import Path

import pandas as pd

from calib import fileio, flowtest

from mobile.services import checklist, timing, values, verdicts
from mobile.services.compute import outlet_record

TABLES = ("flows.csv", "pressures.csv", "boundary.csv", "tests.csv")


def _u(kind: str, system: str) -> str:
    return values.field_unit(kind, system)


def export_plan(service, include_drafts: bool = False) -> tuple[list, list]:
    """Which revision of each test an export writes, and what it leaves out and why.

    Returns ``(chosen, left_out)``: ``chosen`` holds ``(test_id, revision, note)`` oldest first (the
    note says when a test under correction is exported as its last finished revision);
    ``left_out`` holds ``(test_id, why)``. No test is ever dropped without a line here.
    """
    chosen, left_out = [], []
    for t in reversed(service.store.tests()):  # oldest first
        if t.status == "finished" or include_drafts:
            note = "" if t.status == "finished" else "exported as an unfinished draft"
            chosen.append((t.test_id, t.current_revision, note))
            continue
        done = service.store.last_finished_revision(t.test_id)
        if done is not None:
            chosen.append((t.test_id, done, f"exported as its finished revision {done}: the "
                                             f"correction (revision {t.current_revision}) is not "
                                             "finished yet"))
        else:
            left_out.append((t.test_id, "a draft never finished"))
    return chosen, left_out


def describe_plan(chosen: list, left_out: list) -> str:
    """The plan in words for the export screen, before anything is written."""
    lines = [f"{len(chosen)} test(s) to export."]
    lines += [f"{tid}: {note}" for tid, _, note in chosen if note]
    if left_out:
        lines.append("Left out: " + "; ".join(f"{tid} ({why})" for tid, why in left_out)
                     + ". Finish them, or tap 'Unfinished drafts' to export them as they are.")
    return "\n".join(lines)


def test_record(service, tid: str, res=None, revision: int | None = None) -> dict:
    """Everything recorded for one test, as a JSON-ready dict (SI values with the entered text).

    ``res``: the test's ``Results`` when the caller has computed them already; ``revision``: the
    revision exported (default: the current one).
    """
    t = service.store.test(tid)
    revision = revision or t.current_revision
    res = service.results(tid, revision) if res is None else res
    h = service.header(tid, revision)
    ticked = h["checklist"]
    revisions = []
    for rev in service.store.revisions(tid):
        revisions.append({**rev, "header": service.header(tid, rev["revision"]),
                          "readings_in_force": {s: asdict(r) for s, r in
                                                service.readings(tid, rev["revision"]).items()}})
    return {
        "format": "hydrant-calib field test, version 1",
        "units_note": "values '*_si' in m, m3/s and Pa (gauge); 'unit' and 'entered_text' as typed",
        "test_id": tid, "status": t.status, "area": t.area, "created_at": t.created_at,
        "current_revision": t.current_revision, "exported_revision": revision,
        "flow_timer": {"opened": h.get("flow_started_at"), "closed": h.get("flow_stopped_at"),
                       "duration_s": timing.duration(h)},
        "revisions": revisions,
        "model_checks": verdicts.all_checks(service, tid),
        "history": [asdict(r) for r in service.store.history(tid)],
        "checklist": {i.key: {"title": i.title, "ticked": bool(ticked.get(i.key))}
                      for i in checklist.ITEMS},
        "results_si": {"flow": res.flow, "outlet_flows": res.outlet_flows, "rated_flow": res.rated_flow,
                       "target": res.target, "class": res.class_label, "gauge": res.gauge,
                       "findings": [{"severity": s, "code": c, "message": m}
                                    for s, c, m in res.findings],
                       "missing": res.missing},
        "cautions": list(flowtest.CAUTIONS) + [checklist.LOCAL_RULES],
    }


def export_tests(service, folder, include_drafts: bool = False) -> dict:
    """Write the tests folder into ``folder``; returns ``{"tests": n, "files": [...], "folder",
    "notes": [...], "left_out": [(test_id, why)]}`` (see ``export_plan``)."""
    folder = Path(folder)
    system = service.system
    uq, up, ud, ul = (_u(k, system) for k in ("flow", "pressure", "diameter", "length"))
    flows, pressures, boundary, tests, written = [], [], [], [], []
    chosen, left_out = export_plan(service, include_drafts)
    for tid, revision, note in chosen:
        t = service.store.test(tid)
        h = service.header(tid, revision)
        readings = service.readings(tid, revision)
        res = service.results(tid, revision)
        for o in h["outlets"]:
            rec = outlet_record(o, readings)
            if rec is None:
                continue
            pitot = None if rec.pitot is None else values.convert(rec.pitot, "pressure", system)
            dia = None if rec.diameter is None else values.convert(rec.diameter, "diameter", system)
            flows.append({"test_id": t.test_id, "node": o["hydrant"],
                          f"flow [{uq}]": values.convert(rec.discharge, "flow", system),
                          f"pitot [{up}]": pitot, f"outlet_diameter [{ud}]": dia,
                          "coefficient": rec.coefficient if rec.flow is None else None,
                          "pumper_factor": rec.factor, "outlet": o["uid"], "read_by": o["kind"]})
        gh = (h.get("gauge_height") or {}).get("si", 0.0)
        for g in h["gauges"]:
            s, r = readings.get(f"static@{g}"), readings.get(f"residual@{g}")
            if s is None and r is None:
                continue
            shown = {k: None if x is None else values.convert(x.si_value, "pressure", system)
                     for k, x in (("static", s), ("residual", r))}
            end = readings.get(f"static_end@{g}")
            pressures.append({"test_id": t.test_id, "node": g, f"static [{up}]": shown["static"],
                              f"residual [{up}]": shown["residual"],
                              f"static_end [{up}]": None if end is None else
                              values.convert(end.si_value, "pressure", system),
                              f"gauge_height [{ul}]": values.convert(gh, "length", system)})
        for b in h.get("boundary", []):
            boundary.append({"test_id": t.test_id, "source": b["source"],
                             f"head [{ul}]": values.convert(b["si"], "length", system)})
        started = h.get("started_at", "")
        tests.append({"test_id": t.test_id, "date": started[:10], "time": started[11:16],
                      "crew": h.get("crew", ""), "area": t.area, "weather": h.get("weather", ""),
                      "notes": h.get("notes", ""), "revision": revision,
                      "status": "finished" if revision != t.current_revision else t.status,
                      "correction_open": "yes" if revision != t.current_revision else "no",
                      "flow_opened": h.get("flow_started_at") or "",
                      "flow_closed": h.get("flow_stopped_at") or "",
                      "flow_duration [s]": timing.duration(h),
                      f"rated_flow [{uq}]": None if res.rated_flow is None else
                      values.convert(res.rated_flow, "flow", system),
                      f"target [{up}]": values.convert(res.target, "pressure", system),
                      "class": res.class_label})
        path = folder / f"{t.test_id}.json"
        fileio.write_text(path, json.dumps(test_record(service, tid, res, revision), indent=1,
                                           default=str))
        written.append(path.name)
    columns = {
        "flows.csv": ["test_id", "node", f"flow [{uq}]", f"pitot [{up}]", f"outlet_diameter [{ud}]",
                      "coefficient", "pumper_factor", "outlet", "read_by"],
        "pressures.csv": ["test_id", "node", f"static [{up}]", f"residual [{up}]",
                          f"gauge_height [{ul}]", f"static_end [{up}]"],
        "boundary.csv": ["test_id", "source", f"head [{ul}]"],
        "tests.csv": ["test_id", "date", "time", "crew", "area", "weather", "notes", "revision",
                      "status", "correction_open", "flow_opened", "flow_closed",
                      "flow_duration [s]", f"rated_flow [{uq}]", f"target [{up}]", "class"],
    }
    for name, rows in zip(TABLES, (flows, pressures, boundary, tests)):
        fileio.write_csv(folder / name, pd.DataFrame(rows, columns=columns[name]))
        written.append(name)
    return {"tests": len(tests), "files": written, "folder": str(folder),
            "notes": [f"{tid}: {note}" for tid, _, note in chosen if note], "left_out": left_out}


def done_message(done: dict) -> str:
    """What an export wrote, with every test exported in another state and every one left out."""
    lines = [f"Exported {done['tests']} test(s) to {done['folder']}"]
    lines += done.get("notes", [])
    if done.get("left_out"):
        lines.append("Left out: " + "; ".join(f"{tid} ({why})" for tid, why in done["left_out"]))
    return "\n".join(lines)


def plan_text(service, include_drafts: bool = False) -> str:
    """The export screen's preview: what EXPORT will write and what it leaves out, and why."""
    return describe_plan(*export_plan(service, include_drafts))
