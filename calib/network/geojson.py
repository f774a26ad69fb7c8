"""A network as one GeoJSON FeatureCollection (RFC 7946): reading it, and writing one (e.g. calibrated C).

Point features are nodes (property ``kind``: ``junction``, or ``source`` / ``reservoir`` / ``tank``),
LineString features are pipes (``kind`` ``pipe``, the default), pumps (``kind`` ``pump``) or control
valves (``kind`` ``valve``, the columns of ``valves.csv``). Other
properties carry the same names as the CSV columns, units in brackets (``"elevation [ft]"``).

Coordinates: by RFC 7946 they are WGS84 longitude, latitude [degrees]. A file in a projected map grid
says so with a top-level member ``"length_unit": "ft"`` (or ``"m"``, any pint length); then
coordinates are read as lengths and kept in metres. A pipe's length is its ``length [..]`` property
when present, else the length of its line: the sum of straight segments in a projected grid, or the
haversine great-circle length on a sphere of radius 6 371 008.8 m for longitude/latitude.

Problems are reported like the CSV ones; ``row`` is then the feature's position in the ``features``
array counting from 1.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np

from calib import fileio, limits
from calib.errors import NetworkError, Problem
from calib.network import pump_curve, validate
from calib.network.model import Network
from calib.network.tables import NetworkTables, parse_table, valve_columns
from calib.units import DISPLAY, from_si, unit_factor

#: Mean Earth radius R1 of the IUGG [m] (Moritz, "Geodetic Reference System 1980", Bulletin
#: Geodesique 54 (1980), the mean radius of the GRS80 ellipsoid, 6371008.8 m).
EARTH_RADIUS = 6371008.8
NODE_KINDS = {"junction": "junction", "source": "reservoir", "reservoir": "reservoir",
              "tank": "tank"}
LINK_KINDS = ("pipe", "pump", "valve")


def haversine_length(lon, lat, radius: float = EARTH_RADIUS) -> float:
    """Great-circle length [m] of a polyline of longitude/latitude vertices [degrees].

    Haversine formula on a sphere of ``radius`` [m] (Sinnott, "Virtues of the haversine",
    Sky and Telescope 68(2), 1984, p. 159): for each segment
    ``d = 2 R asin(sqrt(sin^2(dphi/2) + cos(phi1) cos(phi2) sin^2(dlambda/2)))``, summed.
    Example: one degree of latitude along a meridian is ``pi R / 180`` = 111 195.08 m.
    """
    lam, phi = np.radians(np.asarray(lon, float)), np.radians(np.asarray(lat, float))
    a = (np.sin(np.diff(phi) / 2) ** 2
         + np.cos(phi[:-1]) * np.cos(phi[1:]) * np.sin(np.diff(lam) / 2) ** 2)
    return float(np.sum(2 * radius * np.arcsin(np.sqrt(np.clip(a, 0.0, 1.0)))))


def planar_length(x, y) -> float:
    """Length of a polyline of map-grid vertices (same unit as x, y): sum of straight segments."""
    return float(np.sum(np.hypot(np.diff(np.asarray(x, float)), np.diff(np.asarray(y, float)))))


def _positions(geometry, want: str):
    """Vertices of a geometry of type ``want`` as an (n, 2) array; None when absent; raises ValueError."""
    if geometry is None:
        return None
    if not isinstance(geometry, dict) or geometry.get("type") != want:
        got = geometry.get("type") if isinstance(geometry, dict) else type(geometry).__name__
        raise ValueError(f"the geometry is a {got}, not a {want}")
    coords = geometry.get("coordinates")
    try:
        array = np.asarray([coords] if want == "Point" else coords, dtype=float)
    except (TypeError, ValueError):
        raise ValueError("the coordinates are not numbers") from None
    if array.ndim != 2 or array.shape[1] < 2 or not np.all(np.isfinite(array)):
        raise ValueError("the coordinates are not positions [x, y]")
    if want == "LineString" and len(array) < 2:
        raise ValueError("a LineString needs at least two positions")
    return array[:, :2]


def _lon_lat(vertices: np.ndarray) -> bool:
    """True when every vertex can be WGS84 longitude, latitude (RFC 7946) [degrees]."""
    lon, lat = vertices[:, 0], vertices[:, 1]
    return bool(np.all(np.abs(lon) <= limits.LONGITUDE.high) and
                np.all(np.abs(lat) <= limits.LATITUDE.high))


def _article(word: str) -> str:
    return "an" if word[:1] in "aeiou" else "a"


class _Collector:
    """The features of one table (row number, properties), turned into raw columns at the end."""

    def __init__(self):
        self.rows: list[int] = []
        self.records: list[dict] = []

    def add(self, row: int, properties: dict) -> None:
        self.rows.append(row)
        self.records.append(properties)

    def parse(self, file, table, problems):
        headers = list(dict.fromkeys(key for record in self.records for key in record))
        cells = [[record.get(h) for record in self.records] for h in headers]
        return parse_table(file, table, headers, cells, self.rows, problems, header_row=None)


def _length_header(properties: dict) -> bool:
    return any(key.split("[")[0].strip().lower() == "length" for key in properties)


def read_geojson(path) -> Network:
    """Read a network from a GeoJSON FeatureCollection; raises ``NetworkError`` listing every problem."""
    path = Path(path)
    file = path.name
    try:
        data = json.loads(path.read_text(encoding="utf-8-sig"))
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise NetworkError(Problem(f"cannot be read as GeoJSON: {exc}", file=file)) from None
    except RecursionError:
        raise NetworkError(Problem("cannot be read as GeoJSON: it is nested too deeply", file=file,
                                   expected="a FeatureCollection of features with flat "
                                   "properties")) from None
    try:
        return _read_collection(path, file, data)
    except RecursionError:  # a property value nested very deep, met when it is turned into text
        raise NetworkError(Problem("a property is nested too deeply", file=file,
                                   expected="properties holding numbers and text")) from None


def _read_collection(path: Path, file: str, data) -> Network:
    if not isinstance(data, dict) or data.get("type") != "FeatureCollection" or \
            not isinstance(data.get("features"), list):
        raise NetworkError(Problem("is not a GeoJSON FeatureCollection", file=file,
                                   expected='{"type": "FeatureCollection", "features": [...]}'))
    problems: list[Problem] = []
    scale = None  # metres per coordinate unit; None = longitude/latitude
    outside: list[int] = []  # features whose coordinates are no longitude/latitude
    if data.get("length_unit") is not None:
        try:
            scale = unit_factor(str(data["length_unit"]), "length")
        except ValueError as exc:
            problems.append(Problem(f"length_unit: {exc}", file=file, field="length_unit",
                                    expected="ft or m"))
            scale = 1.0
    tables = {name: _Collector() for name in ("junctions", "sources", "pipes", "pumps", "valves")}
    geometry = {"pipes": [], "pumps": [], "valves": []}
    for row, feature in enumerate(data["features"], start=1):
        _read_feature(file, row, feature, scale, tables, geometry, problems, outside)
    if outside:
        shown = ", ".join(map(str, outside[:5])) + (", ..." if len(outside) > 5 else "")
        problems.append(Problem(
            f"{len(outside)} feature(s) (rows {shown}) have coordinates outside longitude "
            f"-180..180 / latitude -90..90, and the file gives no length_unit", file=file,
            field="length_unit", expected='a top-level "length_unit": "ft" (or "m") for a file '
            "in map-grid coordinates, or WGS84 longitude/latitude (RFC 7946)"))
        raise NetworkError(problems)  # lengths measured on such coordinates would only add noise
    parsed = {name: c.parse(file, name, problems) for name, c in tables.items()
              if name not in ("pumps", "valves") or c.rows}
    network_tables = NetworkTables(parsed["junctions"], parsed["sources"], parsed["pipes"],
                                   parsed.get("pumps"), parsed.get("valves"))
    name = path.stem if path.stem != "network" else (path.parent.name or "network")
    return validate.assemble(network_tables, problems, name=name,
                             pipe_geometry=geometry["pipes"])


def _read_feature(file, row, feature, scale, tables, geometry, problems, outside) -> None:
    """Sort one feature into its table, with its coordinates (nodes) or vertices and length (links).

    ``outside`` collects the rows of features whose coordinates cannot be longitude/latitude.
    """
    if not isinstance(feature, dict) or feature.get("type") != "Feature":
        problems.append(Problem("is not a GeoJSON Feature", file=file, row=row))
        return
    raw = feature.get("properties")
    if raw is not None and not isinstance(raw, dict):
        problems.append(Problem(f"the properties are {_article(type(raw).__name__)} "
                                f"{type(raw).__name__}, not an object", file=file, row=row,
                                field="properties", expected='an object {"id": ..., ...}'))
        return
    props = dict(raw or {})
    kind = str(props.pop("kind", "") or "").strip().lower()
    shape = (feature.get("geometry") or {}).get("type") if isinstance(
        feature.get("geometry"), dict) else None
    if not kind:
        kind = "pipe" if shape == "LineString" else ""
    ident = str(props.get("id", "") or "") or None
    if kind not in NODE_KINDS and kind not in LINK_KINDS:
        problems.append(Problem(f"kind '{kind}' is not known" if kind else "the feature has no kind",
                                file=file, row=row, id=ident, field="kind",
                                expected="junction, source (reservoir or tank), pipe, pump or valve"))
        return
    want = "Point" if kind in NODE_KINDS else "LineString"
    try:
        vertices = _positions(feature.get("geometry"), want)
    except ValueError as exc:
        problems.append(Problem(str(exc), file=file, row=row, id=ident, field="geometry",
                                expected=f"a {want} geometry"))
        vertices = None
    if scale is None and vertices is not None and not _lon_lat(vertices):
        outside.append(row)  # one problem for the file, after the features (read on as they are)
    factor = 1.0 if scale is None else scale
    if kind in NODE_KINDS:
        if kind != "junction":
            props["kind"] = props.pop("source_kind", None) or NODE_KINDS[kind]
        props["x"], props["y"] = (None, None) if vertices is None else vertices[0] * factor
        tables["junctions" if kind == "junction" else "sources"].add(row, props)
        return
    table = {"pipe": "pipes", "pump": "pumps", "valve": "valves"}[kind]
    line = None if vertices is None else [tuple(map(float, v)) for v in vertices * factor]
    if kind == "pipe" and not _length_header(props):
        if vertices is None:
            problems.append(Problem("the pipe has no length property and no line to measure",
                                    file=file, row=row, id=ident, field="length",
                                    expected="a 'length [ft]' property or a LineString"))
        elif scale is None:
            props["length [m]"] = haversine_length(vertices[:, 0], vertices[:, 1])
        else:
            props["length [m]"] = planar_length(vertices[:, 0], vertices[:, 1]) * scale
    geometry[table].append(line)
    tables[table].add(row, props)


# --- writing -------------------------------------------------------------------------------------

def _clean(value):
    """A JSON-safe scalar: NaN becomes null, numpy scalars become Python ones."""
    if isinstance(value, (np.floating, float)):
        return None if not math.isfinite(float(value)) else float(value)
    if isinstance(value, np.integer):
        return int(value)
    if isinstance(value, np.bool_):
        return bool(value)
    return value


def _column(values) -> list:
    """A column as JSON-safe Python values (NaN -> null)."""
    return [_clean(v) for v in np.asarray(values).tolist()]


def _records(columns: dict) -> list[dict]:
    """Per-row property dicts from columns of equal length (conversions done column-wise)."""
    names = list(columns)
    return [dict(zip(names, row)) for row in zip(*(columns[n] for n in names))]


def _points(network: Network, to_map) -> list:
    x, y = to_map(network.x).tolist(), to_map(network.y).tolist()
    return [{"type": "Point", "coordinates": [a, b]} if math.isfinite(a) and math.isfinite(b)
            else None for a, b in zip(x, y)]


def _lines(network: Network, frm, to, to_map, geometry=None) -> list:
    """LineStrings from the kept vertices, else straight from node to node (None without x/y)."""
    ends = np.stack([network.x[frm], network.y[frm], network.x[to], network.y[to]], axis=1)
    ends = to_map(ends).tolist()
    lines = []
    for k, (x0, y0, x1, y1) in enumerate(ends):
        if geometry is not None and geometry[k]:
            coords = to_map(np.asarray(geometry[k], dtype=float)).tolist()
        else:
            coords = [[x0, y0], [x1, y1]]
        ok = all(math.isfinite(c) for pair in coords for c in pair)
        lines.append({"type": "LineString", "coordinates": coords} if ok else None)
    return lines


def network_features(network: Network, units: str = "us", length_unit: str | None = "ft") -> dict:
    """The FeatureCollection of ``network`` as a dict (see ``write_network_geojson``)."""
    u = DISPLAY[units]
    to_map = (lambda v: np.asarray(v, float)) if length_unit is None else \
        (lambda v: from_si(np.asarray(v, float), "length", length_unit))
    nj, ids = network.n_junctions, network.node_ids.astype(str)
    elevation = from_si(network.elevation, "elevation", u["elevation"])
    junctions = _records({
        "id": ids[:nj].tolist(), "kind": ["junction"] * nj,
        f"elevation [{u['elevation']}]": _column(elevation[:nj]),
        f"demand [{u['flow']}]": _column(from_si(network.demand, "flow", u["flow"])),
        "hydrant": np.where(network.hydrant, "yes", "no").tolist(),
        "zone": network.zone[:nj].tolist()})
    sources = _records({
        "id": ids[nj:].tolist(), "kind": ["source"] * network.n_sources,
        "source_kind": network.source_kind.tolist(),
        f"head [{u['head']}]": _column(from_si(network.source_head, "head", u["head"])),
        f"elevation [{u['elevation']}]": _column(elevation[nj:]),
        "zone": network.zone[nj:].tolist(),
        f"floor [{u['elevation']}]": _column(from_si(network.source_floor, "elevation",
                                                     u["elevation"])),
        f"level_max [{u['head']}]": _column(from_si(network.source_level_max, "head", u["head"]))})
    for props in sources:  # a tank's floor and depth only where the network gives them
        for key in [k for k, v in props.items() if k.startswith(("floor ", "level_max ")) and v is None]:
            del props[key]
    points = _points(network, to_map)
    features = [_feature(g, p) for g, p in zip(points, junctions + sources)]
    features += _pipe_features(network, units, to_map)
    features += _pump_features(network, units, to_map)
    features += _valve_features(network, units, to_map)
    collection = {"type": "FeatureCollection", "name": network.name}
    if length_unit is not None:
        collection["length_unit"] = length_unit
    collection["features"] = features
    return collection


def _feature(geometry, props) -> dict:
    return {"type": "Feature", "geometry": geometry, "properties": props}


def _pipe_features(network: Network, units: str, to_map) -> list[dict]:
    u = DISPLAY[units]
    ids = network.node_ids.astype(str)
    words = np.array(["open", "closed", "check"], dtype=object)  # indexed by PipeStatus code
    rh_unit = "mm" if units == "si" else "in"
    props = _records({
        "id": network.pipe_ids.astype(str).tolist(), "kind": ["pipe"] * network.n_pipes,
        "from": ids[network.pipe_from].tolist(), "to": ids[network.pipe_to].tolist(),
        f"length [{u['length']}]": _column(from_si(network.length, "length", u["length"])),
        f"diameter [{u['diameter']}]": _column(from_si(network.diameter, "diameter",
                                                       u["diameter"])),
        "roughness": _column(network.roughness), "group": network.group.tolist(),
        "material": network.material.tolist(), "installed": _column(network.installed),
        "status": words[network.status].tolist(), "minor_loss": _column(network.minor_loss),
        f"roughness_height [{rh_unit}]": _column(from_si(network.roughness_height, "length",
                                                         rh_unit))})
    lines = _lines(network, network.pipe_from, network.pipe_to, to_map, network.pipe_geometry)
    return [_feature(g, p) for g, p in zip(lines, props)]


def _pump_features(network: Network, units: str, to_map) -> list[dict]:
    """Pumps as three points of their curve (``pump_curve.curve_points``)."""
    u, pumps = DISPLAY[units], network.pumps
    if len(pumps) == 0:
        return []
    ids = network.node_ids.astype(str)
    columns = {"id": pumps.ids.astype(str).tolist(), "kind": ["pump"] * len(pumps),
               "from": ids[pumps.from_node].tolist(), "to": ids[pumps.to_node].tolist()}
    points = pump_curve.curve_points(pumps.shutoff_head, pumps.curve_r, pumps.curve_n)
    for i, (q, h) in enumerate(points, start=1):
        columns[f"head_{i} [{u['head']}]"] = _column(from_si(h, "head", u["head"]))
        columns[f"flow_{i} [{u['flow']}]"] = _column(from_si(q, "flow", u["flow"]))
    columns["speed"] = _column(pumps.speed)
    lines = _lines(network, pumps.from_node, pumps.to_node, to_map)
    return [_feature(g, p) for g, p in zip(lines, _records(columns))]


def _valve_features(network: Network, units: str, to_map) -> list[dict]:
    """Valves with the columns of ``valves.csv`` (``tables.valve_columns``), straight lines."""
    if len(network.valves) == 0:
        return []
    given = {name: np.asarray(values) for name, values in valve_columns(network, units).items()}
    columns = {"id": given["id"].tolist(), "kind": ["valve"] * len(network.valves)}
    columns.update({name: _column(values) if values.dtype.kind == "f" else values.tolist()
                    for name, values in given.items() if name != "id"})
    lines = _lines(network, network.valves.from_node, network.valves.to_node, to_map)
    return [_feature(g, p) for g, p in zip(lines, _records(columns))]


def write_network_geojson(network: Network, path, units: str = "us",
                          length_unit: str | None = "ft") -> Path:
    """Write ``network`` as a GeoJSON FeatureCollection, atomically (e.g. to share calibrated C).

    ``units`` chooses the property units (``us``: ft, in, gpm; ``si``: m, mm, L/s). Coordinates
    (``Network.x/y`` and pipe vertices) are written in ``length_unit`` with a top-level
    ``"length_unit"`` member; pass ``None`` for a network read as longitude/latitude, whose
    coordinates are written as they are. Every pipe carries its ``length`` property, so a read back
    gives the same lengths whatever the geometry.
    """
    collection = network_features(network, units, length_unit)
    features = collection.pop("features")
    head = json.dumps(collection)[:-1]  # one feature a line: small files, readable diffs
    body = ",\n".join(json.dumps(f, separators=(",", ":")) for f in features)
    return fileio.write_text(path, f'{head}, "features": [\n{body}\n]}}\n')
