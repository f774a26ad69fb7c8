"""Suite-wide set-up: what the field app's real-window tests need, brought by the test command itself.

The README's test command (``python -m pytest -q``, which ``.ci/run`` also calls) must pass on a fresh
Debian or Ubuntu machine with nothing but Python. The window tests need an X display with OpenGL:

- an X display already set (a desktop, ``xvfb-run``): used as it is;
- otherwise Xvfb is started for the whole run (and its subprocesses). When Xvfb or the Mesa libraries
  are missing and the run is root on a machine with apt-get, they are installed first
  (``WINDOW_PACKAGES``; set ``CALIB_TESTS_NO_APT=1`` to forbid it);
- when they cannot be had (not root, no apt-get, no network), a plain message at the start and at the
  end of the run names the packages and the command to install them. The window tests then fail with
  that reason: they are never skipped, so a green run always includes them.
"""

import os
import shutil
import subprocess
import sys
import time
from pathlib import Path

import pytest

#: Debian/Ubuntu packages for the window tests: the X server, OpenGL through Mesa (software
#: rendering under Xvfb), EGL/GLES that Kivy's SDL2 window loads, and mtdev for Kivy's input probe.
WINDOW_PACKAGES = ("xvfb", "xauth", "libgl1", "libgl1-mesa-dri", "libegl1", "libgles2", "libmtdev1")
INSTALL_HINT = "apt-get install --no-install-recommends " + " ".join(WINDOW_PACKAGES)

_xvfb = None
_notes: list[str] = []


def missing_packages(packages=WINDOW_PACKAGES, query=None):
    """Packages of ``packages`` that dpkg does not list as installed; None where dpkg is not there."""
    if query is None:
        if not shutil.which("dpkg-query"):
            return None

        def query(name):
            done = subprocess.run(["dpkg-query", "-W", "-f=${Status}", name],
                                  capture_output=True, text=True)
            return done.returncode == 0 and done.stdout.strip().endswith(" installed")
    return [p for p in packages if not query(p)]


def plan(display: str | None, have_xvfb: bool, missing, is_root: bool, have_apt: bool,
         apt_allowed: bool = True) -> str:
    """What the suite does for a display: ``"use"``, ``"start"``, ``"install"`` then start, or ``"tell"``."""
    if display:
        return "use"
    if have_xvfb and not missing:
        return "start"
    if is_root and have_apt and apt_allowed:
        return "install"
    return "tell"


def _install(packages) -> bool:
    env = dict(os.environ, DEBIAN_FRONTEND="noninteractive")
    print(f"window tests: installing {' '.join(packages)} (apt-get, as root) ...", file=sys.stderr,
          flush=True)
    for cmd in (["apt-get", "update", "-qq"],
                ["apt-get", "install", "-y", "-qq", "--no-install-recommends", *packages]):
        try:
            done = subprocess.run(cmd, env=env, capture_output=True, text=True, timeout=900)
        except (OSError, subprocess.TimeoutExpired) as exc:
            _notes.append(f"'{' '.join(cmd)}' did not run: {exc}")
            return False
        if done.returncode != 0:
            _notes.append(f"'{' '.join(cmd)}' failed ({done.returncode}): "
                          f"{(done.stderr or done.stdout).strip()[-400:]}")
            return False
    return True


def _start_xvfb():
    global _xvfb
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
    _notes.append("Xvfb is installed but did not start on any display :99-:139")


def pytest_configure(config):
    os.environ.setdefault("KIVY_NO_ARGS", "1")
    os.environ.setdefault("KIVY_NO_CONSOLELOG", "1")
    if os.environ.get("DISPLAY"):
        return
    missing = missing_packages()
    if missing is None:  # no dpkg: not Debian-like; Xvfb on the PATH is all we can check
        missing = [] if shutil.which("Xvfb") else ["xvfb"]
    action = plan(None, bool(shutil.which("Xvfb")), missing,
                  is_root=hasattr(os, "geteuid") and os.geteuid() == 0,
                  have_apt=bool(shutil.which("apt-get")),
                  apt_allowed=os.environ.get("CALIB_TESTS_NO_APT", "") in ("", "0"))
    if action == "install" and _install(missing):
        action = "start"
    if action == "start" and shutil.which("Xvfb"):
        _start_xvfb()
    if not os.environ.get("DISPLAY"):
        _notes.append("no X display: the field app's window tests will FAIL (they are never skipped). "
                      f"Missing: {' '.join(missing) or 'a working Xvfb'}. As root on Debian/Ubuntu run: "
                      f"{INSTALL_HINT}; or run the suite on a desktop or under xvfb-run.")
        print("window tests: " + _notes[-1], file=sys.stderr, flush=True)


def pytest_terminal_summary(terminalreporter):
    if _notes:
        terminalreporter.write_sep("-", "window tests")
        for note in _notes:
            terminalreporter.write_line(note)


def pytest_unconfigure(config):
    if _xvfb is not None:
        _xvfb.terminate()
        _xvfb.wait(timeout=10)


#: The fictional demo town and its day of flow tests (field_samples/).
DEMO_TOWN = Path(__file__).resolve().parents[1] / "field_samples" / "tallowmere"


@pytest.fixture(scope="session")
def demo_day():
    """The demo town's network and its day of tests, read once per run: ``(network, tests)``.
    Read-only for the tests that use it."""
    from calib.calibration import read_tests
    from calib.network.io import read_network
    net = read_network(DEMO_TOWN / "network")
    return net, read_tests(DEMO_TOWN / "tests", net)
