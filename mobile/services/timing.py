"""The flow timer: when the flowing hydrant was opened and closed, and how long it flowed.

Times are the device clock in UTC (ISO 8601, seconds), saved in the test's set-up at the tap, so a
crash loses nothing. The duration goes to the export (``tests.csv`` and the JSON). Plain Python.
"""

from __future__ import annotations

from datetime import datetime, timezone


def now() -> str:
    return datetime.now(timezone.utc).replace(microsecond=0).isoformat()


def duration(header: dict) -> float | None:
    """Seconds from opening to closing, None until both taps were made."""
    start, stop = header.get("flow_started_at"), header.get("flow_stopped_at")
    if not start or not stop:
        return None
    return (datetime.fromisoformat(stop) - datetime.fromisoformat(start)).total_seconds()


def running(header: dict) -> bool:
    return bool(header.get("flow_started_at")) and not header.get("flow_stopped_at")


def elapsed(header: dict, at: str | None = None) -> float | None:
    """Seconds the hydrant has flowed so far (or flowed, once stopped); None before the start."""
    start = header.get("flow_started_at")
    if not start:
        return None
    end = header.get("flow_stopped_at") or at or now()
    return (datetime.fromisoformat(end) - datetime.fromisoformat(start)).total_seconds()


def clock(seconds: float | None) -> str:
    """'4:05' (minutes:seconds), '-' when None."""
    if seconds is None:
        return "-"
    s = max(0, int(round(seconds)))
    return f"{s // 60}:{s % 60:02d}"


def timer_text(header: dict) -> str:
    """One line for the readings screen."""
    if not header.get("flow_started_at"):
        return "Flow timer: tap START FLOW when the hydrant is open"
    opened = header["flow_started_at"][11:19]
    if running(header):
        return f"Flowing since {opened} UTC: {clock(elapsed(header))}. Tap STOP FLOW when it is closed"
    return (f"Flowed {clock(duration(header))} (opened {opened}, closed "
            f"{header['flow_stopped_at'][11:19]} UTC). Re-read the static now it is closed")
