"""The process that draws the report's figures beside the fit (``calib fit`` starts it first thing).

Kept out of ``calib.calibration``, whose import loads the fit and its numerics (scipy.optimize,
pandas, pint: about 0.9 s): from here the worker is started before any of that is imported, and
loads matplotlib while this process loads the rest. The worker is ``calib/calibration/figures.py``
run as a script (numpy and matplotlib only); the drawing itself is that module's ``draw``.

Lanes: where ``os.fork`` exists and this process may use two or more cores, the worker forks a
second lane once matplotlib is loaded; the hydrant curves (the largest figure, known last) go to it,
the other figures to the first, so the curves are not queued behind them. Each lane is a pipe pair;
answers come back on the lane's own pipe (a large pickle written by two processes to one pipe could
interleave). One lane otherwise (Windows, the Android build, one core): the same figures, in turn.
"""

from __future__ import annotations

import os
import pickle
import signal
import subprocess
import sys
import threading
from pathlib import Path

#: The figure drawn in the second lane where there is one (see the module docstring).
SECOND_LANE = ("hydrant curves",)

_SCRIPT = Path(__file__).resolve().parent / "calibration" / "figures.py"


def _cores() -> int:
    try:
        return len(os.sched_getaffinity(0))
    except (AttributeError, OSError):
        return os.cpu_count() or 1


def same_data(a, b) -> bool:
    """True when two figures' data are equal: dicts, lists and tuples item by item, numpy arrays
    by shape and values (NaN equal to NaN), anything else by ``==``."""
    if isinstance(a, dict) or isinstance(b, dict):
        return (isinstance(a, dict) and isinstance(b, dict) and a.keys() == b.keys()
                and all(same_data(a[k], b[k]) for k in a))
    if isinstance(a, (list, tuple)) or isinstance(b, (list, tuple)):
        return (type(a) is type(b) and len(a) == len(b)
                and all(same_data(u, v) for u, v in zip(a, b)))
    if hasattr(a, "shape") or hasattr(b, "shape"):  # numpy arrays (numpy is loaded by then)
        import numpy as np
        a, b = np.asarray(a), np.asarray(b)
        if a.shape != b.shape or a.dtype.kind != b.dtype.kind:
            return False
        return bool(np.array_equal(a, b, equal_nan=a.dtype.kind in "fc"))
    if isinstance(a, float) and isinstance(b, float) and a != a and b != b:
        return True  # both NaN
    return type(a) is type(b) and a == b


class FigureWorker:
    """A Python process that draws figures while this one goes on: ``layout`` each figure as soon
    as its shape is known, ``submit`` its data as soon as that is known, ``result(name)`` when the
    page is written (drawn here if the worker could not). ``start()`` returns None where no process
    can be started; ``close()`` ends it."""

    def __init__(self, proc, lanes):
        self._proc = proc
        self._lanes = lanes  # [(requests file, answers file)], the first the process's stdin/stdout
        self._done: dict[str, tuple[bool, str]] = {}
        self._sent: dict[str, dict] = {}
        # draws asked for and answered per figure: a figure submitted again with other data is
        # waited for until its last draw is answered (a lane answers in the order it is asked)
        self._asked: dict[str, int] = {}
        self._answered: dict[str, int] = {}
        self._gone = [False] * len(lanes)
        self._cond = threading.Condition()
        for i, (_, answers) in enumerate(lanes):
            threading.Thread(target=self._read, args=(i, answers), daemon=True).start()

    @classmethod
    def start(cls, lanes: int | None = None) -> FigureWorker | None:
        """Start the worker: ``lanes`` 1 or 2 (default 2 where fork exists and two cores may be used)."""
        if lanes is None:
            lanes = 2 if hasattr(os, "fork") and _cores() >= 2 else 1
        # the script by its path, with this interpreter; -c keeps the script's folder off sys.path
        code = ("import runpy, sys; sys.path.pop(0); "
                "runpy.run_path(sys.argv[1], run_name='__calib_figures__')")
        extra, fds = [], ()
        if lanes > 1:
            (req_r, req_w), (ans_r, ans_w) = os.pipe(), os.pipe()
            extra, fds = [str(req_r), str(ans_w)], (req_r, ans_w)
        try:
            # its own process group: ``close`` ends the forked lane with it
            proc = subprocess.Popen([sys.executable, "-c", code, str(_SCRIPT), *extra],
                                    stdin=subprocess.PIPE, stdout=subprocess.PIPE,
                                    stderr=subprocess.DEVNULL, pass_fds=fds,
                                    start_new_session=hasattr(os, "killpg"))
        except OSError:
            if fds:
                for fd in (req_r, req_w, ans_r, ans_w):
                    os.close(fd)
            return None
        pipes = [(proc.stdin, proc.stdout)]
        if fds:
            os.close(req_r)
            os.close(ans_w)
            pipes.append((os.fdopen(req_w, "wb"), os.fdopen(ans_r, "rb")))
        return cls(proc, pipes)

    def _lane(self, name: str) -> int:
        return 1 if name in SECOND_LANE and len(self._lanes) > 1 else 0

    def _read(self, lane: int, answers):
        while True:
            try:
                name, ok, value = pickle.load(answers)
            except Exception:  # the lane ended (or broke): whatever is missing is drawn here
                break
            with self._cond:
                self._done[name] = (ok, value)
                self._answered[name] = self._answered.get(name, 0) + 1
                self._cond.notify_all()
        answers.close()
        with self._cond:
            self._gone[lane] = True
            self._cond.notify_all()

    def _send(self, name: str, message) -> None:
        requests = self._lanes[self._lane(name)][0]
        try:
            pickle.dump(message, requests, protocol=pickle.HIGHEST_PROTOCOL)
            requests.flush()
        except (OSError, ValueError):
            pass  # drawn here in result()

    def layout(self, name: str, key=None) -> None:
        """Have figure ``name``'s empty canvas made now (``figures.LAYOUTS``; ``key``: its
        ``figures.layout_key``), before its data is known."""
        self._send(name, ("layout", name, key))

    def submit_part(self, name: str, part) -> None:
        """A part of figure ``name`` known before the rest (a hydrant-curve panel, ``(k, panel,
        flow unit, pressure unit)``), rendered there at once; ``submit`` still sends the whole."""
        self._send(name, ("part", name, part))

    def submit(self, name: str, data: dict) -> None:
        """Have figure ``name`` drawn from ``data``; the same data submitted again is not drawn
        again (``same_data``: e.g. the readings' figures, submitted as soon as the fit knows them
        and again with the report's other figures)."""
        if name in self._sent and same_data(self._sent[name], data):
            return
        self._sent[name] = data
        with self._cond:
            self._asked[name] = self._asked.get(name, 0) + 1
        self._send(name, ("draw", name, data))

    def result(self, name: str) -> str:
        lane = self._lane(name)
        with self._cond:
            self._cond.wait_for(lambda: self._answered.get(name, 0) >= self._asked.get(name, 0)
                                or self._gone[lane])
            ok, value = (self._done.get(name, (False, ""))
                         if self._answered.get(name, 0) >= self._asked.get(name, 0) else (False, ""))
        if ok:
            return value
        from calib.calibration.figures import draw
        return draw(name, self._sent[name])

    def close(self) -> None:
        """End the worker: at once when a figure is still wanted (the command failed), else when
        its lanes have read the end of their input."""
        with self._cond:
            waiting = any(self._answered.get(name, 0) < n for name, n in self._asked.items()) \
                or not self._sent
        for requests, _ in self._lanes:
            try:
                requests.close()
            except OSError:
                pass
        if waiting:
            self._kill()
        try:
            self._proc.wait(timeout=5)
        except subprocess.TimeoutExpired:
            self._kill()
            self._proc.wait()

    def _kill(self) -> None:
        try:
            if hasattr(os, "killpg"):
                os.killpg(self._proc.pid, signal.SIGKILL)  # both lanes
            else:
                self._proc.kill()
        except OSError:
            self._proc.kill()
