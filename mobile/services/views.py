"""Display-ready text for the screens: every figure formatted here, so the screens only show strings.

Each function takes the ``TestService`` and returns plain dicts and lists of strings in the units
chosen in the settings. No Kivy here.
"""

from __future__ import annotations

from mobile.services import checklist, values, verdicts

SEVERITY_WORD = {"error": "PROBLEM", "warning": "CHECK", "info": "NOTE"}

#: What the screens show before a test is open (every key the kv files read).
EMPTY_RESULTS = {"flow": "-", "rated": "-", "rated_label": "Flow at the target residual", "klass": "",
                 "klass_colour": "", "static": "-", "residual": "-", "gauge": "", "findings": "",
                 "missing": [], "complete": False, "class_note": "", "verdict": "",
                 "suspect": False}
EMPTY_SETUP = {"test_id": "", "started": "", "crew": "", "weather": "", "notes": "", "gauges": [],
               "outlets": [], "gauge_height": "", "area": "", "boundary": ""}


def results_view(service, tid: str, revision: int | None = None) -> dict:
    """Big figures and findings of a test: flow, rated flow at the target, class, findings, missing."""
    sys_ = service.system
    r = service.results(tid, revision)
    target = values.fmt(r.target, "pressure", sys_)
    findings = [f"{SEVERITY_WORD.get(s, s.upper())}: {m}" for s, _, m in r.findings]
    check = verdicts.current(service, tid, revision)
    verdict = verdicts.text(check)
    if verdict:  # the model check's word comes first: it is what the crew must act on
        findings.insert(0, verdict)
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
        "verdict": verdict,
        "suspect": bool(check and check["verdict"]["suspect"]),
    }


def reading_rows(service, tid: str, selected: str = "") -> list[dict]:
    """Rows of the readings list: slot, label and the value in force ('-' while empty)."""
    rows, texts = [], service.reading_texts(tid)
    stored = service.readings(tid)
    for slot, name, label in service.slots(tid):
        text = texts.get(slot, "-")
        when = f"read {stored[slot].entered_at[11:16]} UTC" if slot in stored else \
            ("optional: after the hydrant is closed" if slot.startswith("static_end@") else "")
        rows.append({"slot": slot, "field": name, "label": label, "value": text, "when": when,
                     "unit": service.unit_of(name), "kind": values.FIELDS[name].kind,
                     "selected": slot == selected})
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
            desc = f"{o['hydrant']} outlet {o['uid'].lstrip('o')}: read on a meter or diffuser"
        else:
            desc = (f"{o['hydrant']} outlet {o['uid'].lstrip('o')}: "
                    f"{values.fmt(o['diameter'], 'diameter', sys_)}, {o['shape']} edge"
                    f"{', large outlet' if o.get('pumper') else ''}")
        outlets.append({"uid": o["uid"], "text": desc})
    gh = h.get("gauge_height")
    return {"test_id": tid, "started": h.get("started_at", "").replace("T", "  "),
            "crew": h.get("crew", ""), "weather": h.get("weather", ""), "notes": h.get("notes", ""),
            "gauges": list(h["gauges"]), "outlets": outlets,
            "gauge_height": values.fmt(gh["si"], "length", sys_) if gh else values.fmt(0.0, "length", sys_),
            "area": h.get("area", ""),
            "boundary": "   ".join(_boundary_text(b, sys_) for b in h.get("boundary", []))
            or "none noted: the model's grade is used"}


def _boundary_text(b: dict, system: str) -> str:
    grade = values.fmt(b["si"], "length", system)
    if b.get("entered") == "level" and b.get("level") is not None:
        return f"{b['source']} level {values.fmt(b['level'], 'length', system)} (grade {grade})"
    return f"{b['source']} grade {grade}"


def checklist_rows(service, tid: str) -> list[dict]:
    ticked = service.header(tid)["checklist"]
    return [{"key": i.key, "title": ("SAFETY: " if i.safety else "") + i.title
             + ("" if i.required else "  (if local rules ask)"), "safety": i.safety,
             "detail": i.detail, "ticked": bool(ticked.get(i.key))} for i in checklist.ITEMS]


ALL_AREAS = "every area"


def test_rows(service, when: str = "all", hydrant: str = "", area: str = ALL_AREAS) -> list[dict]:
    """Rows of the home list, one line each, newest first."""
    out = []
    area = "" if area == ALL_AREAS else area
    for t in service.list_tests(when=when, hydrant=hydrant, area=area):
        state = "DRAFT, not finished" if t["status"] == "draft" else "finished"
        if t["revision"] > 1:
            state += f", corrected {t['revision'] - 1} time{'s' if t['revision'] > 2 else ''}"
        line = (f"{t['test_id']}   {t['started_at'][11:16]}   {', '.join(t['hydrants'][:3])}")
        figure = t["rated"] if t["class"] else "-"
        state += (f";  flow at {t['target']} residual {t['rated']}, class {t['class']}" if t["class"]
                  else ";  readings missing")
        out.append({"test_id": t["test_id"], "line": line, "figure": figure,
                    "state": state, "draft": t["status"] == "draft"})
    return out


def history_text(service, tid: str) -> str:
    """Every revision and every reading ever entered, oldest first, in plain words with the time."""
    from mobile.services.session import field_of, slot_label

    sys_ = service.system
    lines = []
    history = service.store.history(tid)
    for rev in service.store.revisions(tid):
        header = service.header(tid, rev["revision"])
        started = rev["created_at"][:16].replace("T", " ")
        head = (f"Revision {rev['revision']}, started {started}" if rev["revision"] == 1 else
                f"Correction {rev['revision'] - 1} (revision {rev['revision']}), {started}: "
                f"{rev['reason']}")
        if rev.get("finished_at"):
            head += f"; finished {rev['finished_at'][11:16]}"
        lines.append(head)
        for r in history:
            if r.revision != rev["revision"]:
                continue
            name = field_of(r.slot)
            shown = values.fmt(r.si_value, values.FIELDS[name].kind, sys_)
            typed = r.entered_text if any(c.isalpha() for c in r.entered_text) else \
                f"{r.entered_text} {r.unit}"
            kind = values.FIELDS[name].kind
            note = "" if r.unit == values.field_unit(kind, sys_) else f"  (typed as {typed})"
            lines.append(f"    {r.entered_at[11:16]}  {slot_label(r.slot, header)}: {shown}{note}")
    return "\n".join(lines)


def setup_boxes(service, tid: str, source: str = "") -> dict:
    """What the set-up's typed boxes hold, from what is saved, as bare numbers in today's units."""
    if not tid:
        return {"height": "", "tank": "", "tank_by": "level"}
    h, sys_ = service.header(tid), service.system
    gh = h.get("gauge_height")
    noted = next((b for b in h.get("boundary", []) if b["source"] == source), None)
    tank, by = "", "level" if service.tank_has_floor(source) else "grade"
    if noted is not None:
        by = "level" if noted.get("entered") == "level" and noted.get("level") is not None else "grade"
        tank = _bare(noted["level"] if by == "level" else noted["si"], sys_)
    return {"height": _bare(gh["si"], sys_) if gh else "", "tank": tank, "tank_by": by}


def _bare(si: float, system: str) -> str:
    """A length as a bare number to retype, with enough digits to round-trip what was entered."""
    return f"{values.convert(si, 'length', system):.3f}".rstrip("0").rstrip(".")


def target_note(system: str) -> str:
    """The settings' note on the target residual, with one figure for 20 psi in the chosen units."""
    from calib.flowtest import DEFAULT_TARGET

    t = values.fmt(DEFAULT_TARGET, "pressure", system)
    at = "20 psi" if system == "us" else f"{t} (20 psi)"
    return (f"NFPA 291 rates hydrants at {at} residual; change it only where your authority asks. "
            f"The class is always taken at {at}.")


#: Units the keypad's unit key offers, by kind: the display unit of the system first.
KEYPAD_UNITS = {"pressure": ["psi", "kPa", "bar"], "flow": ["gpm", "L/s"],
                "diameter": ["in", "mm"], "length": ["ft", "m"]}


def keypad_units(kind: str, system: str) -> list[str]:
    """Units the keypad's unit key cycles through for a field of ``kind``, today's unit first."""
    first = values.field_unit(kind, system)
    return [first] + [u for u in KEYPAD_UNITS[kind] if u != first]


def hydrant_rows(area, text: str = "") -> list[dict]:
    """Rows of the set-up's picker: hydrants matching ``text``, then junctions without a hydrant."""
    return [{"text": h if area.is_hydrant(h) else f"{h} (junction)", "key": h}
            for h in area.search(text)]


MAP_LEGEND = ("Blue dots: hydrants.  Green ring: gauge hydrant.  Red square: flowing hydrant.  "
              "Yellow: picked.  One finger pans, two zoom.")
EMPTY_MAP = {"title": "", "picked": "", "outlet": "", "gauges": [], "flows": [], "nearby": [],
             "nearby_title": "", "available": False, "note": "", "planned": [], "legend": MAP_LEGEND}


def map_view(service, tid: str, data, picked: str = "", here=None) -> dict:
    """What the map screen shows: the test's hydrants by role, the picked one, the nearest list, and
    the day's plan (``service.plan``) numbered in order."""
    from mobile.services import mapdata
    from mobile.services import plan as plans

    if data is None:
        return dict(EMPTY_MAP, note="This area has no map: its network has no x and y coordinates "
                                    "(or no network is loaded). Pick hydrants from the list in SET-UP.")
    h = service.header(tid) if tid else {"gauges": [], "outlets": []}
    area = service.area
    out = dict(EMPTY_MAP, available=True, gauges=list(h["gauges"]),
               flows=sorted({o["hydrant"] for o in h["outlets"]}))
    day_plan = service.plan
    if day_plan:
        out["planned"] = plans.map_marks(day_plan, data)
        out["legend"] = MAP_LEGEND + "\n" + plans.LEGEND
        out["title"] = "" if tid else f"today's plan: {len(day_plan)} tests"
    if picked:
        o = service.remembered_outlet(picked)
        unit = values.field_unit("diameter", service.system)
        kind = "meter" if o["kind"] == "meter" else f"{o['diameter']} {unit} {o['shape']}"
        out["picked"] = picked + ("" if area.is_hydrant(picked) else "  (junction: no hydrant in the model)")
        out["outlet"] = f"ADD AS FLOW OUTLET ({kind}{', as last time' if o['remembered'] else ''})"
    centre = here or (data.where(picked) if picked else None)
    if centre:
        unit = values.field_unit("length", service.system)
        near = [(i, d) for i, d in data.nearest_first(*centre, count=9) if i != picked][:8]
        out["nearby"] = [{"key": i, "text": i, "side": mapdata.distance_text(d, data.lonlat, unit)}
                         for i, d in near]
        out["nearby_title"] = "Nearest hydrants " + ("to the point you tapped" if here else f"to {picked}")
    else:
        out["nearby_title"] = "Tap the map where you stand (or MY POSITION) for the nearest hydrants"
    return out


def located(data, lon: float, lat: float):
    """A device position arrived: ``(Outcome, [x, y] or [])`` for the map (the nearest list is
    centred there), or why it cannot be used."""
    from mobile.services.session import Outcome

    at = data.position(lon, lat) if data is not None else None
    if at is None:
        return Outcome(False, "The network's coordinates are not longitude/latitude, so the "
                              "device's position cannot be placed: tap where you stand on the map"), []
    return Outcome(True, f"Your position: {lat:.5f}, {lon:.5f}"), list(at)


def check_summary(service, tid: str) -> str:
    """The check screen's headline before a run: the verdict kept for these readings, if any."""
    kept = verdicts.text(verdicts.current(service, tid)) if tid else ""
    return (kept + "\nTap RUN CHECK to check again.") if kept else \
        "Tap RUN CHECK to simulate this test on the area's network."
