"""The fuzz suite's oracle: what a run on malformed input may do, a per-case time bound, and counts.

Classes (issue 9): a malformed file, folder, option or typed value is **refused well** (exit 2, or
``InputError`` for the library and the app) with a message naming the file, row, id, field or option;
never a traceback (an exception other than ours), never a hang, never a silent reading. A run that
is accepted must have given back plausible numbers.

The time bound per case is twofold: ``signal.setitimer`` interrupts a hang in Python code with
``Hang``; ``faulthandler.dump_traceback_later(exit=True)`` ends the whole run with the stacks printed
if a case hangs inside C code (a huge integer power, say), where no signal handler can run.
"""

from __future__ import annotations

import contextlib
import faulthandler
import io
import os
import re
import signal
import sys
import time
from collections import Counter

from hypothesis import HealthCheck, settings

from calib.cli import main

#: Seconds a single case may take; far above what any case needs on an idle machine (below 1 s),
#: so a shared, loaded machine does not make the suite flaky.
CASE_SECONDS = float(os.environ.get("CALIB_FUZZ_CASE_SECONDS", "20"))
#: Scale of the number of cases: 1 in the test suite, e.g. 20 for a nightly run (README).
SCALE = float(os.environ.get("CALIB_FUZZ_SCALE", "1"))

#: What the suite saw, by target and outcome; printed at the end of the run (conftest.py).
COUNTS: Counter = Counter()

# a message names a file, a row, an id, a field or an option
_NAMES = re.compile(r"(\.csv|\.geojson|\.json|row \d+|id '|field '|--[a-z])")


def fuzz_settings(n: int) -> settings:
    """Hypothesis settings for ``n`` cases (times ``SCALE``), no deadline (the bound is ours)."""
    return settings(max_examples=max(1, int(n * SCALE)), deadline=None, database=None,
                    suppress_health_check=[HealthCheck.function_scoped_fixture,
                                           HealthCheck.too_slow, HealthCheck.data_too_large])


class Hang(Exception):
    """A case took longer than ``CASE_SECONDS``."""


@contextlib.contextmanager
def time_bound(seconds: float = CASE_SECONDS):
    """Fail a case that runs longer than ``seconds`` (Python code: ``Hang``; C code: exit)."""
    def on_alarm(signum, frame):
        raise Hang(f"the case ran longer than {seconds} s")

    previous = signal.signal(signal.SIGALRM, on_alarm)
    signal.setitimer(signal.ITIMER_REAL, seconds)
    faulthandler.dump_traceback_later(2 * seconds + 5, exit=True)
    started = time.monotonic()
    try:
        yield
    finally:
        signal.setitimer(signal.ITIMER_REAL, 0)
        signal.signal(signal.SIGALRM, previous)
        faulthandler.cancel_dump_traceback_later()
    assert time.monotonic() - started < seconds


def run_cli(argv: list[str]) -> tuple[int, str, str]:
    """``main(argv)`` in-process within the time bound; (exit code, stdout, stderr).

    Any exception escaping ``main`` is a crash (a traceback for the user) and fails the case.
    """
    out, err = io.StringIO(), io.StringIO()
    with time_bound(), contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = main([str(a) for a in argv])
    return code, out.getvalue(), err.getvalue()


def refused_well(code: int, err: str, target: str) -> bool:
    """Check a CLI outcome: exit 2 must name what is wrong; 0 and 1 are returned for the caller.

    Returns True for a refusal (exit 2). Counts the outcome under ``target``.
    """
    assert code in (0, 1, 2), f"exit code {code}: {err[-500:]}"
    assert "Traceback" not in err
    if code == 2:
        assert "\nerror: " in "\n" + err or "usage:" in err, err[-500:]  # warnings may come first
        if "usage:" not in err:  # argparse's own refusals name the option in its words
            assert _NAMES.search(err), f"the message names no file, row, id, field or option: {err}"
        COUNTS[(target, "refused well")] += 1
        return True
    if code == 1:
        assert "\nerror: " in "\n" + err, err[-500:]
        COUNTS[(target, "computation refused (exit 1)")] += 1
        return False
    COUNTS[(target, "accepted")] += 1
    return False


def library_refusal(exc: BaseException, target: str) -> None:
    """An ``InputError`` from a reader: its text must name a file, row, id or field."""
    text = str(exc)
    assert text and _NAMES.search(text), f"the message names nothing: {text}"
    COUNTS[(target, "refused well")] += 1


def names_something(text: str) -> bool:
    """True when a message names a file, a row, an id, a field or an option."""
    return bool(_NAMES.search(text))


def report() -> list[str]:
    """Lines for the terminal summary: cases per target and outcome."""
    targets = sorted({t for t, _ in COUNTS})
    lines = []
    for t in targets:
        total = sum(n for (tt, _), n in COUNTS.items() if tt == t)
        parts = ", ".join(f"{o} {n}" for (tt, o), n in sorted(COUNTS.items()) if tt == t)
        lines.append(f"{t}: {total} cases ({parts})")
    total = sum(COUNTS.values())
    refused = sum(n for (_, o), n in COUNTS.items() if o == "refused well")
    lines.append(f"all: {total} cases, {refused} refused well, 0 crashes, 0 hangs (a crash or a "
                 "hang fails the run)")
    return lines


def is_plausible_text(text: str) -> bool:
    """An independent, simpler reading of a value that may be accepted: ASCII digits with an optional
    point and exponent, an optional unit of letters, no comma, no operator, nothing else."""
    return re.fullmatch(r"\s*[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?\s*([A-Za-z_][A-Za-z_/]*(\*\*[1-3])?"
                        r"(/[A-Za-z_]+)?)?\s*", text, flags=re.ASCII) is not None
