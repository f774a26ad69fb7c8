"""The field session: create a test, set it up, enter readings, see results, finish, correct.

Plain Python, no Kivy: the screens call these methods in one line each, and the tests call them
without a window. Every method that changes a test writes to the store at once. Bad input never
raises into the screen: ``enter`` and the ``set_*`` methods return an ``Outcome`` with a plain
message, and a refused value is never stored.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from datetime import date, datetime

from calib.errors import CalibError, InputError
from calib.units import PSI

from mobile.services import checklist, timing, values
from mobile.services.area import Area
from mobile.services.compute import Results, compute
from mobile.store import Store, StoreError

SHAPES = ("smooth", "square", "projecting")
KINDS = ("pitot", "meter")
TEXT_FIELDS = {"crew": 120, "weather": 80, "notes": 2000}


@dataclass
class Outcome:
    """What happened to an entry: accepted or not, and the words to show the crew."""

    ok: bool
    message: str
    warnings: list = field(default_factory=list)
    value: float | None = None


def _first_message(exc: Exception) -> str:
    if isinstance(exc, InputError) and exc.problems:
        p = exc.problems[0]
        text = p.message[0].upper() + p.message[1:]
        same = [q for q in exc.problems if q.message == p.message and q.file]
        if p.file and p.file not in text:  # e.g. which files of a network folder are missing
            text = ", ".join(dict.fromkeys(q.file for q in same or [p])) + ": " + p.message
        if p.expected:
            text += f" (expected {p.expected})"
        more = len(exc.problems) - max(len(same), 1)
        if more:
            text += f"; and {more} more problem{'s' if more > 1 else ''}"
        return text
    return str(exc)


def field_of(slot: str) -> str:
    """The field a reading slot is checked as: ``static_end@J1`` is a static."""
    name = slot.split("@", 1)[0]
    return "static" if name == "static_end" else name


def slot_label(slot: str, header: dict) -> str:
    """A reading's name in plain words: 'Static at J041', 'Pitot at J285, outlet 1'."""
    name, _, where = slot.partition("@")
    if name in ("static", "residual", "static_end"):
        return {"static": "Static", "residual": "Residual",
                "static_end": "Static after closing"}[name] + f" at {where}"
    hydrant = next((o["hydrant"] for o in header.get("outlets", []) if o["uid"] == where), "?")
    what = "Meter flow" if name == "flow" else "Pitot"
    return f"{what} at {hydrant}, outlet {where.lstrip('o')}"


class TestService:
    """All a crew does with tests. ``store`` is an open ``Store``; ``area`` the loaded ``Area``."""

    __test__ = False  # not a pytest class

    def __init__(self, store: Store, area: Area | None = None):
        self.store = store
        self.area = area or Area("No area loaded")
        self.plan: list = []  # the day's plan from the office (mobile.services.plan.load), in order

    # --- settings ----------------------------------------------------------------------------
    @property
    def system(self) -> str:
        return self.store.get_setting("units", "us")

    @property
    def target(self) -> float:
        """Target residual for the rated flow [Pa]; 20 psi unless changed in the settings."""
        return float(self.store.get_setting("target", 20.0 * PSI))

    def set_units(self, system: str) -> Outcome:
        if system not in values.FIELD_UNIT:
            return Outcome(False, f"Units must be US or SI, not '{system}'")
        return self._guard(lambda: self.store.set_setting("units", system), "Units: " + system.upper())

    def set_target(self, text: str) -> Outcome:
        try:
            si, _ = values.parse_value(text, "target", self.system)
        except InputError as exc:
            return Outcome(False, _first_message(exc))
        return self._guard(lambda: self.store.set_setting("target", si),
                           f"Target residual: {values.fmt(si, 'pressure', self.system)}", si)

    def unit_of(self, field_name: str) -> str:
        """The unit a bare number typed into ``field_name`` is taken in (``psi``, ``kPa``, ...)."""
        return values.field_unit(values.FIELDS[field_name].kind, self.system)

    # --- tests -------------------------------------------------------------------------------
    def next_test_id(self) -> str:
        """``FT-YYYYMMDD-NN``: today's date and the next free number."""
        stem = f"FT-{date.today():%Y%m%d}-"
        used = {t.test_id for t in self.store.tests() if t.test_id.startswith(stem)}
        n = 1
        while f"{stem}{n:02d}" in used:
            n += 1
        return f"{stem}{n:02d}"

    def new_test(self, crew: str | None = None, area: str | None = None) -> str:
        """Create a draft with id and time filled in; returns the id (raises ``StoreError``).

        Without ``crew`` the crew of the newest test is carried over (the same crew all day)."""
        tid = self.next_test_id()
        if crew is None:
            last = self.store.tests()
            crew = self.store.header(last[0].test_id).get("crew", "") if last else ""
        header = {"test_id": tid, "started_at": datetime.now().astimezone().isoformat(timespec="minutes"),
                  "crew": crew[:TEXT_FIELDS["crew"]], "weather": "", "notes": "",
                  "area": area if area is not None else self.area.name, "gauges": [], "outlets": [],
                  "gauge_height": None, "checklist": {k: False for k in checklist.item_keys()},
                  "target": self.target, "units": self.system, "next_outlet": 1}
        self.store.create_test(tid, header, area=header["area"])
        return tid

    def header(self, tid: str, revision: int | None = None) -> dict:
        return self.store.header(tid, revision)

    def _edit(self, tid: str, change, message: str, value=None) -> Outcome:
        def run():
            h = self.store.header(tid)
            change(h)
            self.store.update_header(tid, h, area=h.get("area"))
        return self._guard(run, message, value)

    @staticmethod
    def _guard(action, message: str, value=None) -> Outcome:
        try:
            action()
        except (CalibError, KeyError) as exc:
            return Outcome(False, _first_message(exc))
        return Outcome(True, message, value=value)

    def set_field(self, tid: str, name: str, text: str) -> Outcome:
        """Set crew, weather or notes (free text, trimmed to a sane length)."""
        if name not in TEXT_FIELDS:
            return Outcome(False, f"'{name}' is not a text field of a test")
        text = str(text or "").replace("\x00", "")[: TEXT_FIELDS[name]]
        return self._edit(tid, lambda h: h.__setitem__(name, text), f"{name.title()} saved")

    def tick(self, tid: str, key: str, ticked: bool) -> Outcome:
        if key not in checklist.item_keys():
            return Outcome(False, f"'{key}' is not a checklist item")
        return self._edit(tid, lambda h: h["checklist"].__setitem__(key, bool(ticked)), "Saved")

    def tick_all(self, tid: str) -> Outcome:
        """ALL DONE: tick the required items that are not safety items in one tap; go on (ok) only
        when every safety item was confirmed by its own tap, else name the ones left (refused; the
        other ticks are kept). Optional items, which local rules decide, stay as they are."""
        keys = checklist.bulk_keys()
        out = self._edit(tid, lambda h: h["checklist"].update({k: True for k in keys}),
                         f"{len(keys)} preparation items ticked")
        if not out.ok:
            return out
        left = [i.title for i in checklist.missing_items(self.header(tid)["checklist"])]
        if left:
            return Outcome(False, "Tap each safety item to confirm it first: " + "; ".join(left))
        return out

    def checklist_keys(self) -> list[str]:
        return checklist.item_keys()

    def set_gauges(self, tid: str, hydrant_ids: list[str]) -> Outcome:
        try:
            ids = [self.area.check_hydrant(h, "gauge hydrant") for h in hydrant_ids]
        except InputError as exc:
            return Outcome(False, _first_message(exc))
        return self._edit(tid, lambda h: h.__setitem__("gauges", list(dict.fromkeys(ids))),
                          "Gauge hydrant: " + ", ".join(ids) if ids else "No gauge hydrant now")

    def add_gauge(self, tid: str, hydrant_id: str) -> Outcome:
        out = self.set_gauges(tid, self.header(tid)["gauges"] + [hydrant_id])
        if out.ok:
            out.warnings = [n for n in [self.area.hydrant_note(hydrant_id.strip())] if n]
        return out

    def remove_gauge(self, tid: str, hydrant_id: str) -> Outcome:
        return self.set_gauges(tid, [g for g in self.header(tid)["gauges"] if g != hydrant_id])

    def add_outlet(self, tid: str, hydrant_id: str, diameter_text: str = "2.5", shape: str = "smooth",
                   kind: str = "pitot", pumper: bool = False) -> Outcome:
        """Add one flowing outlet (pitot with its diameter and shape, or a meter/diffuser)."""
        try:
            hid = self.area.check_hydrant(hydrant_id, "flow hydrant")
            if shape not in SHAPES:
                return Outcome(False, f"Outlet shape must be one of {', '.join(SHAPES)}")
            if kind not in KINDS:
                return Outcome(False, "Outlet must be read by pitot or by meter")
            dia, unit = (values.parse_value(diameter_text, "diameter", self.system)
                         if kind == "pitot" else (None, ""))
        except InputError as exc:
            return Outcome(False, _first_message(exc))

        def change(h):
            uid = f"o{h['next_outlet']}"
            h["next_outlet"] += 1
            h["outlets"].append({"uid": uid, "hydrant": hid, "kind": kind, "shape": shape,
                                 "pumper": bool(pumper), "diameter": dia, "diameter_unit": unit,
                                 "diameter_text": str(diameter_text)})
        out = self._edit(tid, change, f"Outlet added on {hid}")
        if out.ok:
            out.warnings = [n for n in [self.area.hydrant_note(hid)] if n]
        return out

    def remove_outlet(self, tid: str, uid: str) -> Outcome:
        return self._edit(tid, lambda h: h.__setitem__(
            "outlets", [o for o in h["outlets"] if o["uid"] != uid]), "Outlet removed")

    def outlets(self, tid: str) -> list[dict]:
        return self.header(tid)["outlets"]

    def set_gauge_height(self, tid: str, text: str) -> Outcome:
        """Height of the gauge above the hydrant's model elevation (signed)."""
        try:
            si, unit = values.parse_value(text, "gauge_height", self.system)
        except InputError as exc:
            return Outcome(False, _first_message(exc))
        return self._edit(tid, lambda h: h.__setitem__(
            "gauge_height", {"si": si, "unit": unit, "text": str(text)}),
            f"Gauge height {values.fmt(si, 'length', self.system)}", si)

    def sources(self) -> list[str]:
        """Ids of the area's fixed-grade sources (reservoirs, tanks); empty without a network."""
        net = self.area.network
        if net is None:
            return []
        # Tanks first: their level is what an operator reports; a plant's grade rarely changes.
        return [str(s) for _, s in sorted(zip(net.source_kind != "tank", net.source_ids),
                                          key=lambda p: p[0])]

    def set_source_grade(self, tid: str, source: str, text: str) -> Outcome:
        """Record a source's grade (water surface elevation) at the time of the test."""
        return self.set_source(tid, source, text, "grade")

    def set_tank_level(self, tid: str, source: str, text: str) -> Outcome:
        """Record a tank's water level (depth above its floor) as the operator gives it."""
        return self.set_source(tid, source, text, "level")

    def set_source(self, tid: str, source: str, text: str, what: str = "level") -> Outcome:
        """Record a source's ``level`` or ``grade`` at the time of the test; the level becomes a grade
        from the tank's floor in the network, and a value the tank cannot hold is refused."""
        from calib.network import tanks  # the level <-> grade rule lives with the network

        if source not in self.sources():
            return Outcome(False, f"'{source}' is not a source of the area"
                                  + (f" (expected one of {', '.join(self.sources())})" if self.sources()
                                     else ": load the area's network first"))
        if what not in ("level", "grade"):
            return Outcome(False, "Enter a tank's level or its grade")
        net, system = self.area.network, self.system
        try:
            si, unit = values.parse_value(text, "tank_level" if what == "level" else "source_grade",
                                          system)
            grade = tanks.grade_from_level(net, source, si, system) if what == "level" else \
                tanks.check_grade(net, source, si, system)
        except InputError as exc:
            return Outcome(False, _first_message(exc))

        def change(h):
            kept = [b for b in h.get("boundary", []) if b["source"] != source]
            h["boundary"] = kept + [{"source": source, "si": grade, "entered": what,
                                     "level": si if what == "level" else None,
                                     "unit": unit, "text": str(text)}]
        shown = values.fmt(grade, "length", system)
        msg = (f"{source}: level {values.fmt(si, 'length', system)} = grade {shown}" if what == "level"
               else f"{source}: grade {shown}")
        return self._edit(tid, change, msg, grade)

    def clear_source(self, tid: str, source: str) -> Outcome:
        """Forget the level or grade noted for ``source`` (the model's own grade is used again)."""
        def change(h):
            h["boundary"] = [b for b in h.get("boundary", []) if b["source"] != source]
        return self._edit(tid, change, f"{source}: cleared; the model's grade is used")

    def tank_has_floor(self, source: str) -> bool:
        """True when the network gives ``source`` a floor, so that a level can be typed."""
        import math

        from calib.network import tanks

        return source in self.sources() and math.isfinite(tanks.tank_range(self.area.network, source)[0])

    def tank_range(self, source: str) -> str:
        """What the tank can hold, in words, for the set-up screen ('' without a network)."""
        from calib.network import tanks

        if source not in self.sources():
            return ""
        return tanks.describe_range(self.area.network, source, self.system)

    # --- flow timer --------------------------------------------------------------------------
    def start_flow(self, tid: str) -> Outcome:
        """The flowing hydrant is open: the timer starts (a second tap restarts it)."""
        at = timing.now()
        return self._edit(tid, lambda h: h.update(flow_started_at=at, flow_stopped_at=None),
                          f"Flow timer started at {at[11:19]} UTC")

    def stop_flow(self, tid: str) -> Outcome:
        """The flowing hydrant is closed: the timer stops and the duration is saved."""
        h = self.header(tid)
        if not timing.running(h):
            return Outcome(False, "The flow timer is not running: tap START FLOW when the hydrant "
                                  "is open")
        at = timing.now()
        h["flow_stopped_at"] = at
        return self._edit(tid, lambda x: x.update(flow_stopped_at=at),
                          f"Flowed {timing.clock(timing.duration(h))}: now re-read the static",
                          timing.duration(h))

    # --- outlets remembered per hydrant -------------------------------------------------------
    def remembered_outlet(self, hydrant: str) -> dict:
        """The outlet last used on ``hydrant`` (size as typed, shape, kind, large outlet), from the
        newest test there; the standard 2.5 in smooth hose outlet read by pitot otherwise."""
        from mobile.services import outlets

        for t in self.store.tests():  # newest first
            for o in reversed(self.store.header(t.test_id).get("outlets", [])):
                if o["hydrant"] == hydrant:
                    dia = "" if o.get("diameter") is None else \
                        f"{values.convert(o['diameter'], 'diameter', self.system):.1f}".rstrip("0").rstrip(".")
                    return {"diameter": dia or outlets.sizes(self.system)[0], "shape": o["shape"],
                            "kind": o["kind"], "pumper": bool(o.get("pumper")), "remembered": True}
        return {"diameter": outlets.sizes(self.system)[0], "shape": "smooth", "kind": "pitot",
                "pumper": False, "remembered": False}

    def add_remembered_outlet(self, tid: str, hydrant: str) -> Outcome:
        """Add an outlet on ``hydrant`` as it was last set up there (one tap from the map)."""
        o = self.remembered_outlet(hydrant.strip())
        return self.add_outlet(tid, hydrant, o["diameter"], o["shape"], o["kind"], o["pumper"])

    # --- readings ----------------------------------------------------------------------------
    def slots(self, tid: str) -> list[tuple[str, str, str]]:
        """The readings a test asks for: (slot, field, label), in the order a crew reads them."""
        h = self.header(tid)
        out = [(f"static@{g}", "static", f"Static at {g}") for g in h["gauges"]]
        out += [(f"residual@{g}", "residual", f"Residual at {g}") for g in h["gauges"]]
        for o in h["outlets"]:
            name = "flow" if o["kind"] == "meter" else "pitot"
            out.append((f"{name}@{o['uid']}", name, slot_label(f"{name}@{o['uid']}", h)))
        # The static again once the hydrant is closed (optional; a change points at drift or a
        # system that changed during the test).
        out += [(f"static_end@{g}", "static", slot_label(f"static_end@{g}", h)) for g in h["gauges"][:1]]
        return out

    def enter(self, tid: str, slot: str, text: str) -> Outcome:
        """Check one typed reading and, if it is usable, commit it at once.

        Checks: a number, of the field's dimension, in its plausible range, and a residual not above
        the static of the same gauge (and a static not below its residual).
        """
        known = {s: f for s, f, _ in self.slots(tid)}
        if slot not in known:
            return Outcome(False, f"'{slot}' is not a reading of this test: set up the hydrants first")
        name = known[slot]
        system = self.system
        try:
            si, unit = values.parse_value(text, name, system)
        except InputError as exc:
            return Outcome(False, _first_message(exc))
        current = self.store.readings(tid)
        gauge = slot.split("@", 1)[1]
        if name == "residual" and f"static@{gauge}" in current:
            static = current[f"static@{gauge}"].si_value
            if si > static:
                return Outcome(False, f"Residual {values.fmt(si, 'pressure', system)} is above the "
                                      f"static {values.fmt(static, 'pressure', system)}: re-read "
                                      "the gauge (a residual cannot exceed the static)")
        if name == "static" and f"residual@{gauge}" in current:
            residual = current[f"residual@{gauge}"].si_value
            if si < residual:
                return Outcome(False, f"Static {values.fmt(si, 'pressure', system)} is below the "
                                      f"residual {values.fmt(residual, 'pressure', system)}: re-read "
                                      "the gauge")
        try:
            self.store.add_reading(tid, slot, si, unit, str(text).strip())
        except StoreError as exc:
            return Outcome(False, "NOT SAVED: " + str(exc))
        kind = values.FIELDS[name].kind
        msg = f"Saved {values.FIELDS[name].label} {values.fmt(si, kind, system)}"
        return Outcome(True, msg, warnings=self._entry_warnings(name, si), value=si)

    @staticmethod
    def _entry_warnings(name: str, si: float) -> list[str]:
        from calib.flowtest import findings as f  # thresholds with their sources live there
        if name == "pitot" and not (f.PITOT_LOW <= si <= f.PITOT_HIGH):
            return ["Pitot outside about 10-30 psi: less reliable; change the outlet or the number "
                    "of outlets if you can"]
        if name == "residual" and si < f.MIN_RESIDUAL:
            return ["Residual below 20 psi: close the hydrant slowly now (risk of vacuum and "
                    "back-siphonage)"]
        return []

    def readings(self, tid: str, revision: int | None = None) -> dict:
        return self.store.readings(tid, revision)

    def reading_texts(self, tid: str) -> dict[str, str]:
        """The readings in force, slot -> display text (one read of the store for all of them)."""
        system = self.system
        return {slot: values.fmt(r.si_value, values.FIELDS[field_of(slot)].kind, system)
                for slot, r in self.store.readings(tid).items()}

    def reading_text(self, tid: str, slot: str) -> str:
        """The reading in force for ``slot``, in display units, or '' when none."""
        return self.reading_texts(tid).get(slot, "")

    # --- results, finishing, corrections ----------------------------------------------------
    def results(self, tid: str, revision: int | None = None) -> Results:
        return compute(self.header(tid, revision), self.store.readings(tid, revision), self.system)

    def missing(self, tid: str) -> list[str]:
        """What keeps the test from being finished, in plain words (empty: ready)."""
        h = self.header(tid)
        out = list(self.results(tid).missing)
        out += [f"checklist: {i.title}" for i in checklist.missing_items(h["checklist"])]
        if not h.get("crew"):
            out.append("crew names")
        return out

    def finish(self, tid: str) -> Outcome:
        todo = self.missing(tid)
        if todo:
            return Outcome(False, "Still to do: " + "; ".join(todo))
        return self._guard(lambda: self.store.finish(tid), f"Test {tid} finished and saved")

    def correction_question(self, tid: str, reason: str) -> Outcome:
        """What to ask before a correction reopens ``tid`` (ok), or why it cannot be reopened."""
        reason = (reason or "").strip()
        t = self.store.test(tid)
        if t.status != "finished":
            return Outcome(False, f"Test {tid} is not finished: change its readings directly, no "
                                  "correction is needed")
        if not reason:
            return Outcome(False, f"Type why test {tid} is corrected (e.g. 'residual re-read'): "
                                  "the reason is kept with it")
        return Outcome(True, f"Reopen test {tid} to correct it ({reason})? Its finished revision "
                             f"{t.current_revision} stays as it is and is the one exported until "
                             "you finish the correction.")

    def correct(self, tid: str, reason: str) -> Outcome:
        """Start a correction: a new revision; the previous one stays readable unchanged."""
        try:
            rev = self.store.new_revision(tid, reason)
        except StoreError as exc:
            return Outcome(False, str(exc))
        return Outcome(True, f"Correcting {tid}: revision {rev}", value=rev)

    # --- lists -------------------------------------------------------------------------------
    def areas(self) -> list[str]:
        """Areas that tests were logged in, sorted (for the list's area filter)."""
        return sorted({t.area for t in self.store.tests() if t.area})

    def list_tests(self, when: str = "all", area: str = "", hydrant: str = "") -> list[dict]:
        """Tests as rows for the home list: ``when`` 'today' (and all drafts) or 'all'; filter by area
        and hydrant."""
        today, system = date.today().isoformat(), self.system
        rows = []
        for t in self.store.tests():
            h = self.store.header(t.test_id)
            hydrants = list(h.get("gauges", [])) + [o["hydrant"] for o in h.get("outlets", [])]
            # "today" also keeps every unfinished draft, whatever its day: it must not get lost.
            if when == "today" and t.status != "draft" and not h.get("started_at", "").startswith(today):
                continue
            if area and area.lower() not in (t.area or "").lower():
                continue
            if hydrant and not any(hydrant.strip().lower() in x.lower() for x in hydrants):
                continue
            res = compute(h, self.store.readings(t.test_id), system)
            rows.append({"test_id": t.test_id, "status": t.status, "revision": t.current_revision,
                         "area": t.area, "started_at": h.get("started_at", ""),
                         "hydrants": hydrants, "crew": h.get("crew", ""),
                         "rated": values.fmt(res.rated_flow, "flow", system),
                         "target": values.fmt(res.target, "pressure", system),
                         "class": res.class_label})
        return rows
