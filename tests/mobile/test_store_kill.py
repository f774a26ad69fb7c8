"""Kill the writing process at random moments: no committed reading is lost, the file stays sound.

A writer process commits readings one by one and reports each after ``add_reading`` returned (the
transaction is committed); we SIGKILL it after a random delay, then check that ``PRAGMA
integrity_check`` says ok and that every reading it reported is in the database with its value.
SIGKILL cannot be caught, so the writer gets no chance to tidy up - as with a crash or a flat battery.
All trials share one database, so each trial also reopens whatever the previous kill left.

Most trials fork the writer from this process (cheap: 114 trials in all stay within seconds on a
busy machine); a few start a fresh interpreter (``kill_writer.py``) so kills also land while the
app is starting and migrating the schema.
"""

import os
import random
import select
import signal
import subprocess
import sys
import threading
import time
from pathlib import Path

from mobile.store import Store, StoreError

HERE = Path(__file__).resolve().parent
REPO = HERE.parents[1]
FORK_TRIALS = 110
FRESH_TRIALS = 4


def _parse(lines) -> list[tuple[int, float]]:
    out = []
    for line in lines:
        parts = line.split()
        if len(parts) == 2:  # a line cut by the kill is not a report
            out.append((int(parts[0]), float(parts[1])))
    return out


def _forked_writer(folder: Path, start: int, delay: float,
                   after_first: bool) -> list[tuple[int, float]]:
    """Fork a writer and SIGKILL it ``delay`` s after it starts or, with ``after_first``, after its
    first reported commit (so that a busy machine, slow to open the file, still sees kills land
    among commits)."""
    read_fd, write_fd = os.pipe()
    pid = os.fork()
    if pid == 0:  # child: write until killed; never return into pytest
        try:
            os.close(read_fd)
            store = Store.open(folder)
            try:
                store.create_test("KILL", {"crew": "kill test"})
            except StoreError:
                pass
            i = start
            while True:
                value = 1000.0 + i
                seq = store.add_reading("KILL", f"static@H{i % 7}", value, "psi", str(i))
                os.write(write_fd, f"{seq} {value}\n".encode())
                i += 1
        finally:
            os._exit(1)
    os.close(write_fd)
    chunks = []
    if after_first and select.select([read_fd], [], [], 10.0)[0]:
        data = os.read(read_fd, 65536)
        if data:
            chunks.append(data)
    end = time.monotonic() + delay
    while (left := end - time.monotonic()) > 0:  # keep the pipe drained while waiting
        if select.select([read_fd], [], [], left)[0]:
            data = os.read(read_fd, 65536)
            if not data:
                break
            chunks.append(data)
    os.kill(pid, signal.SIGKILL)
    os.waitpid(pid, 0)
    while data := os.read(read_fd, 65536):
        chunks.append(data)
    os.close(read_fd)
    return _parse(b"".join(chunks).decode().splitlines())


def _fresh_writer(folder: Path, start: int, delay: float) -> list[tuple[int, float]]:
    env = dict(os.environ, PYTHONPATH=str(REPO) + os.pathsep + os.environ.get("PYTHONPATH", ""))
    proc = subprocess.Popen([sys.executable, str(HERE / "kill_writer.py"), str(folder), str(start)],
                            stdout=subprocess.PIPE, stderr=subprocess.DEVNULL, text=True, env=env)
    lines: list[str] = []
    reader = threading.Thread(target=lambda: lines.extend(proc.stdout), daemon=True)
    reader.start()
    time.sleep(delay)
    proc.send_signal(signal.SIGKILL)
    proc.wait()
    reader.join(timeout=10)
    return _parse(lines)


def _check(folder: Path, reported: dict, trial: int) -> None:
    with Store.open(folder) as s:
        assert s.integrity_ok(), f"trial {trial}: integrity_check failed"
        stored = {r.seq: r.si_value for r in s.history("KILL")} if s.has_test("KILL") else {}
    lost = [seq for seq in reported if stored.get(seq) != reported[seq]]
    assert not lost, f"trial {trial}: committed readings lost or changed: {lost[:5]}"


def test_kill_at_random_moments_loses_no_committed_reading(tmp_path):
    rng = random.Random(20261201)
    folder = tmp_path / "data"
    reported: dict[int, float] = {}
    landed = 0
    for trial in range(FRESH_TRIALS + FORK_TRIALS):
        if trial < FRESH_TRIALS:  # kills from interpreter start-up to a few commits in
            got = _fresh_writer(folder, trial * 1_000_000, rng.uniform(0.0, 0.8))
        else:
            got = _forked_writer(folder, trial * 1_000_000, rng.uniform(0.0, 0.03),
                                 after_first=trial % 4 != 0)
        landed += bool(got)
        reported.update(got)
        _check(folder, reported, trial)
    # Most kills must have landed among commits, or the test would prove little.
    assert landed >= FORK_TRIALS // 2, f"only {landed} trials killed the writer mid-stream"
    assert len(reported) > FORK_TRIALS
