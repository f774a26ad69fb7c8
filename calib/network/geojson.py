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
#
# Each kind of feature is built as a table (``_Table``): its geometries and its properties by
# column.
# ``network_features`` turns the tables into dicts; ``write_network_geojson`` writes the same text
# json.dumps writes for each of those dicts (``separators=(",", ":")``, ASCII), but encodes a column
# at a time (``_texts``) and joins pre-formatted strings: a third of the time on the 7,938-pipe grid
# (benchmarks/README.md, "C4"); tests/network/test_geojson_text.py holds it to json.dumps byte for
# byte.

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
    array = np.asarray(values)
    if array.dtype.kind == "f":  # the common case, without a call per value: the same values
        out = array.astype(float).tolist()
        for i in np.flatnonzero(~np.isfinite(array)).tolist():
            out[i] = None
        return out
    return [_clean(v) for v in array.tolist()]


_encode_string = json.encoder.encode_basestring_ascii  # what json.dumps uses (ensure_ascii)
_compact = json.JSONEncoder(separators=(",", ":"))


def _text(value) -> str:
    """One value as json.dumps(value, separators=(",", ":")) writes it: the C encoder's order of
    checks (None, True, False, str, int, float; then lists, dicts) and its repr of numbers."""
    if value is None:
        return "null"
    if value is True:
        return "true"
    if value is False:
        return "false"
    if isinstance(value, str):
        return _encode_string(value)
    if isinstance(value, int):
        return int.__repr__(value)
    if isinstance(value, float) and math.isfinite(value):
        return float.__repr__(value)
    return _compact.encode(value)  # lists, dicts, NaN, and what json refuses (its own error)


def _texts(values: list) -> list[str]:
    """``_text`` of every value of a column; a column of floats or of text in one pass."""
    kinds = set(map(type, values))
    if kinds <= {float, type(None)} and all(math.isfinite(v) for v in values if v is not None):
        return _float_texts(values)
    if kinds <= {str}:
        return list(map(_encode_string, values))
    return list(map(_text, values))


def _float_texts(values) -> list[str]:
    """``float.__repr__`` of each value, "null" for None or a value that is not finite
    (``fileio.distinct_float_texts``: each distinct value formatted once)."""
    return fileio.distinct_float_texts(
        values, lambda v: float.__repr__(v) if math.isfinite(v) else "null")


class _Nodes:
    """Every node's map coordinates (lists of floats) and, made once for all the tables that
    draw from them, the text ``[x,y]`` of each (None where one is not finite)."""

    def __init__(self, x: list, y: list):
        self.x, self.y, self._texts = x, y, None

    def texts(self) -> list:
        if self._texts is None:
            self._texts = _pairs_text(self.x, self.y)
        return self._texts


def _pairs_text(x: list, y: list) -> list:
    """``"[x,y]"`` for each pair of finite floats, None where either is not finite."""
    tx, ty = _float_texts(x), _float_texts(y)
    return [None if a == "null" or b == "null" else f"[{a},{b}]" for a, b in zip(tx, ty)]


class _Geometry:
    """The geometries of one table: Points at ``nodes`` (``_Nodes``) numbered ``at_node``, or
    LineStrings straight from node ``at_node[k]`` to ``to_node[k]`` unless ``vertices[k]`` gives
    link k's line; in map units. A feature with a coordinate that is not finite has no geometry
    (null)."""

    def __init__(self, kind: str, nodes: _Nodes, at_node: list, to_node=None, vertices=None):
        self.kind, self.nodes, self.vertices = kind, nodes, vertices
        self.at_node, self.to_node = at_node, to_node

    def _kept(self, k: int):
        return self.vertices[k] if self.vertices is not None and self.vertices[k] else None

    def at(self, k: int):
        """Feature k's geometry as a dict (None where a coordinate is not finite)."""
        x, y, i = self.nodes.x, self.nodes.y, self.at_node[k]
        if self.kind == "Point":
            c = [x[i], y[i]]
            flat = c
        else:
            j = self.to_node[k]
            c = self._kept(k) or [[x[i], y[i]], [x[j], y[j]]]
            flat = [a for pair in c for a in pair]
        return {"type": self.kind, "coordinates": c} if all(map(math.isfinite, flat)) else None

    def dicts(self) -> list:
        return [self.at(k) for k in range(len(self.at_node))]

    def texts(self) -> list[str]:
        """``_text`` of each of ``dicts()``, made from the coordinates' texts."""
        head = '{"type":"%s","coordinates":' % self.kind
        pairs = self.nodes.texts()
        if self.kind == "Point":
            return ["null" if pairs[i] is None else head + pairs[i] + "}" for i in self.at_node]
        out = []
        for k, (i, j) in enumerate(zip(self.at_node, self.to_node)):
            kept = self._kept(k)
            if kept is None:
                line = [pairs[i], pairs[j]]
            elif all(len(v) == 2 for v in kept):
                line = _pairs_text([v[0] for v in kept], [v[1] for v in kept])
            else:  # vertices with more than x, y (no reader makes them): as json writes them
                out.append(_text(self.at(k)))
                continue
            out.append("null" if None in line else head + "[" + ",".join(line) + "]}")
        return out


class _Table:
    """One kind of feature: geometries and property columns (lists of JSON-safe values, in the
    order written); a property named in ``optional`` is left out of a feature where it is None."""

    def __init__(self, geometry: _Geometry, columns: dict, optional=()):
        self.geometry, self.columns, self.optional = geometry, columns, tuple(optional)

    def features(self) -> list[dict]:
        props = _records(self.columns)
        for p in props:
            for key in [k for k in self.optional if p.get(k, 0) is None]:
                del p[key]
        return [_feature(g, p) for g, p in zip(self.geometry.dicts(), props)]

    def texts(self) -> list[str]:
        """Each feature as json.dumps(feature, separators=(",", ":")) writes it."""
        cells = []
        for name, values in self.columns.items():
            key = _encode_string(name) + ":"
            texts = _texts(values)
            if name in self.optional:
                cells.append(["" if v is None else key + t for v, t in zip(values, texts)])
            else:
                cells.append([key + t for t in texts])
        if self.optional:
            props = [",".join(filter(None, row)) for row in zip(*cells)]
        else:
            props = list(map(",".join, zip(*cells)))
        return ['{"type":"Feature","geometry":' + g + ',"properties":{' + p + "}}"
                for g, p in zip(self.geometry.texts(), props)]


def _records(columns: dict) -> list[dict]:
    """Per-row property dicts from columns of equal length (conversions done column-wise)."""
    names = list(columns)
    return [dict(zip(names, row)) for row in zip(*(columns[n] for n in names))]


def _line_geometry(nodes: _Nodes, frm, to, to_map, vertices=None) -> _Geometry:
    """LineStrings from the kept vertices, else straight from node to node (null without x/y)."""
    if vertices is not None:
        vertices = [to_map(np.asarray(v, dtype=float)).tolist() if v else None for v in vertices]
    return _Geometry("LineString", nodes, np.asarray(frm).tolist(), np.asarray(to).tolist(),
                     vertices)


def _tables(network: Network, units: str, to_map) -> list[_Table]:
    """Junctions, sources, pipes, pumps and valves, in the order written."""
    u = DISPLAY[units]
    nj, ids = network.n_junctions, network.node_ids.astype(str)
    elevation = from_si(network.elevation, "elevation", u["elevation"])
    nodes = _Nodes(to_map(network.x).tolist(), to_map(network.y).tolist())
    junctions = _Table(_Geometry("Point", nodes, list(range(nj))), {
        "id": ids[:nj].tolist(), "kind": ["junction"] * nj,
        f"elevation [{u['elevation']}]": _column(elevation[:nj]),
        f"demand [{u['flow']}]": _column(from_si(network.demand, "flow", u["flow"])),
        "hydrant": np.where(network.hydrant, "yes", "no").tolist(),
        "zone": network.zone[:nj].tolist()})
    floor, level_max = f"floor [{u['elevation']}]", f"level_max [{u['head']}]"
    # a tank's floor and depth only where the network gives them
    sources = _Table(_Geometry("Point", nodes, list(range(nj, len(ids)))), {
        "id": ids[nj:].tolist(), "kind": ["source"] * network.n_sources,
        "source_kind": network.source_kind.tolist(),
        f"head [{u['head']}]": _column(from_si(network.source_head, "head", u["head"])),
        f"elevation [{u['elevation']}]": _column(elevation[nj:]),
        "zone": network.zone[nj:].tolist(),
        floor: _column(from_si(network.source_floor, "elevation", u["elevation"])),
        level_max: _column(from_si(network.source_level_max, "head", u["head"]))},
        optional=(floor, level_max))
    tables = [junctions, sources, _pipe_table(network, units, nodes, to_map)]
    if len(network.pumps):
        tables.append(_pump_table(network, units, nodes, to_map))
    if len(network.valves):
        tables.append(_valve_table(network, units, nodes, to_map))
    return tables


def _header(network: Network, length_unit: str | None) -> dict:
    collection = {"type": "FeatureCollection", "name": network.name}
    if length_unit is not None:
        collection["length_unit"] = length_unit
    return collection


def _to_map(length_unit: str | None):
    return (lambda v: np.asarray(v, float)) if length_unit is None else \
        (lambda v: from_si(np.asarray(v, float), "length", length_unit))


def network_features(network: Network, units: str = "us", length_unit: str | None = "ft") -> dict:
    """The FeatureCollection of ``network`` as a dict (see ``write_network_geojson``)."""
    collection = _header(network, length_unit)
    collection["features"] = [f for table in _tables(network, units, _to_map(length_unit))
                              for f in table.features()]
    return collection


def _feature(geometry, props) -> dict:
    return {"type": "Feature", "geometry": geometry, "properties": props}


def _pipe_table(network: Network, units: str, nodes: _Nodes, to_map) -> _Table:
    u = DISPLAY[units]
    ids = network.node_ids.astype(str)
    words = np.array(["open", "closed", "check"], dtype=object)  # indexed by PipeStatus code
    rh_unit = "mm" if units == "si" else "in"
    columns = {
        "id": network.pipe_ids.astype(str).tolist(), "kind": ["pipe"] * network.n_pipes,
        "from": ids[network.pipe_from].tolist(), "to": ids[network.pipe_to].tolist(),
        f"length [{u['length']}]": _column(from_si(network.length, "length", u["length"])),
        f"diameter [{u['diameter']}]": _column(from_si(network.diameter, "diameter",
                                                       u["diameter"])),
        "roughness": _column(network.roughness), "group": network.group.tolist(),
        "material": network.material.tolist(), "installed": _column(network.installed),
        "status": words[network.status].tolist(), "minor_loss": _column(network.minor_loss),
        f"roughness_height [{rh_unit}]": _column(from_si(network.roughness_height, "length",
                                                         rh_unit))}
    return _Table(_line_geometry(nodes, network.pipe_from, network.pipe_to, to_map,
                                 network.pipe_geometry), columns)


def _pump_table(network: Network, units: str, nodes: _Nodes, to_map) -> _Table:
    """Pumps as three points of their curve (``pump_curve.curve_points``)."""
    u, pumps = DISPLAY[units], network.pumps
    ids = network.node_ids.astype(str)
    columns = {"id": pumps.ids.astype(str).tolist(), "kind": ["pump"] * len(pumps),
               "from": ids[pumps.from_node].tolist(), "to": ids[pumps.to_node].tolist()}
    points = pump_curve.curve_points(pumps.shutoff_head, pumps.curve_r, pumps.curve_n)
    for i, (q, h) in enumerate(points, start=1):
        columns[f"head_{i} [{u['head']}]"] = _column(from_si(h, "head", u["head"]))
        columns[f"flow_{i} [{u['flow']}]"] = _column(from_si(q, "flow", u["flow"]))
    columns["speed"] = _column(pumps.speed)
    return _Table(_line_geometry(nodes, pumps.from_node, pumps.to_node, to_map), columns)


def _valve_table(network: Network, units: str, nodes: _Nodes, to_map) -> _Table:
    """Valves with the columns of ``valves.csv`` (``tables.valve_columns``), straight lines."""
    given = {name: np.asarray(values) for name, values in valve_columns(network, units).items()}
    columns = {"id": given["id"].tolist(), "kind": ["valve"] * len(network.valves)}
    columns.update({name: _column(values) if values.dtype.kind == "f" else values.tolist()
                    for name, values in given.items() if name != "id"})
    return _Table(_line_geometry(nodes, network.valves.from_node, network.valves.to_node,
                                 to_map), columns)


def write_network_geojson(network: Network, path, units: str = "us",
                          length_unit: str | None = "ft") -> Path:
    """Write ``network`` as a GeoJSON FeatureCollection, atomically (e.g. to share calibrated C).

    ``units`` chooses the property units (``us``: ft, in, gpm; ``si``: m, mm, L/s). Coordinates
    (``Network.x/y`` and pipe vertices) are written in ``length_unit`` with a top-level
    ``"length_unit"`` member; pass ``None`` for a network read as longitude/latitude, whose
    coordinates are written as they are. Every pipe carries its ``length`` property, so a read back
    gives the same lengths whatever the geometry. One feature a line (small files, readable
    diffs), each as json.dumps(feature, separators=(",", ":")) writes ``network_features``' own.
    """
    head = json.dumps(_header(network, length_unit))[:-1]
    body = ",\n".join(text for table in _tables(network, units, _to_map(length_unit))
                      for text in table.texts())
    return fileio.write_text(path, f'{head}, "features": [\n{body}\n]}}\n')
