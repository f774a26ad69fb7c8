"""The report's figures drawn from plain data, in this process or in a worker process.

``draw(name, data)`` turns one figure's data (numbers already in display units, labels as text;
built by ``calib.calibration.report``) into a base64 PNG with matplotlib's Agg canvas (no pyplot, no
display), each figure drawn once. ``calib.figure_worker.FigureWorker`` (outside this package, so
that ``calib fit`` starts it before importing the fit's numerics) runs the same ``draw`` in a
separate Python process, started first thing by ``calib fit``: importing matplotlib and its fonts
(about 0.6 s), making the figures' empty canvases (``LAYOUTS``) and drawing the PNGs (about 1.2 s on
the demo town) then run beside the fit and the report's solves instead of after them, on a second
core; the hydrant curves, the largest figure, in a second lane forked from the first once matplotlib
is loaded. The worker is this file run as a script: it imports numpy and matplotlib only, not
``calib``. Anything that goes wrong in the worker (no worker, a crash, an error) is drawn again
here, so the report is the same with or without it.

Not here: what the figures show (``report.py`` builds their data) or any computation on the fit.
"""

from __future__ import annotations

import base64
import io
import itertools
import pickle
import sys

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
    """The figure as a base64 PNG at 100 dpi, what ``fig.savefig(buf, format="png", dpi=100)``
    writes, in one draw. With a layout engine (constrained layout) savefig draws twice: once with
    drawing disabled to run the layout, then for the pixels; here the layout is run alone and the
    figure drawn once (the same bytes: tests/calibration/test_figures_cheaper.py), a tenth less."""
    import matplotlib as mpl

    buf = io.BytesIO()
    engine = fig.get_layout_engine()
    rc = mpl.rcParams
    if (engine is None or fig.dpi != 100 or rc["savefig.bbox"] is not None
            or rc["savefig.transparent"] or "auto" != rc["savefig.facecolor"]
            or "auto" != rc["savefig.edgecolor"]):  # a matplotlibrc's savefig settings: savefig
        fig.savefig(buf, format="png", dpi=100)
        return base64.b64encode(buf.getvalue()).decode("ascii")
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    canvas = FigureCanvasAgg(fig)
    canvas._is_saving = True  # as in savefig
    canvas.get_renderer()  # the layout measures text on it
    engine.execute(fig)
    fig.set_layout_engine("none")  # laid out: savefig turns it off for its drawing pass too
    canvas.draw()
    mpl.image.imsave(buf, canvas.buffer_rgba(), format="png", origin="upper",
                     dpi=fig.dpi)  # what savefig's print_png does after its draw
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


def _observed_vs_simulated(d, fig, ax):
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


def _residuals_by_test(d, fig, ax):
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


def _c_by_group(d, fig, ax):
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


def _curves_layout(n_panels: int, ticks: int = 7):
    """The curves' canvas and axes; with ``ticks`` tick objects made on each axis (matplotlib
    makes them on the first draw, a fifth of it, each a copy of the axis' first; the draw uses as
    many as it needs, made now or then alike)."""
    rows = int(np.ceil(n_panels / _CURVE_COLUMNS))
    height = 2.9 * rows
    fig, axes = _figure((11, height), rows, _CURVE_COLUMNS, squeeze=False, margins=dict(
        left=0.06, right=0.99, bottom=0.5 / height, top=1 - 0.7 / height, wspace=0.35,
        hspace=0.45))
    for ax in axes.flat:
        ax.xaxis.get_major_ticks(ticks)
        ax.yaxis.get_major_ticks(ticks)
    return fig, axes


_CURVE_COLUMNS = 4


def _outer(k: int, n_panels: int) -> tuple[bool, bool]:
    """(x label, y label) of slot ``k`` of ``n_panels``: the axis titles on the outer panels only
    (the bottom slot of each column, the left column), as small multiples are labelled: every
    panel's axes measure the same quantities in the same units. One label per panel cost a fifth
    of the figure's drawing (24 long texts of the 12 panels' 150)."""
    return k + _CURVE_COLUMNS >= n_panels, k % _CURVE_COLUMNS == 0


def _curve_panel(ax, panel, fu: str, pu: str, xlabel: bool = True, ylabel: bool = True) -> None:
    """One test's hydrant curve on ``ax`` (``None``: an empty slot); with its axis titles where
    ``xlabel``, ``ylabel`` (``_outer``)."""
    if panel is None:
        ax.set_axis_off()
        return
    ax.plot(panel["flow"], panel["pressure"], color="tab:blue")
    # one collection per run of readings alike (flagged or not), in the readings' order: the
    # markers are drawn in the same order as one collection per reading, at half the artists
    for flagged, run in itertools.groupby(panel["readings"], key=lambda r: r[2]):
        run = list(run)
        ax.scatter([r[0] for r in run], [r[1] for r in run],
                   color="black" if flagged else "tab:orange", marker="x" if flagged else "o",
                   zorder=3)
    ax.axvline(panel["tested"], color="#bbb", lw=0.8, ls=":")
    _title(ax, panel["title"], fontsize=8)
    # The trade's N^1.85 axis (NFPA 291): a supply curve is close to a straight line on it.
    ax.set_xscale("function", functions=(_n185_forward, _n185_inverse))
    ax.set_xlim(left=0.0)
    ax.set_xticks(_flow_ticks(panel["flow"][-1]))
    ax.tick_params(labelsize=7)
    if xlabel:
        ax.set_xlabel(f"total test flow [{fu}], N^1.85 scale", fontsize=7)
    if ylabel:
        ax.set_ylabel(f"pressure at gauge [{pu}]", fontsize=7)


def _curves_rest(fig, axes, n_panels: int) -> None:
    """What the curves' figure holds beside the panels: the unused slots off, the title."""
    for k in range(n_panels, axes.size):
        axes.flat[k].set_axis_off()
    fig.suptitle("Hydrant curves at each test's first gauge: calibrated model (line), static and "
                 "residual readings (dots; x flagged), flow tested (dotted)", fontsize=10)


def _hydrant_curves(d, fig, axes):
    for k, panel in enumerate(d["panels"]):
        _curve_panel(axes.flat[k], panel, d["fu"], d["pu"], *_outer(k, len(d["panels"])))
    _curves_rest(fig, axes, len(d["panels"]))
    return _png(fig)


class CurvesInProgress:
    """The hydrant curves' PNG rendered panel by panel as their data comes (``add``), so that
    only the last panel, the title and the PNG's encoding are left when the page wants it
    (``finish``): the panels are rendered while the other curves are still being solved.

    The same pixels as ``draw``: Agg renders what ``Figure.draw`` renders, in its order (the
    figure's patch, the axes in the order they were made, then the title), each panel once its
    own data is set, onto one canvas; ``finish`` encodes that canvas as ``savefig`` does. Where
    the figure holds anything else, or a panel given differs from the final data, ``finish``
    returns None and the figure is drawn afresh.
    """

    def __init__(self, n_panels: int, made):
        self.n, (self.fig, self.axes) = n_panels, made
        self.given: dict[int, tuple] = {}
        self.rendered = 0
        self.renderer = None

    def add(self, k: int, panel, fu: str, pu: str) -> None:
        self.given[k] = (panel, fu, pu)
        while self.rendered in self.given:
            panel, fu, pu = self.given[self.rendered]
            ax = self.axes.flat[self.rendered]
            _curve_panel(ax, panel, fu, pu, *_outer(self.rendered, self.n))
            self._render(ax)
            self.rendered += 1

    def _canvas(self):
        if self.renderer is None:
            from matplotlib.backends.backend_agg import FigureCanvasAgg
            canvas = FigureCanvasAgg(self.fig)
            canvas._is_saving = True  # as in savefig (animated artists drawn too: there are none)
            self.renderer = canvas.get_renderer()
            self.renderer.clear()
            self.fig.patch.draw(self.renderer)
        return self.renderer

    def _render(self, artist) -> None:
        artist.draw(self._canvas())

    def finish(self, d) -> str | None:
        """The PNG of the figure of ``d`` (the whole data), or None (see the class docstring)."""
        import matplotlib as mpl

        panels = d["panels"]
        if len(panels) != self.n or any(
                not _same_panel(self.given[k], (panels[k], d["fu"], d["pu"]))
                for k in range(self.rendered)):
            return None
        for k in range(self.rendered, self.n):
            _curve_panel(self.axes.flat[k], panels[k], d["fu"], d["pu"], *_outer(k, self.n))
        _curves_rest(self.fig, self.axes, self.n)
        order = self.fig._get_draw_artists(self._canvas())
        if order[:self.rendered] != list(self.axes.flat[:self.rendered]):
            return None
        for artist in order[self.rendered:]:
            self._render(artist)
        buf = io.BytesIO()
        mpl.image.imsave(buf, self.renderer.buffer_rgba(), format="png", origin="upper",
                         dpi=self.fig.dpi)  # what savefig's print_png does after its draw
        return base64.b64encode(buf.getvalue()).decode("ascii")


def _same_panel(a, b) -> bool:
    (pa, fa, ua), (pb, fb, ub) = a, b
    if (fa, ua) != (fb, ub) or (pa is None) != (pb is None):
        return False
    return pa is None or (pa.keys() == pb.keys() and all(
        np.array_equal(pa[k], pb[k]) if isinstance(pa[k], np.ndarray) else pa[k] == pb[k]
        for k in pa))


FIGURES = {"observed vs simulated": _observed_vs_simulated, "residuals by test": _residuals_by_test,
           "C by group": _c_by_group, "hydrant curves": _hydrant_curves}

#: Each figure's empty canvas and axes, from its ``layout_key`` (the hydrant curves': the number of
#: panels; the others': None). Made before the data is known (in the worker, while the fit runs:
#: the curves' 12 axes are a fifth of their draw); the same calls as at draw time, so the same PNG.
LAYOUTS = {"observed vs simulated": lambda key: _figure((5.6, 5.2)),
           "residuals by test": lambda key: _figure((7.4, 4.0)),
           "C by group": lambda key: _figure((8.6, 4.4)),
           "hydrant curves": _curves_layout}


def layout_key(name: str, data: dict):
    """What figure ``name``'s layout depends on in its ``data`` (see ``LAYOUTS``)."""
    return len(data["panels"]) if name == "hydrant curves" else None


def draw(name: str, data: dict, made: tuple | None = None) -> str:
    """Figure ``name`` (a key of ``FIGURES``) from its ``data`` as a base64 PNG. ``made``:
    ``(key, (figure, axes))`` from ``LAYOUTS[name](key)``, built earlier and not drawn on yet;
    used when ``key`` is this data's ``layout_key`` (else a new layout is made)."""
    key = layout_key(name, data)
    fig_axes = made[1] if made is not None and made[0] == key else LAYOUTS[name](key)
    return FIGURES[name](data, *fig_axes)


# --- the worker process: calib.figure_worker starts it and talks to it ----------------------------
def _serve(stdin, stdout) -> None:
    """One lane of the worker: read ``(kind, name, payload)`` pickles until the input closes.
    ``("layout", name, key)``: make that figure's canvas and axes now (``LAYOUTS``), while the fit
    runs; ``("part", name, (k, panel, fu, pu))``: a hydrant-curve panel, rendered at once
    (``CurvesInProgress``); ``("draw", name, data)``: draw it (on that canvas when the key matches,
    from the panels rendered so far where they are this data's) and answer
    ``(name, ok, png or error text)``."""
    made, growing = {}, {}
    while True:
        try:
            kind, name, payload = pickle.load(stdin)
        except EOFError:
            return
        if kind == "layout":
            try:
                made[name] = (payload, LAYOUTS[name](payload))
            except Exception:  # made again when the figure is drawn, where an error is answered
                pass
            continue
        if kind == "part":  # a hydrant-curve panel (k, panel, fu, pu), rendered now
            try:
                if name not in growing and name in made:
                    growing[name] = CurvesInProgress(*made.pop(name))
                if name in growing:
                    growing[name].add(*payload)
            except Exception:  # drawn afresh when the whole figure comes
                growing.pop(name, None)
            continue
        try:
            png = None
            if name in growing:
                try:
                    png = growing.pop(name).finish(payload)
                except Exception:
                    png = None
            answer = (name, True, png or draw(name, payload, made.pop(name, None)))
        except Exception as exc:  # the parent draws it again and sees the error itself
            answer = (name, False, f"{type(exc).__name__}: {exc}")
        pickle.dump(answer, stdout, protocol=pickle.HIGHEST_PROTOCOL)
        stdout.flush()


def _worker(argv) -> None:
    """The worker process: load matplotlib and its fonts, then serve its lanes. With ``argv`` =
    ``[REQUESTS_FD, ANSWERS_FD]`` a second lane on those pipes is a fork of this process made once
    matplotlib is loaded: two figures drawn at once at no second import, each lane as warm as the
    other (so the same PNG from either)."""
    import os

    import matplotlib
    matplotlib.use("Agg")
    from matplotlib.figure import Figure  # noqa: F401  (loaded before the first request)
    # the fonts are read on the first text drawn: do it while the fit runs
    fig, ax = _figure((1, 1))
    ax.set_title("0")
    _png(fig)
    # matplotlib's objects live as long as the worker: kept out of the garbage collector's full
    # passes while drawing (0.05 -> 0.02 s of the four figures' 1.2 s), and shared by the lanes
    import gc
    gc.freeze()
    child = 0
    if len(argv) == 2:
        requests, answers = (int(v) for v in argv)
        try:
            child = os.fork()
        except OSError:  # no second lane: its pipes close below, and the parent draws its figures
            child = -1
        if child == 0:
            null = os.open(os.devnull, os.O_RDWR)
            os.dup2(null, 0)  # the first lane's pipes are the parent's alone: their ends are seen
            os.dup2(null, 1)
            _serve(os.fdopen(requests, "rb"), os.fdopen(answers, "wb"))
            os._exit(0)
        os.close(requests)
        os.close(answers)
    _serve(sys.stdin.buffer, sys.stdout.buffer)
    if child > 0:
        os.waitpid(child, 0)


if __name__ == "__calib_figures__":
    _worker(sys.argv[2:])  # argv: -c, this file, then the second lane's pipes if any
    # every answer is flushed: end without the interpreter's teardown of matplotlib's objects
    # (0.2-0.4 s that ``close`` would wait for; 0.02 s this way)
    import os
    os._exit(0)
