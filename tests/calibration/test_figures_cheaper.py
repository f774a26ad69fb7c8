"""The report's figures drawn with less work are byte for byte the figures drawn the plain way:
one draw instead of savefig's two for a constrained-layout figure (``figures._png``), and one
marker collection per run of alike readings in a hydrant-curve panel instead of one per reading.
The references are drawn here the plain way (matplotlib's ``Figure.savefig``; a ``scatter`` call
per reading), so a change of pixels, metadata or draw order fails."""

import base64
import io

import matplotlib
import numpy as np
import pytest

from calib.calibration import figures

matplotlib.use("Agg")


def _savefig(fig) -> str:
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=100)
    return base64.b64encode(buf.getvalue()).decode("ascii")


def _small_figures():
    rng = np.random.default_rng(3)
    sim = rng.uniform(40, 80, 14)
    flagged = np.arange(14) == 4
    kind = np.array(["static", "residual"] * 7)
    return {
        "observed vs simulated": dict(sim=sim, obs=sim + rng.normal(0, 1, 14), kind=kind,
                                      flagged=flagged, pu="psi", band=2.0),
        "residuals by test": dict(x=np.repeat(np.arange(7.0), 2) + np.tile([-0.12, 0.12], 7),
                                  z=rng.normal(0, 1.5, 14), kind=kind, flagged=flagged,
                                  threshold=3.1, test_ids=[f"T{i:02d}" for i in range(7)]),
        "C by group": dict(c=np.array([95.0, 120.0, 70.0]), low=np.array([80.0, 110.0, 40.0]),
                           high=np.array([110.0, 131.0, 160.0]),
                           determined=np.array([True, True, False]),
                           model_c=np.array([100.0, 120.0, 90.0]),
                           prior=(np.array([100.0, 125.0, 85.0]), np.array([10.0, 8.0, 15.0])),
                           c_bounds=(40.0, 160.0), names=["CI-1950s", "DI-1990s", "PVC"]),
    }


@pytest.mark.parametrize("name", ["observed vs simulated", "residuals by test", "C by group"])
def test_one_draw_of_a_laid_out_figure_is_the_png_savefig_writes(name, monkeypatch):
    data = _small_figures()[name]
    ours = figures.draw(name, data)
    monkeypatch.setattr(figures, "_png", _savefig)
    assert ours == figures.draw(name, data)


def test_a_matplotlibrc_savefig_setting_is_left_to_savefig(monkeypatch):
    # settings the one-draw path does not apply (here a tight bounding box): savefig draws it
    data = _small_figures()["observed vs simulated"]
    with matplotlib.rc_context({"savefig.bbox": "tight"}):
        ours = figures.draw("observed vs simulated", data)
        monkeypatch.setattr(figures, "_png", _savefig)
        reference = figures.draw("observed vs simulated", data)
    assert ours == reference
    assert ours != figures.draw("observed vs simulated", data)  # tight differs from the default


def _panel_one_scatter_per_reading(ax, panel, fu, pu, xlabel=True, ylabel=True):
    """``figures._curve_panel`` as it was: one ``scatter`` call per reading."""
    if panel is None:
        ax.set_axis_off()
        return
    ax.plot(panel["flow"], panel["pressure"], color="tab:blue")
    for q_obs, p_obs, flagged in panel["readings"]:
        ax.scatter([q_obs], [p_obs], color="black" if flagged else "tab:orange",
                   marker="x" if flagged else "o", zorder=3)
    ax.axvline(panel["tested"], color="#bbb", lw=0.8, ls=":")
    figures._title(ax, panel["title"], fontsize=8)
    ax.set_xscale("function", functions=(figures._n185_forward, figures._n185_inverse))
    ax.set_xlim(left=0.0)
    ax.set_xticks(figures._flow_ticks(panel["flow"][-1]))
    ax.tick_params(labelsize=7)
    if xlabel:
        ax.set_xlabel(f"total test flow [{fu}], N^1.85 scale", fontsize=7)
    if ylabel:
        ax.set_ylabel(f"pressure at gauge [{pu}]", fontsize=7)


def test_curve_markers_in_runs_draw_what_one_scatter_per_reading_draws(monkeypatch):
    # overlapping markers, flagged and not, interleaved: the draw order is kept (a flagged
    # reading drawn over an unflagged one at the same point, and the other way round)
    q = np.array([0.0, 300.0, 1000.0, 1600.0])
    readings = [(0.0, 80.0, False), (0.0, 80.3, True), (0.0, 80.1, False), (1000.0, 70.0, False),
                (1000.0, 70.2, False), (1000.0, 70.1, True), (1000.0, 69.9, True)]
    panel = dict(flow=q, pressure=80.0 - 4e-6 * q ** 1.85, readings=readings, tested=1000.0,
                 title="T1: gauge J1, 1000 gpm flowed")
    data = dict(panels=[panel, dict(panel, readings=readings[::-1]), None], fu="gpm", pu="psi")
    ours = figures.draw("hydrant curves", data)
    monkeypatch.setattr(figures, "_curve_panel", _panel_one_scatter_per_reading)
    assert ours == figures.draw("hydrant curves", data)


@pytest.mark.parametrize("n_panels", [12, 7, 3])
def test_curve_axis_titles_on_the_outer_panels_only(n_panels):
    # small multiples: the x title under the bottom panel of each column, the y title beside
    # each row's first panel; the others without (their axes measure the same in the same units)
    q = np.array([0.0, 300.0, 1000.0, 1600.0])
    panel = dict(flow=q, pressure=80.0 - 4e-6 * q ** 1.85, readings=[(0.0, 80.0, False)],
                 tested=1000.0, title="T1: gauge J1, 1000 gpm flowed")
    fig, axes = figures._curves_layout(n_panels)
    figures._hydrant_curves(dict(panels=[panel] * n_panels, fu="gpm", pu="psi"), fig, axes)
    cols = figures._CURVE_COLUMNS
    for k in range(n_panels):
        ax = axes.flat[k]
        below = k + cols < n_panels  # another panel under it in its column
        assert ax.get_xlabel() == ("" if below else "total test flow [gpm], N^1.85 scale"), k
        assert ax.get_ylabel() == ("pressure at gauge [psi]" if k % cols == 0 else ""), k
    assert sum(bool(ax.get_xlabel()) for ax in axes.flat) == min(cols, n_panels)
