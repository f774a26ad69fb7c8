"""Display-ready text for the screens: every figure formatted here, so the screens only show strings.

Each function takes the ``TestService`` and returns plain dicts and lists of strings in the units
chosen in the settings. No Kivy here.
"""

from __future__ import annotations

from mobile.services import checklist, values

SEVERITY_WORD = {"error": "PROBLEM", "warning": "CHECK", "info": "NOTE"}

#: What the screens show before a test is open (every key the kv files read).
EMPTY_RESULTS = {"flow": "-", "rated": "-", "rated_label": "Flow at the target residual", "klass": "",
                 "klass_colour": "", "static": "-", "residual": "-", "gauge": "", "findings": "",
                 "missing": [], "complete": False, "class_note": ""}
EMPTY_SETUP = {"test_id": "", "started": "", "crew": "", "weather": "", "notes": "", "gauges": [],
               "outlets": [], "gauge_height": "", "area": "", "boundary": ""}


def results_view(service, tid: str, revision: int | None = None) -> dict:
    """Big figures and findings of a test: flow, rated flow at the target, class, findings, missing."""
    sys_ = service.system
    r = service.results(tid, revision)
    target = values.fmt(r.target, "pressure", sys_)
    findings = [f"{SEVERITY_WORD.get(s, s.upper())}: {m}" for s, _, m in r.findings]
    return {
        "flow": values.fmt(r.flow, "flow", sys_),
        "rated": values.fmt(r.rated_flow, "flow", sys_),
        "rated_label": f"Flow at {target} residual",
        "klass": f"Class {r.class_label}" if r.class_label else "Class -",
        "klass_colour": r.class_colour,
        "static": values.fmt(r.static, "pressure", sys_),
        "residual": values.fmt(r.residual, "pressure", sys_),
        "gauge": r.gauge,
        "findings": "\n".join(findings) if findings else
        ("Still to enter: " + ", ".join(r.missing) if r.missing else "No findings: readings look consistent."),
        "missing": list(r.missing),
        "complete": not r.missing and r.rated_flow is not None,
        "class_note": r.class_note,
    }


def reading_rows(service, tid: str, selected: str = "") -> list[dict]:
    """Rows of the readings list: slot, label and the value in force ('-' while empty)."""
    rows, texts = [], service.reading_texts(tid)
    for slot, name, label in service.slots(tid):
        text = texts.get(slot, "-")
        rows.append({"slot": slot, "field": name, "label": label, "value": text,
                     "unit": service.unit_of(name), "selected": slot == selected})
    return rows


def pick_slot(rows: list[dict], current: str, advance: bool = False) -> str:
    """The reading to show on the keypad: ``current`` while it is one of ``rows``, else the first
    still empty, else the first. ``advance`` (a reading was just saved): the first empty one first."""
    slots = [r["slot"] for r in rows]
    empty = next((r["slot"] for r in rows if r["value"] == "-"), None)
    if advance and empty:
        return empty
    if current in slots:
        return current
    return empty or (slots[0] if slots else "")


def check_rows(result, system: str) -> list[str]:
    """One block of text per gauge of a model check (``mobile.services.check.CheckResult``)."""
    f = lambda v: values.fmt(v, "pressure", system)  # noqa: E731
    rows = []
    for g in result.gauges:
        lines = [f"{g.node}:  static {f(g.observed_static)} observed / {f(g.predicted_static)} model;"
                 f"  residual {f(g.observed_residual)} / {f(g.predicted_residual)}"]
        for kind, (lo, hi) in getattr(g, "ranges", {}).items():
            lines.append(f"   {kind} plausible {f(lo)} to {f(hi)}")
        lines += [f"   -> {a}" for a in g.advice] or [f"   -> {n}" for n in getattr(g, "notes", [])] \
            or ["   -> agrees with the model"]
        if getattr(g, "closures", None):
            lines.append("   pipes whose closing would explain it: " + "; ".join(g.closures))
        rows.append("\n".join(lines))
    return rows


def setup_view(service, tid: str) -> dict:
    h = service.header(tid)
    sys_ = service.system
    outlets = []
    for o in h["outlets"]:
        if o["kind"] == "meter":
            desc = f"{o['hydrant']}  outlet {o['uid']}: meter / diffuser"
        else:
            desc = (f"{o['hydrant']}  outlet {o['uid']}: {values.fmt(o['diameter'], 'diameter', sys_)}"
                    f" {o['shape']}{' pumper' if o.get('pumper') else ''}")
        outlets.append({"uid": o["uid"], "text": desc})
    gh = h.get("gauge_height")
    return {"test_id": tid, "started": h.get("started_at", "").replace("T", "  "),
            "crew": h.get("crew", ""), "weather": h.get("weather", ""), "notes": h.get("notes", ""),
            "gauges": list(h["gauges"]), "outlets": outlets,
            "gauge_height": values.fmt(gh["si"], "length", sys_) if gh else values.fmt(0.0, "length", sys_),
            "area": h.get("area", ""),
            "boundary": "   ".join(f"{b['source']} {values.fmt(b['si'], 'length', sys_)}"
                                   for b in h.get("boundary", [])) or "none noted"}


def checklist_rows(service, tid: str) -> list[dict]:
    ticked = service.header(tid)["checklist"]
    return [{"key": i.key, "title": i.title + ("" if i.required else "  (if local rules ask)"),
             "detail": i.detail, "ticked": bool(ticked.get(i.key))} for i in checklist.ITEMS]


ALL_AREAS = "all areas"


def test_rows(service, when: str = "all", hydrant: str = "", area: str = ALL_AREAS) -> list[dict]:
    """Rows of the home list, one line each, newest first."""
    out = []
    area = "" if area == ALL_AREAS else area
    for t in service.list_tests(when=when, hydrant=hydrant, area=area):
        state = "DRAFT" if t["status"] == "draft" else "done"
        rev = f" rev {t['revision']}" if t["revision"] > 1 else ""
        line = (f"{t['test_id']}   {t['started_at'][11:16]}   {', '.join(t['hydrants'][:3])}")
        figure = f"{t['rated']}  {t['class']}" if t["class"] else "incomplete"
        out.append({"test_id": t["test_id"], "line": line, "figure": figure,
                    "state": state + rev, "draft": t["status"] == "draft"})
    return out


def history_text(service, tid: str) -> str:
    """Every revision and every reading ever entered, oldest first, for the correction history."""
    sys_ = service.system
    lines = []
    for rev in service.store.revisions(tid):
        reason = f" - {rev['reason']}" if rev["reason"] else ""
        lines.append(f"Revision {rev['revision']}  {rev['created_at'][:16].replace('T', ' ')}{reason}")
        for r in service.store.history(tid):
            if r.revision != rev["revision"]:
                continue
            name = r.slot.split("@")[0]
            shown = values.fmt(r.si_value, values.FIELDS[name].kind, sys_)
            typed = r.entered_text if any(c.isalpha() for c in r.entered_text) else \
                f"{r.entered_text} {r.unit}"
            lines.append(f"    {r.slot}: {shown}  (typed '{typed}')")
    return "\n".join(lines)
