"""The worker helper every slow action of the app goes through (common practice: a worker must
always report back, or a screen waits forever)."""

import threading

from mobile.services import background


def _run(work):
    got, done = [], threading.Event()
    thread = background.start(work, lambda r: (got.append((r, threading.current_thread())), done.set()),
                              lambda exc: f"failed: {exc}", name="t-worker")
    assert done.wait(10)
    thread.join(10)
    return got[0], thread


def test_result_is_handed_back_from_the_worker_thread():
    (result, where), thread = _run(lambda: 6 * 7)
    assert result == 42
    assert where is thread and where is not threading.main_thread()


def test_an_exception_becomes_the_on_error_result():
    def boom():
        raise ValueError("no such network")
    (result, _), _ = _run(boom)
    assert result == "failed: no such network"
