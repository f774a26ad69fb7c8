"""The report's figures drawn in a worker process are the figures drawn here, and a worker that is
gone or fails costs nothing but time (the figure is drawn here)."""

import base64

import numpy as np
import pytest

from calib.calibration import figures


def _data():
    rng = np.random.default_rng(1)
    sim = rng.uniform(40, 80, 12)
    return dict(sim=sim, obs=sim + rng.normal(0, 1, 12), kind=np.array(["static", "residual"] * 6),
                flagged=np.arange(12) == 5, pu="psi", band=2.0)


def _is_png(text):
    return base64.b64decode(text)[:8] == b"\x89PNG\r\n\x1a\n"


def test_worker_draws_the_same_png_as_this_process():
    data = _data()
    here = figures.draw("observed vs simulated", data)
    worker = figures.FigureWorker.start()
    assert worker is not None
    try:
        worker.submit("observed vs simulated", data)
        there = worker.result("observed vs simulated")
        assert worker._done["observed vs simulated"][0]  # drawn by the worker, not redrawn here
    finally:
        worker.close()
    assert _is_png(there) and there == here
    assert worker._proc.returncode == 0  # ended by the end of its input


def test_an_error_in_the_worker_is_raised_here_and_a_dead_worker_leaves_the_figure_here():
    data = _data()
    worker = figures.FigureWorker.start()
    try:
        # an error there is answered as text; the figure is drawn again here, where it raises
        worker.submit("observed vs simulated", dict(data, sim=None))
        with pytest.raises(TypeError):
            worker.result("observed vs simulated")
        assert worker._done["observed vs simulated"][0] is False
        worker._proc.kill()  # gone before answering: the figure is drawn here
        worker._proc.wait()
        worker.submit("residuals by test", dict(x=np.arange(3.0), z=np.zeros(3),
                                                kind=np.array(["static"] * 3),
                                                flagged=np.zeros(3, bool), threshold=3.0,
                                                test_ids=["T1", "T2", "T3"]))
        assert _is_png(worker.result("residuals by test"))
    finally:
        worker.close()
