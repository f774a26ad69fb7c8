"""The report's figures drawn from plain data, in this process or in a worker process.

``draw(name, data)`` turns one figure's data (numbers already in display units, labels as text; built
by ``calib.calibration.report``) into a base64 PNG with matplotlib's Agg canvas (no pyplot, no
display), each figure drawn once. ``FigureWorker`` runs the same ``draw`` in a separate Python
process, started before the fit: importing matplotlib and its fonts (about 1.5 s) and drawing the
PNGs (1-3 s) then run beside the fit and the report's solves instead of after them, on a second core.
The worker is this file run as a script: it imports numpy and matplotlib only, not ``calib``.
Anything that goes wrong in the worker (no worker, a crash, an error) is drawn again here, so the
report is the same with or without it.

Not here: what the figures show (``report.py`` builds their data) or any computation on the fit.
"""

from __future__ import annotations

import base64
import io
import pickle
import subprocess
import sys
import threading

import numpy as np


# --- drawing ------------------------------------------------------------------------------------
def _n185_forward(q):
    return np.power(np.clip(q, 0.0, None), 1.85)


def _n185_inverse(x):
    return np.power(np.clip(x, 0.0, None), 1.0 / 1.85)


def _flow_ticks(q_max: float, most: int = 4) -> np.ndarray:
    """Round flow ticks up to ``q_max``, without 0 (the N^1.85 axis crowds the low ones together)."""
    step = 10.0 ** np.floor(np.log10(max(q_max, 1e-12) / most))
    for m in (1.0, 2.0, 5.0, 10.0):
        if q_max / (m * step) <= most:
            step *= m
            break
    return np.arange(step, q_max * (1 + 1e-9), step)


def _png(fig) -> str:
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=100)  # one draw: the layout is made during it
    return base64.b64encode(buf.getvalue()).decode("ascii")


def _figure(figsize, rows: int = 1, cols: int = 1, margins: dict | None = None, **kw):
    """A figure outside pyplot (nothing kept in a global registry): constrained layout, or fixed
    ``margins`` (``subplots_adjust``) where that layout costs more than the draw (many panels)."""
    from matplotlib.figure import Figure
    fig = Figure(figsize=figsize, layout=None if margins else "constrained")
    if margins:
        fig.subplots_adjust(**margins)
    return fig, fig.subplots(rows, cols, **kw)


def _title(ax, text, **kw):
    # y given: the title sits just above the axes (none of these has an axis on top), and
    # matplotlib skips its search for overlapping tick labels (a third of the curves' draw)
    ax.set_title(text, y=1.0, **kw)


def _observed_vs_simulated(d):
    fig, ax = _figure((5.6, 5.2))
    sim, obs, kind, flagged = d["sim"], d["obs"], d["kind"], d["flagged"]
    for k, marker in (("static", "s"), ("residual", "o")):
        sel = (kind == k) & ~flagged
        ax.scatter(sim[sel], obs[sel], marker=marker, s=28, label=f"{k} reading", alpha=0.8)
    if flagged.any():
        ax.scatter(sim[flagged], obs[flagged], marker="x", s=70, color="black", label="flagged")
    lo, hi = float(min(obs.min(), sim.min())), float(max(obs.max(), sim.max()))
    pad = 0.04 * (hi - lo + 1e-9)
    lo, hi = lo - pad, hi + pad
    band, pu = d["band"], d["pu"]
    ax.plot([lo, hi], [lo, hi], color="grey", lw=1, label="observed = simulated")
    ax.fill_between([lo, hi], [lo - band, hi - band], [lo + band, hi + band], color="grey",
                    alpha=0.15, lw=0, label=f"+/-{band:.3g} {pu}")
    ax.set_xlim(lo, hi)
    ax.set_ylim(lo, hi)
    ax.set_aspect("equal")
    ax.set_xlabel(f"simulated pressure, calibrated model [{pu}]")
    ax.set_ylabel(f"observed pressure at the gauge [{pu}]")
    _title(ax, "Observed against simulated, every reading")
    ax.legend(fontsize=8, loc="upper left")
    return _png(fig)


def _residuals_by_test(d):
    fig, ax = _figure((7.4, 4.0))
    xs, z, kind, flagged, thr = d["x"], d["z"], d["kind"], d["flagged"], d["threshold"]
    ax.axhline(0, color="grey", lw=1)
    for sgn in (-1, 1):
        ax.axhline(sgn * thr, color="grey", lw=0.8, ls="--",
                   label=f"flag cut-off +/-{thr:.2f}" if sgn > 0 else None)
    for k, colour in (("static", "tab:blue"), ("residual", "tab:orange")):
        sel = (kind == k) & ~flagged
        ax.scatter(xs[sel], z[sel], s=26, color=colour, label=f"{k} reading")
    if flagged.any():
        ax.scatter(xs[flagged], z[flagged], marker="x", s=70, color="black", label="flagged")
    ids = d["test_ids"]
    many = len(ids) > 14
    ax.set_xticks(range(len(ids)), ids, rotation=60 if many else 0, fontsize=8)
    ax.set_xlabel("test")
    ax.set_ylabel("(observed - simulated) / sigma [-]")
    _title(ax, "Standardized residuals by test")
    ax.legend(fontsize=7, ncol=4, loc="upper center", bbox_to_anchor=(0.5, -0.16), frameon=False)
    return _png(fig)


def _c_by_group(d):
    fig, ax = _figure((8.6, 4.4))
    c, lo_c, hi_c, det, model_c = d["c"], d["low"], d["high"], d["determined"], d["model_c"]
    g = np.arange(len(c))
    c_lo, c_hi = d["c_bounds"]
    top = max(c_hi, float(np.nanmax(hi_c)), float(np.nanmax(model_c)))
    bottom = min(c_lo, float(np.nanmin(lo_c)), float(np.nanmin(model_c)))
    prior = d["prior"]  # (c, spread) or None
    if prior is not None:
        top = max(top, float(np.nanmax(prior[0] + 1.96 * prior[1])))
        bottom = min(bottom, float(np.nanmin(prior[0] - 1.96 * prior[1])))
    ylo, yhi = bottom - 10.0, top + 10.0
    # outside the C bounds: shaded, so an interval that reaches a bound is seen as cut by it
    ax.axhspan(ylo, c_lo, color="grey", alpha=0.15, lw=0, label=f"outside C bounds {c_lo:g}-{c_hi:g}")
    ax.axhspan(c_hi, yhi, color="grey", alpha=0.15, lw=0)
    if det.any():
        ax.errorbar(g[det], c[det], yerr=[(c - lo_c)[det], (hi_c - c)[det]],
                    fmt="o", capsize=5, ms=7, color="tab:blue", label="fitted C, 95 % interval")
    if (~det).any():
        # no fitted value: only the range the tests leave open (up to the C bounds)
        ax.vlines(g[~det], lo_c[~det], hi_c[~det], colors="tab:blue", linestyles=":", lw=2,
                  label="undetermined: range the tests allow")
    for gi in g:
        ax.annotate(f"{c[gi]:.0f}" if det[gi] else "undetermined", (gi, hi_c[gi]),
                    xytext=(0, 4), textcoords="offset points", ha="center", va="bottom", fontsize=8,
                    color="tab:blue")  # above its interval
    if prior is not None:
        ax.errorbar(g + 0.25, prior[0], yerr=1.96 * prior[1], fmt="s", mfc="none",
                    capsize=3, color="grey", label="prior, +/-1.96 sd")
    ax.scatter(g - 0.25, model_c, marker="_", s=300, lw=2, color="tab:red", label="model C before")
    ax.set_xticks(g, d["names"], fontsize=9)
    ax.set_xlim(-0.6, len(g) - 0.4)
    ax.set_ylabel("Hazen-Williams C [-]")
    ax.set_ylim(ylo, yhi)
    ax.grid(axis="y", color="#ddd", lw=0.6)
    ax.legend(fontsize=8, ncol=4, loc="upper center", bbox_to_anchor=(0.5, -0.08), frameon=False)
    _title(ax, "C by group: fitted, prior, model before, and the C bounds")
    return _png(fig)


def _hydrant_curves(d):
    panels, cols = d["panels"], 4
    rows = int(np.ceil(len(panels) / cols))
    height = 2.9 * rows
    fig, axes = _figure((11, height), rows, cols, squeeze=False, margins=dict(
        left=0.06, right=0.99, bottom=0.5 / height, top=1 - 0.7 / height, wspace=0.35,
        hspace=0.45))
    fu, pu = d["fu"], d["pu"]
    for k, panel in enumerate(panels):
        ax = axes[k // cols][k % cols]
        if panel is None:
            ax.set_axis_off()
            continue
        ax.plot(panel["flow"], panel["pressure"], color="tab:blue")
        for q_obs, p_obs, flagged in panel["readings"]:
            ax.scatter([q_obs], [p_obs], color="black" if flagged else "tab:orange",
                       marker="x" if flagged else "o", zorder=3)
        ax.axvline(panel["tested"], color="#bbb", lw=0.8, ls=":")
        _title(ax, panel["title"], fontsize=8)
        # The trade's N^1.85 axis (NFPA 291): a supply curve is close to a straight line on it.
        ax.set_xscale("function", functions=(_n185_forward, _n185_inverse))
        ax.set_xlim(left=0.0)
        ax.set_xticks(_flow_ticks(panel["flow"][-1]))
        ax.tick_params(labelsize=7)
        ax.set_xlabel(f"total test flow [{fu}], N^1.85 scale", fontsize=7)
        ax.set_ylabel(f"pressure at gauge [{pu}]", fontsize=7)
    for k in range(len(panels), rows * cols):
        axes[k // cols][k % cols].set_axis_off()
    fig.suptitle("Hydrant curves at each test's first gauge: calibrated model (line), static and "
                 "residual readings (dots; x flagged), flow tested (dotted)", fontsize=10)
    return _png(fig)


FIGURES = {"observed vs simulated": _observed_vs_simulated, "residuals by test": _residuals_by_test,
           "C by group": _c_by_group, "hydrant curves": _hydrant_curves}


def draw(name: str, data: dict) -> str:
    """Figure ``name`` (a key of ``FIGURES``) from its ``data`` as a base64 PNG."""
    return FIGURES[name](data)


# --- the worker process ---------------------------------------------------------------------------
class FigureWorker:
    """A Python process that draws figures while this one goes on: ``submit`` each figure's data as
    soon as it is known, ``result(name)`` when the page is written (drawn here if the worker could
    not). ``start()`` returns None where no process can be started; ``close()`` ends it."""

    def __init__(self, proc):
        self._proc = proc
        self._done: dict[str, tuple[bool, str]] = {}
        self._sent: dict[str, dict] = {}
        self._cond = threading.Condition()
        self._reader = threading.Thread(target=self._read, daemon=True)
        self._reader.start()

    @classmethod
    def start(cls) -> FigureWorker | None:
        # the script by its path, with this interpreter; -c keeps the script's folder off sys.path
        code = ("import runpy, sys; sys.path.pop(0); "
                "runpy.run_path(sys.argv[1], run_name='__calib_figures__')")
        try:
            proc = subprocess.Popen([sys.executable, "-c", code, __file__], stdin=subprocess.PIPE,
                                    stdout=subprocess.PIPE, stderr=subprocess.DEVNULL)
        except OSError:
            return None
        return cls(proc)

    def _read(self):
        out = self._proc.stdout
        while True:
            try:
                name, ok, value = pickle.load(out)
            except Exception:  # the worker ended (or broke): whatever is missing is drawn here
                break
            with self._cond:
                self._done[name] = (ok, value)
                self._cond.notify_all()
        with self._cond:
            self._proc_gone = True
            self._cond.notify_all()

    _proc_gone = False

    def submit(self, name: str, data: dict) -> None:
        self._sent[name] = data
        try:
            pickle.dump((name, data), self._proc.stdin, protocol=pickle.HIGHEST_PROTOCOL)
            self._proc.stdin.flush()
        except (OSError, ValueError):
            pass  # drawn here in result()

    def result(self, name: str) -> str:
        with self._cond:
            self._cond.wait_for(lambda: name in self._done or self._proc_gone)
            ok, value = self._done.get(name, (False, ""))
        return value if ok else draw(name, self._sent[name])

    def close(self) -> None:
        """End the worker: at once when a figure is still wanted (the command failed), else when
        it has read the end of its input."""
        with self._cond:
            waiting = any(name not in self._done for name in self._sent) or not self._sent
        try:
            self._proc.stdin.close()
        except OSError:
            pass
        if waiting:
            self._proc.kill()
        try:
            self._proc.wait(timeout=5)
        except subprocess.TimeoutExpired:
            self._proc.kill()
            self._proc.wait()


def _serve(stdin, stdout) -> None:
    """The worker's loop: read ``(name, data)`` pickles until the input closes, answer each with
    ``(name, ok, png or error text)``."""
    import matplotlib
    matplotlib.use("Agg")
    from matplotlib.figure import Figure  # noqa: F401  (loaded before the first request)
    # the fonts are read on the first text drawn: do it while the fit runs
    fig, ax = _figure((1, 1))
    ax.set_title("0")
    _png(fig)
    while True:
        try:
            name, data = pickle.load(stdin)
        except EOFError:
            return
        try:
            answer = (name, True, draw(name, data))
        except Exception as exc:  # the parent draws it again and sees the error itself
            answer = (name, False, f"{type(exc).__name__}: {exc}")
        pickle.dump(answer, stdout, protocol=pickle.HIGHEST_PROTOCOL)
        stdout.flush()


if __name__ == "__calib_figures__":
    _serve(sys.stdin.buffer, sys.stdout.buffer)
    # every answer is flushed: end without the interpreter's teardown of matplotlib's objects
    # (0.2-0.4 s that ``close`` would wait for; 0.02 s this way)
    import os
    os._exit(0)
