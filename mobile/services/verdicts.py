"""The on-site model check's verdict, kept with the test's revision it judged.

A verdict is saved with the sequence number of the newest reading it saw; as soon as a reading is
entered after it, it is out of date and the results screen stops showing it (the export still lists
every verdict, with its time, the revision and the model it used). Plain Python, no Kivy.
"""

from __future__ import annotations

import dataclasses


def stamp(service, tid: str) -> tuple[int, int]:
    """(revision, newest reading seq) of ``tid`` now: taken when a check starts."""
    rev = service.store.test(tid).current_revision
    return rev, service.store.last_seq(tid, rev)


def to_record(result, model: str) -> dict:
    """A check result (``mobile.services.check.CheckResult``) as a JSON-ready dict, SI values."""
    gauges = []
    for g in getattr(result, "gauges", []) or []:
        row = dataclasses.asdict(g) if dataclasses.is_dataclass(g) else dict(vars(g))
        row["suspect"] = bool(getattr(g, "suspect", row.get("advice")))
        gauges.append(row)
    return {"ran": bool(result.ok), "message": str(result.message), "model": model,
            "suspect": [g["node"] for g in gauges if g["suspect"]], "gauges": gauges}


def model_name(area) -> str:
    """Which model a check used: the area, the network's name and where it was read from."""
    net = area.network
    name = getattr(net, "name", "") if net is not None else ""
    return f"{area.name} ({name}{', ' + area.source if area.source else ''})"


def save(service, tid: str, result, at: tuple[int, int]):
    """Keep ``result`` with the revision and reading stamp ``at`` it was computed from.

    A check that could not run (no network, readings missing) is not a verdict: not kept.
    """
    from mobile.services.session import Outcome  # the service's result type

    if not result.ok:
        return Outcome(False, result.message)
    revision, last_seq = at
    try:
        service.store.add_check(tid, revision, last_seq, to_record(result, model_name(service.area)))
    except Exception as exc:  # noqa: BLE001 - a StoreError: the verdict is shown, not kept
        return Outcome(False, f"The verdict is shown but NOT SAVED: {exc}")
    return Outcome(True, "Verdict saved with the test")


def current(service, tid: str, revision: int | None = None) -> dict | None:
    """The newest verdict on ``revision`` (default: current) that no later reading has outdated."""
    revision = revision or service.store.test(tid).current_revision
    now = service.store.last_seq(tid, revision)
    kept = [c for c in service.store.checks(tid) if c["revision"] == revision]
    if not kept or kept[-1]["last_seq"] != now:
        return None
    return kept[-1]


def text(check: dict | None) -> str:
    """The verdict for the results screen: when, which model, and what to do ('' without one)."""
    if not check:
        return ""
    v = check["verdict"]
    when = check["created_at"][11:16]
    model = v["model"].split(" (")[0]  # the area's name; the export keeps where it was read from
    if not v["suspect"]:
        return f"MODEL CHECK {when} UTC (model {model}): {v['message']}"
    advice = [f"{g['node']}: {a}" for g in v["gauges"] for a in g.get("advice", [])]
    return (f"MODEL CHECK {when} UTC (model {model}): SUSPECT READING at "
            f"{', '.join(v['suspect'])}.\n" + "\n".join(advice))


def all_checks(service, tid: str) -> list[dict]:
    """Every verdict of the test for the export, each marked whether it is still in force."""
    out = []
    for c in service.store.checks(tid):
        in_force = c["last_seq"] == service.store.last_seq(tid, c["revision"])
        out.append({**c, "in_force": in_force})
    return out
