"""The hydrant curve of a test drawn on the N^1.85 scale, as a PNG for the results screen.

On this scale (flow raised to the power 1.85 along x, pressure along y) a hydrant's supply curve
P = Ps - (Ps - Pr) (Q / Qf)^1.85 is a straight line, which is how the trade reads and extrapolates it
(NFPA 291; the N^1.85 graph paper). The points come from ``calib.flowtest`` (``HydrantCurve``); this
module only draws, with matplotlib's Agg renderer (no display needed), large type and thick lines
for reading in sunlight. A bare ``Figure`` (no pyplot and its global state) so that the drawing can
run in a worker thread.
"""

from __future__ import annotations

import hashlib
import io
from pathlib import Path

import numpy as np
from matplotlib.figure import Figure

from calib import fileio, flowtest

from mobile.services import values


def _nice_ticks(top: float, n: int = 6) -> np.ndarray:
    raw = top / n
    mag = 10 ** np.floor(np.log10(raw))
    step = min((s for s in (1, 2, 2.5, 5, 10) if s * mag >= raw), default=10) * mag
    return np.arange(0.0, top + 0.5 * step, step)


def _tick_labels(ticks: np.ndarray, min_gap: float = 0.12) -> list[str]:
    """Flow labels, leaving out those the N^1.85 scale crowds together near zero flow."""
    x = np.asarray(flowtest.n185(ticks), dtype=float)
    span, last, out = x[-1], None, []
    for t, xi in zip(ticks, x):
        if xi >= min_gap * span and (last is None or xi - last >= min_gap * span):
            out.append(f"{t:,.0f}")
            last = xi
        else:
            out.append("")
    return out


def cache_path(results, folder, tid: str, system: str = "us") -> Path:
    """Where the curve image of test ``tid`` is kept: named after what it draws (the readings and
    results it shows and the units), so any change of those - a new reading, another rating gauge,
    a correction, other units - gives a new name, and an unchanged test reuses its image."""
    drawn = (results.flow, results.static, results.residual, results.rated_flow, results.target, system)
    key = hashlib.sha1(repr(drawn).encode()).hexdigest()[:12]
    return Path(folder) / f"{tid}-{key}.png"


def render_curve(results, path, system: str = "us", width_px: int = 820, height_px: int = 640) -> bool:
    """Draw ``results`` (``mobile.services.compute.Results``) to the PNG ``path``; False if no curve."""
    if results.curve is None or results.rated_flow is None:
        return False
    q_si, p_si = results.curve
    q = values.convert(np.asarray(q_si), "flow", system)
    p = values.convert(np.asarray(p_si), "pressure", system)
    qf = values.convert(results.flow, "flow", system)
    qr = values.convert(results.rated_flow, "flow", system)
    ps = values.convert(results.static, "pressure", system)
    pr = values.convert(results.residual, "pressure", system)
    pt = values.convert(results.target, "pressure", system)
    uq, up = values.field_unit("flow", system), values.field_unit("pressure", system)

    dpi = 100
    fig = Figure(figsize=(width_px / dpi, height_px / dpi), dpi=dpi)
    ax = fig.subplots()
    fig.patch.set_facecolor("white")
    top = max(qr, qf) * 1.15
    ticks = _nice_ticks(top)
    ax.plot(flowtest.n185(q), p, color="black", lw=4, solid_capstyle="round")
    ax.plot([0, flowtest.n185(qf), flowtest.n185(qr)], [ps, pr, pt], "o", ms=14, color="#0046ad", mec="black", mew=2)
    ax.axhline(pt, color="#b00020", lw=2.5, ls="--")
    test_text = (f"test {values.fmt(results.flow, 'flow', system)}\n"
                 f"at {values.fmt(results.residual, 'pressure', system)}")
    rated_text = (f"{values.fmt(results.rated_flow, 'flow', system)} at "
                  f"{values.fmt(results.target, 'pressure', system)}")
    ax.annotate(test_text, (flowtest.n185(qf), pr), textcoords="offset points",
                xytext=(14, 10), fontsize=21, fontweight="bold")
    ax.annotate(rated_text, (flowtest.n185(qr), pt), textcoords="offset points",
                xytext=(-10, 14), ha="right", fontsize=21, fontweight="bold", color="#b00020")
    ax.set_xticks(flowtest.n185(ticks))
    ax.set_xticklabels(_tick_labels(ticks), fontsize=18)
    ax.set_xlim(0, flowtest.n185(ticks[-1]))
    ax.set_ylim(0, ps * 1.12)
    ax.tick_params(axis="y", labelsize=18, width=2, length=6)
    ax.tick_params(axis="x", width=2, length=6)
    ax.grid(True, color="#999999", lw=1)
    for side in ax.spines.values():
        side.set_linewidth(2)
    ax.set_xlabel(f"flow [{uq}], N^1.85 scale", fontsize=19, fontweight="bold")
    ax.set_ylabel(f"pressure [{up}]", fontsize=19, fontweight="bold")
    fig.tight_layout()
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=dpi, facecolor="white")
    fileio.write_bytes(path, buf.getvalue())
    return True
