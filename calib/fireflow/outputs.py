"""Outputs of a fire-flow scan: fireflow.csv, fireflow.geojson and fireflow.html (map, table, cautions).

Units at the edge only: ``us`` (psi, gpm) or ``si`` (kPa, L/s). The map is an inline SVG drawn from
the network's own coordinates (no map tiles, works offline); hydrants are coloured by an available-
flow band of this project (``BANDS``), with their figures on hover and in the table below. Everything
is written atomically through ``calib.fileio``.
"""

from __future__ import annotations

import datetime as _dt
import html
import json
import math
from pathlib import Path

import numpy as np
import pandas as pd

from calib import fileio, units

CAUTIONS = (
    "These are model estimates, not measurements: they are only as good as the network data, the "
    "C-factors, the demands, tank levels, pump and valve settings assumed.",
    "They do not replace hydrant flow tests, the local codes, the authority having jurisdiction or a "
    "licensed engineer's review; do not use them alone for fire-protection design.",
    "A closed or throttled valve unknown to the model, a smaller main or higher demand makes the "
    "real flow lower than shown.",
    "Flowing a hydrant to check these figures: open and close slowly (water hammer), control "
    "traffic and the water's path, expect discoloured water, and tell the utility and the fire "
    "service first.",
)

#: Available-flow bands of the map [gpm, lower bound inclusive] and their colours (this project's
#: own palette; not a marking scheme).
BANDS = ((0.0, "#8c2d04"), (500.0, "#d94801"), (1000.0, "#fdae6b"), (1500.0, "#9ecae1"),
         (2500.0, "#4292c6"), (5000.0, "#08306b"))
NO_FIGURE = "#9a9a9a"


def _units(system: str):
    u = units.DISPLAY[system]
    return u["pressure"], u["flow"]


def frame(flows, system: str = "us") -> pd.DataFrame:
    """The fireflow.csv table: one row per hydrant, in the display units of ``system``."""
    pu, fu = _units(system)
    p = lambda v: np.round(units.from_si(np.array(v, float), "pressure", pu), 1)  # noqa: E731
    q = lambda v: np.round(units.from_si(np.array(v, float), "flow", fu), 0 if fu == "gpm" else 1)  # noqa: E731
    return pd.DataFrame({
        "node": [f.node for f in flows],
        f"static [{pu}]": p([f.static for f in flows]),
        f"flow_at_residual [{fu}]": q([f.flow_at_residual for f in flows]),
        f"flow_system [{fu}]": q([f.flow_system for f in flows]),
        "limiting_node": [f.limiting_node for f in flows],
        "zone": [f.zone for f in flows],
        f"available [{fu}]": q([f.available for f in flows]),
        f"low [{fu}]": q([f.low for f in flows]),
        f"high [{fu}]": q([f.high for f in flows]),
        "class": [f.hydrant_class for f in flows],
        "note": [f.note for f in flows],
    })


def band(available_gpm: float) -> tuple[str, str]:
    """(label, colour) of the band of an available flow [gpm]."""
    if not math.isfinite(available_gpm):
        return "no figure", NO_FIGURE
    label, colour = "", NO_FIGURE
    for k, (lower, c) in enumerate(BANDS):
        if available_gpm >= lower:
            upper = BANDS[k + 1][0] if k + 1 < len(BANDS) else None
            label = (f"{lower:.0f} gpm or more" if upper is None
                     else f"{lower:.0f} - {upper:.0f} gpm")
            colour = c
    return label, colour


def _cells(table: pd.DataFrame):
    """Rows as dicts: a missing figure as '', whole gpm as an int (a column with a missing figure
    is float in pandas: 5017, not 5017.0)."""
    for rec in table.to_dict("records"):
        yield {k: ("" if isinstance(v, float) and not math.isfinite(v)
                   else int(v) if isinstance(v, float) and k.endswith("[gpm]") else v)
               for k, v in rec.items()}


def write_csv(flows, path, system: str = "us") -> Path:
    return fileio.write_csv(path, frame(flows, system))


def write_geojson(network, flows, path, system: str = "us") -> Path:
    """Hydrants as GeoJSON points with the CSV's properties; coordinates in ft (us) or m (si)."""
    unit = "ft" if system == "us" else "m"
    to_map = lambda v: units.from_si(np.asarray(v, float), "length", unit)  # noqa: E731
    features = []
    for f, props in zip(flows, _cells(frame(flows, system))):
        i = network.node_index[f.node]
        x, y = float(to_map(network.x[i])), float(to_map(network.y[i]))
        geometry = ({"type": "Point", "coordinates": [x, y]}
                    if math.isfinite(x) and math.isfinite(y) else None)
        features.append({"type": "Feature", "geometry": geometry, "properties": props})
    body = ",\n".join(json.dumps(f, separators=(",", ":")) for f in features)
    return fileio.write_text(path, '{"type": "FeatureCollection", "name": "fire flow", '
                                   f'"length_unit": "{unit}", "features": [\n{body}\n]}}\n')


def _svg(network, flows, system: str) -> str:
    x, y = network.x, network.y
    ok = np.isfinite(x) & np.isfinite(y)
    if not ok.any():
        return "<p>The network has no coordinates: no map.</p>"
    x0, x1, y0, y1 = x[ok].min(), x[ok].max(), y[ok].min(), y[ok].max()
    span = max(x1 - x0, y1 - y0, 1e-9)
    W = 900.0
    s = (W - 40) / span
    H = (y1 - y0) * s + 40
    px = lambda v: 20 + (v - x0) * s  # noqa: E731
    py = lambda v: H - 20 - (v - y0) * s  # noqa: E731
    parts = [f"<svg viewBox='0 0 {W:.0f} {H:.0f}' width='100%' role='img' "
             "aria-label='network map with hydrants coloured by available flow'>"]
    f, t = network.pipe_from, network.pipe_to
    for a, b, d in zip(f, t, network.diameter):
        if ok[a] and ok[b]:
            w = 0.6 + 2.5 * min(d / 0.6, 1.0)
            parts.append(f"<line x1='{px(x[a]):.1f}' y1='{py(y[a]):.1f}' x2='{px(x[b]):.1f}' "
                         f"y2='{py(y[b]):.1f}' stroke='#b8b8b8' stroke-width='{w:.1f}'/>")
    for k in range(network.n_junctions, network.n_nodes):
        if ok[k]:
            parts.append(f"<rect x='{px(x[k]) - 6:.1f}' y='{py(y[k]) - 6:.1f}' width='12' "
                         f"height='12' fill='#333'><title>{html.escape(str(network.node_ids[k]))}"
                         " (source)</title></rect>")
    pu, fu = _units(system)
    for row, fl in zip(_cells(frame(flows, system)), flows):
        i = network.node_index[fl.node]
        if not ok[i]:
            continue
        _, colour = band(fl.available / units.GPM)
        tip = (f"{row['node']}: available {row[f'available [{fu}]']} {fu}"
               + (f" (95 % {row[f'low [{fu}]']} - {row[f'high [{fu}]']})" if row[f"low [{fu}]"] != "" else "")
               + f", static {row[f'static [{pu}]']} {pu}, limited by "
               + (row["limiting_node"] if fl.available == fl.flow_system else "its own residual")
               + (f", zone {row['zone']}" if row["zone"] else "")
               + (f"; {row['note']}" if row["note"] else ""))
        parts.append(f"<circle cx='{px(x[i]):.1f}' cy='{py(y[i]):.1f}' r='6' fill='{colour}' "
                     f"stroke='#222' stroke-width='0.8'><title>{html.escape(tip)}</title></circle>")
    parts.append("</svg>")
    return "".join(parts)


def _legend(system: str) -> str:
    items = []
    for k, (lower, colour) in enumerate(BANDS):
        label, _ = band(lower)
        if system == "si":
            upper = BANDS[k + 1][0] if k + 1 < len(BANDS) else None
            ls = lambda g: f"{g * units.GPM * 1000:.0f}"  # noqa: E731
            label += f" ({ls(lower)}{' - ' + ls(upper) if upper else ' or more'} L/s)"
        items.append(f"<span class='key'><i style='background:{colour}'></i>{html.escape(label)}</span>")
    items.append(f"<span class='key'><i style='background:{NO_FIGURE}'></i>no figure</span>")
    return "<p class='legend'>" + " ".join(items) + "</p>"


def render(network, flows, settings: dict, system: str = "us", failures=()) -> str:
    """The self-contained HTML page of a scan."""
    e = html.escape
    table = frame(flows, system)
    head = "".join(f"<th>{e(c)}</th>" for c in table.columns)
    body = "".join("<tr>" + "".join(f"<td>{e(str(v))}</td>" for v in rec.values()) + "</tr>"
                   for rec in _cells(table))
    fu = _units(system)[1]
    avail = table[f"available [{fu}]"].to_numpy(float)
    n_ok = int(np.isfinite(avail).sum())
    glance = (f"{len(flows)} hydrants; available flow from {np.nanmin(avail):.0f} to "
              f"{np.nanmax(avail):.0f} {fu} (median {np.nanmedian(avail):.0f})" if n_ok else
              f"{len(flows)} hydrants; no figures")
    parts = [
        "<!doctype html><html lang='en'><head><meta charset='utf-8'><title>Fire flow</title><style>",
        "body{font-family:sans-serif;max-width:1100px;margin:1em auto;padding:0 1em;color:#222}",
        ".caution{background:#fff4e0;border-left:4px solid #d94801;padding:.5em 1em}",
        "table{border-collapse:collapse;font-size:.85em}td,th{border:1px solid #ccc;padding:2px 6px}",
        ".key{margin-right:1em}.key i{display:inline-block;width:12px;height:12px;margin-right:4px;"
        "border:1px solid #222;vertical-align:middle}.fail{color:#8c2d04}",
        "</style></head><body><h1>Fire flow available from the model</h1>",
        "<div class='caution'><ul>" + "".join(f"<li>{e(c)}</li>" for c in CAUTIONS) + "</ul></div>",
        f"<p>{e(glance)}.</p>",
    ]
    if failures:
        parts.append("<p class='fail'>Not computed: " + "; ".join(e(str(f)) for f in failures)
                     + "</p>")
    parts += ["<h2>Map</h2>", _legend(system), _svg(network, flows, system),
              "<p>Hover a hydrant for its figures. Colours are this tool's own bands of available "
              "flow; the class column is the NFPA 291 class of the available flow.</p>",
              "<h2>Settings</h2><ul>"
              + "".join(f"<li>{e(k)}: {e(str(v))}</li>" for k, v in settings.items()) + "</ul>",
              f"<h2>Hydrants</h2><table><tr>{head}</tr>{body}</table>",
              "<h2>Method</h2><p>Static: the pressure in the scan's loading. Flow at residual: the "
              "hydrant junction is held at its elevation plus the target residual as a fixed grade; "
              "one steady-state solve (global gradient method, Todini and Pilati 1988) gives its "
              "draw. System flow: the draw at which the lowest pressure at any other junction of "
              "its zone reaches the system minimum, found by a short search extrapolating each "
              "junction's pressure drop as a power of the draw (Q^1.852, Hazen-Williams, then the "
              "power fitted through the last two solves), and the junction that limits "
              "it; unless the run's settings say 'every hydrant', it is searched only where it can "
              "limit: where the held solve shows every other junction of the zone above the "
              "minimum, pressures being higher still at any smaller draw, the system flow is "
              "larger and is left empty. Available: the smaller. Interval: the C covariance of the fit propagated to "
              "first order through the analytic sensitivities (JCGM 100:2008, 5.1.2), "
              "+/- 1.96 sd.</p>",
              f"<p>Written {_dt.datetime.now(_dt.timezone.utc):%Y-%m-%d %H:%M} UTC.</p>",
              "</body></html>"]
    return "\n".join(parts)


def write_html(network, flows, path, settings: dict, system: str = "us", failures=()) -> Path:
    return fileio.write_text(path, render(network, flows, settings, system, failures))
