"""``calib fit`` hands the report's figures to its worker while the fit's work after the refits
runs (issue 14): the hydrant curves' panels as they are solved (the report's solves run with the
interval checks and the leave-one-out refits, first), the readings' two figures before the
interval checks, C by group once they are done; every figure inside the fit call, each drawn
once, and the page written is complete."""

from pathlib import Path

import calib.calibration as calibration
from calib.calibration.figures import FIGURES
from calib.figure_worker import FigureWorker
from calib.cli import main

ROOT = Path(__file__).resolve().parents[2]
DEMO = ROOT / "field_samples" / "tallowmere"


def test_figures_go_to_the_worker_before_the_leave_one_out_refits(tmp_path, capsys, monkeypatch):
    events = []  # ("stage", name) from the fit's progress, ("submit", figure), ("fit", "end")
    real_fit, real_submit = calibration.fit, FigureWorker.submit

    def fit(*args, progress=None, **kw):
        def progress_seen(n, stage):
            if not events or events[-1] != ("stage", stage):
                events.append(("stage", stage))
            if progress is not None:
                progress(n, stage)
        try:
            return real_fit(*args, progress=progress_seen, **kw)
        finally:
            events.append(("fit", "end"))

    def submit(self, name, data):
        events.append(("submit", name))
        return real_submit(self, name, data)

    real_part = FigureWorker.submit_part

    def submit_part(self, name, part):
        events.append(("part", name))
        return real_part(self, name, part)

    real_send = FigureWorker._send
    drawn = []  # the draws asked of the worker

    def send(self, name, message):
        if message[0] == "draw":
            drawn.append(name)
        return real_send(self, name, message)

    monkeypatch.setattr(calibration, "fit", fit)  # the command looks it up here when it runs
    monkeypatch.setattr(FigureWorker, "submit", submit)
    monkeypatch.setattr(FigureWorker, "submit_part", submit_part)
    monkeypatch.setattr(FigureWorker, "_send", send)
    code = main(["fit", str(DEMO / "network"), str(DEMO / "tests"), "--out", str(tmp_path)])
    err = capsys.readouterr().err
    assert code == 0, err
    submitted = [i for i, (kind, _) in enumerate(events) if kind == "submit"]
    assert {events[i][1] for i in submitted} == set(FIGURES)
    assert sorted(drawn) == sorted(FIGURES)  # each figure drawn once
    assert max(submitted) < events.index(("fit", "end"))  # drawn beside the fit's own work
    checks = [i for i, (kind, name) in enumerate(events)
              if kind == "stage" and name.startswith("interval checks")]
    assert checks, events  # the demo fit checks intervals
    for name in ("observed vs simulated", "residuals by test"):  # final before the checks
        assert events.index(("submit", name)) < min(checks)
    # the curves' panels go out as they are solved, before the intervals are known (C by group)
    parts = [i for i, (kind, name) in enumerate(events) if kind == "part"]
    assert parts and max(parts) < events.index(("submit", "C by group"))
    # one phase line for the work after the refits, the refits' readings named
    assert "interval checks, report data and leave-one-out (2 readings: " in err
    page = (tmp_path / "report.html").read_text()
    assert page.count("data:image/png;base64,") == len(FIGURES)
