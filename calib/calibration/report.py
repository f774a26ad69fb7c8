"""``report.html``: one self-contained page describing a calibration fit, with its plots embedded as PNG.

Sections: what was fitted and how; the groups with C, interval and prior; findings in words; the
calibration accuracy criteria; flagged readings; plots (observed vs simulated, residuals by test,
C by group against the prior, hydrant curves); the method and its sources; the cautions. matplotlib
runs with the Agg backend (no display). The page is written atomically through ``calib.fileio``.
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


def _png(fig) -> str:
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=90, bbox_inches="tight")
    import matplotlib.pyplot as plt
    plt.close(fig)
    return base64.b64encode(buf.getvalue()).decode("ascii")


def _plots(result, system: str, curves: bool = True) -> dict[str, str]:
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    t, net = result.tests, result.network
    pu = units.display_unit("pressure", system)
    conv = lambda v: units.from_si(np.asarray(v, float), "pressure", pu)  # noqa: E731
    obs, sim = conv(t.pressure), conv(result.simulated)
    flagged = np.array([bool(f) for f in result.flag])
    out = {}

    fig, ax = plt.subplots(figsize=(5.2, 4.6))
    for kind, marker in (("static", "s"), ("residual", "o")):
        sel = (t.kind == kind) & ~flagged
        ax.scatter(sim[sel], obs[sel], marker=marker, s=26, label=kind, alpha=0.8)
    if flagged.any():
        ax.scatter(sim[flagged], obs[flagged], marker="x", s=60, color="black", label="flagged")
    lo, hi = float(min(obs.min(), sim.min())), float(max(obs.max(), sim.max()))
    ax.plot([lo, hi], [lo, hi], color="grey", lw=1)
    ax.set_xlabel(f"simulated [{pu}]")
    ax.set_ylabel(f"observed [{pu}]")
    ax.set_title("Observed against simulated, every reading")
    ax.legend(fontsize=8)
    out["observed vs simulated"] = _png(fig)

    fig, ax = plt.subplots(figsize=(7.0, 3.6))
    xs = t.test + np.where(t.kind == "static", -0.12, 0.12)
    ax.axhline(0, color="grey", lw=1)
    thr = result.options.get("threshold", 3.0)
    for sgn in (-1, 1):
        ax.axhline(sgn * thr, color="grey", lw=0.8, ls="--")
    ax.scatter(xs[~flagged], result.z[~flagged], s=24, c=np.where(t.kind[~flagged] == "static",
                                                                   "tab:blue", "tab:orange"))
    if flagged.any():
        ax.scatter(xs[flagged], result.z[flagged], marker="x", s=60, color="black")
    ax.set_xticks(range(t.n_tests), t.test_ids, rotation=60, fontsize=8)
    ax.set_ylabel("standardized residual [-]")
    ax.set_title("Residuals by test (blue static, orange residual, x flagged)")
    out["residuals by test"] = _png(fig)

    fig, ax = plt.subplots(figsize=(7.0, 3.8))
    g = np.arange(result.grouping.n_groups)
    lo_c = np.where(np.isfinite(result.c_low), result.c_low, 0.0)
    hi_c = np.where(np.isfinite(result.c_high), result.c_high, 200.0)
    ax.errorbar(g, result.c, yerr=[result.c - lo_c, hi_c - result.c], fmt="o", capsize=4,
                label="fitted C, 95 % interval")
    if result.prior is not None:
        ax.errorbar(g + 0.2, result.prior.c, yerr=1.96 * result.prior.spread, fmt="s", mfc="none",
                    capsize=3, color="grey", label="prior, 95 % of its spread")
    from calib.calibration.export import _model_c
    ax.scatter(g - 0.2, _model_c(result), marker="_", s=200, color="tab:red", label="model C before")
    ax.set_xticks(g, result.grouping.names, rotation=30, ha="right", fontsize=8)
    ax.set_ylabel("Hazen-Williams C [-]")
    ax.set_ylim(0, 200)
    ax.legend(fontsize=8)
    ax.set_title("C by group against the prior")
    out["C by group"] = _png(fig)

    if curves and t.n_tests:
        from calib.calibration.predict import predict_test
        from calib.hydraulics import NetworkSolver
        solver = NetworkSolver(net, headloss="hazen-williams")  # one set-up for every curve point
        n_show = min(t.n_tests, 12)
        cols = 4
        rows = int(np.ceil(n_show / cols))
        fig, axes = plt.subplots(rows, cols, figsize=(10, 2.4 * rows), squeeze=False)
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
            scales = np.linspace(0.0, 1.6, 7)
            p = []
            for s in scales:
                pr = predict_test(net, {n: q * s for n, q in flows.items()}, [str(net.node_ids[gauge])],
                                  roughness=rough, source_head=heads, solver=solver)[0]
                p.append(pr.residual)
            gh = units.head_to_pressure(t.gauge_height[sel[0]])
            ax.plot(units.from_si(total * scales, "flow", fu), conv(np.array(p) - gh), color="tab:blue")
            for i in sel[t.node[sel] == gauge]:
                q_obs = 0.0 if t.kind[i] == "static" else total
                ax.scatter([units.from_si(q_obs, "flow", fu)], [conv(t.pressure[i])],
                           color="black" if result.flag[i] else "tab:orange",
                           marker="x" if result.flag[i] else "o", zorder=3)
            ax.set_title(f"{t.test_ids[k]} at {net.node_ids[gauge]}", fontsize=8)
            ax.tick_params(labelsize=7)
            ax.set_xlabel(f"flow [{fu}]", fontsize=7)
            ax.set_ylabel(f"[{pu}]", fontsize=7)
        for k in range(n_show, rows * cols):
            axes[k // cols][k % cols].set_axis_off()
        fig.suptitle("Hydrant curves: calibrated model (line) and readings (dots) at the first gauge")
        fig.tight_layout()
        out["hydrant curves"] = _png(fig)
    return out


def _table(headers, rows) -> str:
    head = "".join(f"<th>{html.escape(str(h))}</th>" for h in headers)
    body = "".join("<tr>" + "".join(f"<td>{html.escape(str(c))}</td>" for c in r) + "</tr>"
                   for r in rows)
    return f"<table><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>"


def _fmt(v, digits=1) -> str:
    return f"{v:.{digits}f}" if np.isfinite(v) else "undetermined"


def render(result, system: str = "us", curves: bool = True) -> str:
    """The report as one HTML string."""
    from calib.calibration.export import groups_frame, other_parameters_frame
    t, net, est = result.tests, result.network, result.estimate
    pu = units.display_unit("pressure", system)
    e = html.escape
    parts = [
        "<!DOCTYPE html><html lang='en'><head><meta charset='utf-8'>",
        f"<title>C-factor calibration - {e(str(net.name))}</title><style>"
        "body{font-family:sans-serif;max-width:1000px;margin:1em auto;padding:0 1em;color:#222}"
        "table{border-collapse:collapse;margin:.5em 0;font-size:90%}"
        "td,th{border:1px solid #bbb;padding:2px 6px;text-align:left}"
        ".caution{border-left:4px solid #c60;background:#fff4e8;padding:.4em 1em}"
        "img{max-width:100%}</style></head><body>",
        f"<h1>C-factor calibration: {e(str(net.name))}</h1>",
        f"<p>Generated {e(_dt.datetime.now().strftime('%Y-%m-%d %H:%M'))} from "
        f"{t.n_tests} tests and {t.n_readings} readings ({int(est.used.sum())} used) in "
        f"<code>{e(str(t.folder))}</code>. Groups: {e(str(result.options.get('group_by')))}; "
        f"prior: {e(str(result.options.get('prior')))}; C bounds "
        f"{e(str(result.options.get('c_bounds')))}; loss: {e(str(result.options.get('loss')))}.</p>",
        "<div class='caution'><b>Cautions.</b><ul>" + "".join(f"<li>{e(c)}</li>" for c in CAUTIONS)
        + "</ul></div>",
        "<h2>Groups</h2>",
    ]
    gf = groups_frame(result)
    rows = []
    for i, r in gf.iterrows():
        rows.append([r["group"], _fmt(r["c_factor"]), f"{_fmt(r['c_low'])} - {_fmt(r['c_high'])}",
                     int(r["n_pipes"]), _fmt(r["model_c"]),
                     "-" if result.prior is None else f"{r['prior_c']:.0f} +/- {r['prior_spread']:.0f}",
                     r["status"] + (f" ({result.informed[i]:.0%})" if result.prior is not None else ""),
                     _fmt(r["c_all_readings"]) if "c_all_readings" in gf else "-"])
    parts.append(_table(["group", "C", "95 % interval", "pipes", "model C before", "prior (1 sd)",
                         "informed by the tests", "C with every reading"], rows))
    other = other_parameters_frame(result)
    if len(other):
        parts.append(_table(list(other.columns), other.values.tolist()))
    if result.prior is not None:
        parts.append(f"<p>Prior: {e(result.prior.source)}.</p>")
    parts.append("<h2>Findings</h2><ul>" + "".join(f"<li>{e(f)}</li>" for f in result.findings)
                 + "</ul>")
    names = [q.name for q in result.params]
    if len(names) > 1:
        corr_rows = [[names[i]] + [("-" if not np.isfinite(v) else f"{v:+.2f}") for v in result.corr[i]]
                     for i in range(len(names))]
        parts.append("<h3>Parameter correlation</h3>" + _table([""] + names, corr_rows))
    if result.move_together:
        parts.append("<p>Parameters that move together (|r| &gt; 0.9): " + e(", ".join(
            f"{a} / {b} ({r:+.2f})" for a, b, r in result.move_together)) + ".</p>")
    rmse = units.from_si(result.rmse, "pressure", pu)
    parts.append(f"<h2>Fit statistics</h2><p>RMSE of pressures {rmse:.2f} {pu} over "
                 f"{int(est.used.sum())} readings; weighted sum of squares {est.chi2:.1f} on "
                 f"{est.dof} degrees of freedom; intervals "
                 + (f"scaled by s<sup>2</sup> = {est.s2:.2f} (chi-square test rejects the stated sigma)"
                    if est.scaled else "from the stated gauge sigma (chi-square test does not reject it)")
                 + f"; t quantile {est.t:.3f}. Largest head loss across the system in a static "
                 f"snapshot {units.from_si(result.max_headloss, 'head', units.display_unit('head', system)):.1f} "
                 f"{units.display_unit('head', system)}.</p>")
    parts.append(_table(["criterion", "source", "required", "achieved", "met"],
                        [[c.label, c.source, f"{c.required:.0%}", f"{c.achieved:.0%}",
                          "yes" if c.passed else "no"] for c in result.criteria]))
    flagged = [i for i, f in enumerate(result.flag) if f]
    parts.append("<h2>Flagged readings</h2>")
    if flagged:
        parts.append(_table(["test", "node", "kind", f"observed [{pu}]", f"simulated [{pu}]",
                             "standardized", "reason"],
                            [[t.test_ids[t.test[i]], net.node_ids[t.node[i]], t.kind[i],
                              f"{units.from_si(t.pressure[i], 'pressure', pu):.1f}",
                              f"{units.from_si(result.simulated[i], 'pressure', pu):.1f}",
                              f"{result.z[i]:+.1f}", result.flag[i]] for i in flagged]))
    else:
        parts.append("<p>None.</p>")
    parts.append("<h2>Plots</h2>")
    for title, png in _plots(result, system, curves).items():
        parts.append(f"<h3>{e(title.capitalize())}</h3><img alt='{e(title)}' "
                     f"src='data:image/png;base64,{png}'>")
    if not t.info.empty:
        parts.append("<h2>Tests</h2>" + _table(list(t.info.columns), t.info.values.tolist()))
    parts.append(
        "<h2>Method</h2><p>Each test gives a static snapshot (normal demand) and a residual snapshot "
        "(normal demand plus the test's flows); both kinds of reading are fitted (static readings "
        "inform source grades and demand more than C). Readings become hydraulic grades: HGL = "
        "pressure head + node elevation + gauge height (water at 60 degF, 1 psi = 2.309 ft). One "
        "Hazen-Williams C per group by bounded weighted least squares (scipy.optimize.least_squares, "
        "trust-region reflective; after Lansey and Basnet 1991), the Jacobian by implicit "
        "differentiation of the Todini and Pilati (1988) global gradient equations at each converged "
        "snapshot. Covariance s<sup>2</sup> (J<sup>T</sup>WJ)<sup>-1</sup> by an SVD pseudo-inverse "
        "(Bard 1974); 95 % intervals with the t quantile. Flags: face checks, standardized residuals "
        "with leverage, Cook's distance (Cook 1977) and leave-one-out refits; readings beyond the "
        "threshold are left out one at a time and the fit repeated. Accuracy criteria: WRc (1989) "
        "Network Analysis - A Code of Practice, and the AWWA ECAC (1999) calibration guidelines, "
        "both quoted from memory.</p>")
    parts.append("</body></html>")
    return "\n".join(parts)


def write_report(result, out, system: str = "us", curves: bool = True) -> Path:
    """Write ``OUT/report.html`` atomically and return its path."""
    path = Path(out) / "report.html"
    return fileio.write_text(path, render(result, system, curves))
