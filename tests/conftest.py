"""Suite-wide set-up: a virtual display for the field app's real-window tests.

When no X display is set, start Xvfb for the whole run (and its subprocesses) so that the README's test
command works the same on a desktop, on a headless machine with Xvfb installed, and in CI. Window tests
fail (never skip) when no display can be had.
"""

import os
import shutil
import subprocess
import time

_xvfb = None


def pytest_configure(config):
    global _xvfb
    os.environ.setdefault("KIVY_NO_ARGS", "1")
    os.environ.setdefault("KIVY_NO_CONSOLELOG", "1")
    if os.environ.get("DISPLAY") or not shutil.which("Xvfb"):
        return
    for number in range(99, 140):
        if os.path.exists(f"/tmp/.X{number}-lock"):
            continue
        proc = subprocess.Popen(["Xvfb", f":{number}", "-screen", "0", "1280x800x24", "-nolisten", "tcp"],
                                stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
        for _ in range(50):
            if os.path.exists(f"/tmp/.X11-unix/X{number}") or proc.poll() is not None:
                break
            time.sleep(0.1)
        if proc.poll() is None:
            _xvfb = proc
            os.environ["DISPLAY"] = f":{number}"
            return


def pytest_unconfigure(config):
    if _xvfb is not None:
        _xvfb.terminate()
        _xvfb.wait(timeout=10)
