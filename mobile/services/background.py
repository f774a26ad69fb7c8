"""One way to run slow work (a network solve, a network file read, a curve drawing) off the UI thread.

Plain Python, no Kivy: the caller passes an ``on_done`` that is safe for its UI (the screens wrap
theirs in ``kivy.clock.mainthread``). Whatever the work raises is turned into a result by
``on_error``, so a worker always reports back and a screen never waits forever.
"""

from __future__ import annotations

import threading


def start(work, on_done, on_error, name: str) -> threading.Thread:
    """Run ``work()`` in a daemon thread, then call ``on_done(result)`` there.

    ``on_error(exc)`` gives the result to report when ``work`` raises.
    """
    def body():
        try:
            result = work()
        except Exception as exc:  # noqa: BLE001 - a worker must always report back
            result = on_error(exc)
        on_done(result)

    thread = threading.Thread(target=body, name=name, daemon=True)
    thread.start()
    return thread
