"""``report.html``: one self-contained page describing a calibration fit, with its plots embedded as PNG.

Sections, in the order a modeler reads them: the cautions; the result at a glance; the groups (table,
and C with its interval against the prior, the model's C before and the C bounds); the flagged
(suspect) readings; the influential readings, apart; the findings in words; the fit statistics and the calibration accuracy criteria; how well
the readings fit (observed vs simulated, residuals by test); hydrant curves; parameter correlation;
the tests; the method and its sources. matplotlib draws each figure once, through its Agg canvas
(no pyplot, no display), laid out by its constrained layout during that one draw. The page is
written atomically through ``calib.fileio``.
"""

from __future__ import annotations

import base64
import datetime as _dt
import html
import io
from pathlib import Path

import numpy as np

from calib import fileio, units

CAUTIONS = [
    "A calibrated model supports, never replaces, field verification and review by a licensed "
    "engineer. Do not use these C-factors for fire-protection design without that review; follow "
    "local codes and the authority having jurisdiction.",
    "C-factors fitted here describe the tests' conditions (valve positions, tank levels, demands at "
    "the hour of the test). A closed or throttled valve unknown to the model shows up as a low C.",
    "Flowing hydrants: open and close them slowly, one at a time (water hammer can break mains); "
    "control traffic; see where the water goes (flooding, erosion, drains; dechlorinate where "
    "required); warn customers of discoloured water; avoid freezing weather; tell the fire service "
    "before and after, since fire protection is reduced while the test runs; keep every residual "
    "pressure at or above 20 psi (NFPA 291).",
]


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


# the hydrant curve's points: the fewest that draw it within this share of its drop (about two
# pixels of a panel at 100 dpi), found by halving where a midpoint misses the straight line between
# two points on the N^1.85 axis, on which matplotlib draws each segment straight. Near zero flow the
# curve is steep on that axis (the base demand's losses grow linearly there), hence a point at 0.2.
CURVE_TOLERANCE = 0.01
CURVE_SCALES = (0.0, 0.2, 1.0, 1.6)  # shares of the test's flow always solved; 0 and 1 the fit's


def _same_loading(a, b) -> bool:
    """Two snapshots load the network alike (labels and zero extra demands aside)."""
    extra = lambda s: {k: v for k, v in s.extra_demand.items() if v != 0}  # noqa: E731
    return (a.demand_factor == b.demand_factor and a.source_head == b.source_head
            and extra(a) == extra(b))


def _curve(solver, rough, flows, heads, gauge, known=(), start=None):
    """Pressure at ``gauge`` [Pa] as the test's ``flows`` are scaled: (scales, pressures).

    ``known``: the fit's converged solutions; one with the same loading as a point of the curve is
    that point. Every other point is solved warm-started from the nearest point solved (first from
    ``start``, the fit's solution of this test)."""
    from calib.hydraulics import Snapshot

    solved = {}

    def at(s):
        snap = Snapshot(extra_demand={n: q * s for n, q in flows.items()}, source_head=heads)
        same = [r for r in known if _same_loading(r.snapshot, snap)]
        if same:
            solved[s] = same[0]
        else:
            warm = solved[min(solved, key=lambda v: abs(v - s))] if solved else start
            solved[s] = solver.solve(snap, roughness=rough, warm_start=warm)
        return float(solved[s].pressure[gauge])

    p = {s: at(s) for s in sorted(CURVE_SCALES, reverse=True)}
    tol = CURVE_TOLERANCE * max(abs(p[CURVE_SCALES[0]] - p[CURVE_SCALES[-1]]), 1e-3 * units.PSI)
    todo = list(zip(CURVE_SCALES[:-1], CURVE_SCALES[1:]))
    while todo and len(p) < 33:
        a, b = todo.pop()
        m = ((a ** 1.85 + b ** 1.85) / 2.0) ** (1.0 / 1.85)  # midpoint on the N^1.85 axis
        p[m] = at(m)
        if abs(p[m] - (p[a] + p[b]) / 2.0) > tol:
            todo += [(a, m), (m, b)]
    scales = np.array(sorted(p))
    return scales, np.array([p[s] for s in scales])


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


def _plots(result, system: str, curves: bool = True) -> dict[str, str]:
    t, net = result.tests, result.network
    pu = units.display_unit("pressure", system)
    conv = lambda v: units.from_si(np.asarray(v, float), "pressure", pu)  # noqa: E731
    obs, sim = conv(t.pressure), conv(result.simulated)
    flagged = np.array([bool(f) for f in result.flag])
    out = {}

    fig, ax = _figure((5.6, 5.2))
    for kind, marker in (("static", "s"), ("residual", "o")):
        sel = (t.kind == kind) & ~flagged
        ax.scatter(sim[sel], obs[sel], marker=marker, s=28, label=f"{kind} reading", alpha=0.8)
    if flagged.any():
        ax.scatter(sim[flagged], obs[flagged], marker="x", s=70, color="black", label="flagged")
    lo, hi = float(min(obs.min(), sim.min())), float(max(obs.max(), sim.max()))
    pad = 0.04 * (hi - lo + 1e-9)
    lo, hi = lo - pad, hi + pad
    band = units.from_si(2.0 * units.PSI, "pressure", pu)  # AWWA ECAC (1999) +/-2 psi, as in the criteria
    ax.plot([lo, hi], [lo, hi], color="grey", lw=1, label="observed = simulated")
    ax.fill_between([lo, hi], [lo - band, hi - band], [lo + band, hi + band], color="grey",
                    alpha=0.15, lw=0, label=f"+/-{band:.3g} {pu}")
    ax.set_xlim(lo, hi)
    ax.set_ylim(lo, hi)
    ax.set_aspect("equal")
    ax.set_xlabel(f"simulated pressure, calibrated model [{pu}]")
    ax.set_ylabel(f"observed pressure at the gauge [{pu}]")
    ax.set_title("Observed against simulated, every reading")
    ax.legend(fontsize=8, loc="upper left")
    out["observed vs simulated"] = _png(fig)

    fig, ax = _figure((7.4, 4.0))
    xs = t.test + np.where(t.kind == "static", -0.12, 0.12)
    ax.axhline(0, color="grey", lw=1)
    thr = result.options.get("threshold", 3.0)
    for sgn in (-1, 1):
        ax.axhline(sgn * thr, color="grey", lw=0.8, ls="--",
                   label=f"flag cut-off +/-{thr:.2f}" if sgn > 0 else None)
    for kind, colour in (("static", "tab:blue"), ("residual", "tab:orange")):
        sel = (t.kind == kind) & ~flagged
        ax.scatter(xs[sel], result.z[sel], s=26, color=colour, label=f"{kind} reading")
    if flagged.any():
        ax.scatter(xs[flagged], result.z[flagged], marker="x", s=70, color="black", label="flagged")
    many = t.n_tests > 14
    ax.set_xticks(range(t.n_tests), t.test_ids, rotation=60 if many else 0, fontsize=8)
    ax.set_xlabel("test")
    ax.set_ylabel("(observed - simulated) / sigma [-]")
    ax.set_title("Standardized residuals by test")
    ax.legend(fontsize=7, ncol=4, loc="upper center", bbox_to_anchor=(0.5, -0.16), frameon=False)
    out["residuals by test"] = _png(fig)

    fig, ax = _figure((8.6, 4.4))
    g = np.arange(result.grouping.n_groups)
    c_lo, c_hi = result.options.get("c_bounds", (40.0, 160.0))
    lo_c = np.where(np.isfinite(result.c_low), result.c_low, c_lo)
    hi_c = np.where(np.isfinite(result.c_high), result.c_high, c_hi)
    model_c = result.grouping.length_weighted(result.network, result.network.roughness)
    top = max(c_hi, float(np.nanmax(hi_c)), float(np.nanmax(model_c)))
    bottom = min(c_lo, float(np.nanmin(lo_c)), float(np.nanmin(model_c)))
    if result.prior is not None:
        top = max(top, float(np.nanmax(result.prior.c + 1.96 * result.prior.spread)))
        bottom = min(bottom, float(np.nanmin(result.prior.c - 1.96 * result.prior.spread)))
    ylo, yhi = bottom - 10.0, top + 10.0
    # outside the C bounds: shaded, so an interval that reaches a bound is seen as cut by it
    ax.axhspan(ylo, c_lo, color="grey", alpha=0.15, lw=0, label=f"outside C bounds {c_lo:g}-{c_hi:g}")
    ax.axhspan(c_hi, yhi, color="grey", alpha=0.15, lw=0)
    det = result.c_determined
    if det.any():
        ax.errorbar(g[det], result.c[det], yerr=[(result.c - lo_c)[det], (hi_c - result.c)[det]],
                    fmt="o", capsize=5, ms=7, color="tab:blue", label="fitted C, 95 % interval")
    if (~det).any():
        # no fitted value: only the range the tests leave open (up to the C bounds)
        ax.vlines(g[~det], lo_c[~det], hi_c[~det], colors="tab:blue", linestyles=":", lw=2,
                  label="undetermined: range the tests allow")
    for gi in g:
        ax.annotate(f"{result.c[gi]:.0f}" if det[gi] else "undetermined", (gi, hi_c[gi]),
                    xytext=(0, 4), textcoords="offset points", ha="center", va="bottom", fontsize=8,
                    color="tab:blue")  # above its interval
    if result.prior is not None:
        ax.errorbar(g + 0.25, result.prior.c, yerr=1.96 * result.prior.spread, fmt="s", mfc="none",
                    capsize=3, color="grey", label="prior, +/-1.96 sd")
    ax.scatter(g - 0.25, model_c, marker="_", s=300, lw=2, color="tab:red", label="model C before")
    ax.set_xticks(g, result.grouping.names, fontsize=9)
    ax.set_xlim(-0.6, len(g) - 0.4)
    ax.set_ylabel("Hazen-Williams C [-]")
    ax.set_ylim(ylo, yhi)
    ax.grid(axis="y", color="#ddd", lw=0.6)
    ax.legend(fontsize=8, ncol=4, loc="upper center", bbox_to_anchor=(0.5, -0.08), frameon=False)
    ax.set_title("C by group: fitted, prior, model before, and the C bounds")
    out["C by group"] = _png(fig)

    if curves and t.n_tests:
        from calib.hydraulics import NetworkSolver
        solver = NetworkSolver(net, headloss="hazen-williams")  # one set-up for every curve point
        n_show = min(t.n_tests, 12)
        cols = 4
        rows = int(np.ceil(n_show / cols))
        height = 2.9 * rows
        fig, axes = _figure((11, height), rows, cols, squeeze=False, margins=dict(
            left=0.06, right=0.99, bottom=0.5 / height, top=1 - 0.7 / height, wspace=0.35,
            hspace=0.45))
        rough = result.roughness()
        fu = units.display_unit("flow", system)
        for k in range(n_show):
            ax = axes[k // cols][k % cols]
            flows = {str(net.node_ids[n]): q for n, q in t.flows[k].items()}
            sel = np.flatnonzero(t.test == k)
            if not flows or not sel.size:
                ax.set_axis_off()
                continue
            gauge = int(t.node[sel[0]])
            heads = {str(net.node_ids[s]): h for s, h in t.source_head[k].items()}
            total = sum(flows.values())
            known = list(getattr(result, "solutions", {}).values())
            start = getattr(result, "solutions", {}).get(f"{t.test_ids[k]} residual")
            scales, p = _curve(solver, rough, flows, heads, gauge, known, start)
            gh = units.head_to_pressure(t.gauge_height[sel[0]])
            ax.plot(units.from_si(total * scales, "flow", fu), conv(np.array(p) - gh), color="tab:blue")
            for i in sel[t.node[sel] == gauge]:
                q_obs = 0.0 if t.kind[i] == "static" else total
                ax.scatter([units.from_si(q_obs, "flow", fu)], [conv(t.pressure[i])],
                           color="black" if result.flag[i] else "tab:orange",
                           marker="x" if result.flag[i] else "o", zorder=3)
            ax.axvline(units.from_si(total, "flow", fu), color="#bbb", lw=0.8, ls=":")
            ax.set_title(f"{t.test_ids[k]}: gauge {net.node_ids[gauge]}, "
                         f"{units.from_si(total, 'flow', fu):.0f} {fu} flowed", fontsize=8)
            # The trade's N^1.85 axis (NFPA 291): a supply curve is close to a straight line on it.
            ax.set_xscale("function", functions=(_n185_forward, _n185_inverse))
            ax.set_xlim(left=0.0)
            ax.set_xticks(_flow_ticks(units.from_si(total * scales[-1], "flow", fu)))
            ax.tick_params(labelsize=7)
            ax.set_xlabel(f"total test flow [{fu}], N^1.85 scale", fontsize=7)
            ax.set_ylabel(f"pressure at gauge [{pu}]", fontsize=7)
        for k in range(n_show, rows * cols):
            axes[k // cols][k % cols].set_axis_off()
        fig.suptitle("Hydrant curves at each test's first gauge: calibrated model (line), static and "
                     "residual readings (dots; x flagged), flow tested (dotted)", fontsize=10)
        out["hydrant curves"] = _png(fig)
    return out


def _table(headers, rows) -> str:
    head = "".join(f"<th>{html.escape(str(h))}</th>" for h in headers)
    body = "".join("<tr>" + "".join(f"<td>{html.escape(str(c))}</td>" for c in r) + "</tr>"
                   for r in rows)
    return f"<table><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>"


def _fmt(v, digits=1) -> str:
    return f"{v:.{digits}f}" if np.isfinite(v) else "undetermined"


def _glance(result, pu: str) -> str:
    """One paragraph: how many groups the tests inform, the flagged readings, the fit's RMSE."""
    t, est = result.tests, result.estimate
    status = list(result.status)
    counts = {k: status.count(k) for k in ("informed", "weakly informed", "undetermined")}
    words = ", ".join(f"{n} {k}" for k, n in counts.items() if n)
    n_flag = sum(1 for f in result.flag if f)
    n_lean = sum(1 for f in result.influence if f)
    n_out = int((~est.used).sum())
    rmse = units.from_si(result.rmse, "pressure", pu)
    at_bound = [name for name, b in zip(result.grouping.names, result.c_at_bound) if b]
    text = (f"{t.n_tests} tests, {t.n_readings} readings; {result.grouping.n_groups} pipe groups: "
            f"{words}. {n_flag} suspect reading(s) flagged"
            + (f", {n_out} left out of the final fit" if n_out else "")
            + (f"; {n_lean} influential reading(s), listed apart (not suspect)" if n_lean else "")
            + f". RMSE of pressures {rmse:.2f} {pu}.")
    if at_bound:
        text += (f" Fit goes to a C bound (no fitted value; the exports keep the model's C): "
                 f"{', '.join(at_bound)}.")
    return text


def _info_rows(info):
    """The tests table, with ISO dates shown as a person writes them (2026-05-14 08:00)."""
    rows = info.astype(object).where(info.notna(), "").values.tolist()
    cols = list(info.columns)
    if "date" in cols:
        j = cols.index("date")
        for r in rows:
            # no-break space and hyphens: a date and its hour stay on one line
            r[j] = str(r[j]).replace("T", "\u00a0", 1).replace("-", "\u2011")
    return cols, rows


def render(result, system: str = "us", curves: bool = True) -> str:
    """The report as one HTML string."""
    from calib.calibration.export import groups_frame, other_parameters_frame
    t, net, est = result.tests, result.network, result.estimate
    pu = units.display_unit("pressure", system)
    e = html.escape
    c_bounds = result.options.get("c_bounds")
    bounds = (f"{c_bounds[0]:g} - {c_bounds[1]:g}" if c_bounds is not None else "-")
    group_by = result.options.get("group_by")
    plots = _plots(result, system, curves)

    def img(key, alt):
        return (f"<figure><img alt='{e(alt)}' src='data:image/png;base64,{plots[key]}'></figure>"
                if key in plots else "")

    parts = [
        "<!DOCTYPE html><html lang='en'><head><meta charset='utf-8'>",
        f"<title>C-factor calibration - {e(str(net.name))}</title><style>"
        "body{font-family:sans-serif;max-width:1100px;margin:1em auto;padding:0 1em;color:#222;"
        "line-height:1.4}"
        "table{border-collapse:collapse;margin:.5em 0;font-size:90%}"
        "td,th{border:1px solid #bbb;padding:3px 7px;text-align:left;vertical-align:top}"
        "th{background:#f2f2f2}td.n{text-align:right;font-variant-numeric:tabular-nums}"
        ".caution{border-left:4px solid #c60;background:#fff4e8;padding:.4em 1em}"
        ".glance{border-left:4px solid #36c;background:#eef3fb;padding:.5em 1em}"
        "figure{margin:.5em 0}img{max-width:100%}.note{color:#555;font-size:90%}</style></head><body>",
        f"<h1>C-factor calibration: {e(str(net.name))}</h1>",
        f"<p>Generated {e(_dt.datetime.now().strftime('%Y-%m-%d %H:%M'))} from "
        f"<code>{e(str(t.folder))}</code>. Pipe groups from "
        f"{e('the group column of pipes.csv' if group_by in (None, '', 'group column') else str(group_by))}; "
        f"prior: {e(str(result.options.get('prior')))}; C bounds {e(bounds)}; "
        f"least-squares loss: {e(str(result.options.get('loss')))}; pressures in {e(pu)} (gauge).</p>",
        "<div class='caution'><b>Cautions.</b><ul>" + "".join(f"<li>{e(c)}</li>" for c in CAUTIONS)
        + "</ul></div>",
        f"<h2>At a glance</h2><p class='glance'>{e(_glance(result, pu))}</p>",
        "<h2>Groups</h2>",
    ]
    gf = groups_frame(result)
    rows = []
    for i, r in gf.iterrows():
        if result.c_determined[i]:
            status = r["status"] + (f" ({result.informed[i]:.0%})" if result.prior is not None else "")
            c_text = _fmt(r["c_factor"])
            interval = (f"{_fmt(r['c_low'])} - {_fmt(r['c_high'])}"
                        if np.isfinite(r["c_low"]) and np.isfinite(r["c_high"]) else r["interval_text"])
        else:
            limited = not (result.c_low_open[i] and result.c_high_open[i])
            status = "undetermined" + (", fit goes to a C bound" if bool(r["at_bound"]) and limited
                                       else "") \
                + f"; the exports keep the model's C {r['model_c']:.0f}"
            c_text, interval = "-", r["interval_text"]
        if r["interval_method"] != "linearized":
            interval += " (profile likelihood)"
        rows.append([r["group"], c_text, interval,
                     "-" if result.prior is None else f"{r['prior_c']:.0f} +/- {r['prior_spread']:.0f}",
                     _fmt(r["model_c"]), int(r["n_pipes"]), status,
                     _fmt(r["c_all_readings"]) if "c_all_readings" in gf else "-"])
    parts.append(_table(["group", "fitted C", "95 % interval", "prior C +/- 1 sd", "model C before",
                         "pipes", "informed by the tests (share of precision)",
                         "C with every reading kept"], rows))
    parts.append("<p class='note'>C is the Hazen-Williams coefficient [-]. The share says how much of "
                 "a group's precision comes from the readings rather than the prior: above 50 % "
                 "informed, 10 - 50 % weakly informed, below undetermined. A group the tests do not "
                 "determine (or whose fit goes to a C bound) shows no fitted C: only what the tests "
                 "say (a one-sided limit, or nothing within the C bounds); roughness.csv and "
                 "pipes.geojson keep the model's C for its pipes. Intervals are linearized where that "
                 "can be trusted, else profile likelihood (Venzon and Moolgavkar 1988; Bates and Watts "
                 "1988), never outside the C bounds. \"C with every reading kept\" is the fit before "
                 "flagged readings were left out; it shows how much they pull.</p>")
    other = other_parameters_frame(result)
    if len(other):
        parts.append(_table(list(other.columns), other.values.tolist()))
    parts.append(img("C by group", "C by group against the prior and the C bounds"))
    if result.prior is not None:
        parts.append(f"<p class='note'>Prior: {e(result.prior.source)}.</p>")
    flagged = [i for i, f in enumerate(result.flag) if f]
    parts.append("<h2>Flagged readings (suspect)</h2>")
    if flagged:
        parts.append(_table(["test", "node", "kind", f"observed [{pu}]", f"simulated [{pu}]",
                             "left out", "standardized residual, final fit [-]", "reason"],
                            [[t.test_ids[t.test[i]], net.node_ids[t.node[i]], t.kind[i],
                              f"{units.from_si(t.pressure[i], 'pressure', pu):.1f}",
                              f"{units.from_si(result.simulated[i], 'pressure', pu):.1f}",
                              "no" if est.used[i] else "yes",
                              f"{result.z[i]:+.1f}", result.flag[i]] for i in flagged]))
        parts.append("<p class='note'>Simulated and standardized values are from the final fit; a "
                     "reading left out is measured against the fit made without it, so its value "
                     "can differ from the one quoted in the reason (measured against the fit with "
                     "it). Check a flagged reading in the field notes (gauge, gauge height, a valve) "
                     "before discarding it.</p>")
    else:
        parts.append("<p>None.</p>")
    leaning = [i for i, f in enumerate(result.influence) if f]
    if leaning:
        parts.append("<h2>Influential readings</h2>")
        parts.append(_table(["test", "node", "kind", "Cook's distance [-]", "why the fit leans on it"],
                            [[t.test_ids[t.test[i]], net.node_ids[t.node[i]], t.kind[i],
                              _fmt(result.cook[i], 2), result.influence[i]] for i in leaning]))
        parts.append("<p class='note'>Not suspect: these readings weigh much on the fit because of "
                     "where the tests were made (often the only reading that loads a group). Keep "
                     "them; a further test that loads the same groups would share their weight.</p>")
    parts.append("<h2>Findings</h2><ul>" + "".join(f"<li>{e(f)}</li>" for f in result.findings)
                 + "</ul>")
    rmse = units.from_si(result.rmse, "pressure", pu)
    parts.append(f"<h2>Fit statistics</h2><p>RMSE of pressures {rmse:.2f} {pu} over "
                 f"{int(est.used.sum())} readings used (of {t.n_readings}); weighted sum of squares "
                 f"{est.chi2:.1f} on {est.dof:.1f} degrees of freedom. Scale of the readings: "
                 + e(est.scale_note) + f"; quantile of the 95 % intervals {est.t:.3f}. Largest head loss across the system in a static "
                 f"snapshot {units.from_si(result.max_headloss, 'head', units.display_unit('head', system)):.1f} "
                 f"{units.display_unit('head', system)}.</p>")
    parts.append(_table(["criterion", "source", "required", "achieved", "met"],
                        [[c.label, c.source, f"{c.required:.0%}", f"{c.achieved:.0%}",
                          "yes" if c.passed else "no"] for c in result.criteria]))
    parts.append("<h2>How well the readings fit</h2>")
    parts.append(img("observed vs simulated", "observed against simulated pressure, every reading"))
    parts.append(img("residuals by test", "standardized residuals by test"))
    if "hydrant curves" in plots:
        parts.append("<h2>Hydrant curves</h2>" + img("hydrant curves", "hydrant curves per test"))
        parts.append("<p class='note'>The curve is the calibrated model's pressure at the gauge as the "
                     "test's flows are scaled from 0 to 1.6 times what was flowed; beyond the dotted "
                     "line it is an extrapolation, not a measurement.</p>")
    names = [q.name for q in result.params]
    if len(names) > 1:
        corr_rows = [[names[i]] + [("-" if not np.isfinite(v) else f"{v:+.2f}") for v in result.corr[i]]
                     for i in range(len(names))]
        parts.append("<h2>Parameter correlation</h2>" + _table([""] + names, corr_rows))
        parts.append("<p class='note'>Near +1 or -1: the tests cannot tell the two apart; a test "
                     "that loads one group and not the other separates them.</p>")
    if result.move_together:
        parts.append("<p>Parameters that move together (|r| &gt; 0.9): " + e(", ".join(
            f"{a} / {b} ({r:+.2f})" for a, b, r in result.move_together)) + ".</p>")
    if not t.info.empty:
        cols, rows = _info_rows(t.info)
        parts.append("<h2>Tests</h2>" + _table(cols, rows))
    from calib.fireflow.fitsummary import html_section  # fire flow with the fitted C
    parts.append(html_section(result, system))
    parts.append(
        "<h2>Method</h2><p>Each test gives a static snapshot (normal demand) and a residual snapshot "
        "(normal demand plus the test's flows); both kinds of reading are fitted (static readings "
        "inform source grades and demand more than C). Readings become hydraulic grades: HGL = "
        "pressure head + node elevation + gauge height (water at 60 degF, 1 psi = 2.309 ft). One "
        "Hazen-Williams C per group by bounded weighted least squares (scipy.optimize.least_squares, "
        "trust-region reflective; after Lansey and Basnet 1991), the Jacobian by implicit "
        "differentiation of the Todini and Pilati (1988) global gradient equations at each converged "
        "snapshot. Covariance (J<sup>T</sup>WJ)<sup>-1</sup> by an SVD pseudo-inverse (Bard 1974), "
        "the readings' rows weighted by their scale: the stated gauge sigma when a two-sided "
        "chi-square test does not reject it (normal quantile), else s<sup>2</sup> = S/(n-p) from their "
        "scatter (t quantile), which is also the case when no accuracy was stated; prior rows keep "
        "their own spread. 95 % intervals: linearized where that can be trusted, else profile "
        "likelihood - the other parameters refit with the C held fixed, the ends where the sum of "
        "squares rises by the squared quantile (Venzon and Moolgavkar 1988, Applied Statistics 37(1); "
        "Bates and Watts 1988, Nonlinear Regression Analysis and Its Applications) - never outside the "
        "C bounds. Flags: face checks, standardized residuals "
        "with leverage beyond the Bonferroni outlier cut-off at the stated family-wise level (Cook and "
        "Weisberg 1982), Cook's distance (Cook 1977) and leave-one-out refits; readings beyond the "
        "cut-off are left out one at a time and the fit repeated. Accuracy criteria: WRc (1989) "
        "Network Analysis - A Code of Practice, and the AWWA ECAC (1999) calibration guidelines, "
        "both quoted from memory.</p>")
    parts.append("<div class='caution'><b>Before using these C-factors.</b> "
                 + e(CAUTIONS[0]) + "</div>")
    parts.append("</body></html>")
    return "\n".join(parts)


def write_report(result, out, system: str = "us", curves: bool = True) -> Path:
    """Write ``OUT/report.html`` atomically and return its path."""
    path = Path(out) / "report.html"
    return fileio.write_text(path, render(result, system, curves))
