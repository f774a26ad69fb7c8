"""The network's CSV tables: their columns, and the parsing of a table's cells into SI arrays.

A network folder holds ``junctions.csv``, ``sources.csv``, ``pipes.csv`` and optionally ``pumps.csv``
and ``valves.csv``.
Each column's unit is written in brackets in its header (``elevation [ft]``, ``diameter [mm]``) and
parsed by pint, so any unit pint knows is accepted. Parsing never stops at the first bad cell: every
problem is appended to a list, with the file, the row as a person counts it (header = row 1), the id
and the field, so that one run reports them all.

This module is not the checks between tables (ids, node references, connectivity: see
``calib.network.validate``) nor the GeoJSON reader (``calib.network.geojson``), which turns its
features into the same raw columns and parses them here.
"""

from __future__ import annotations

import csv
import math
from dataclasses import dataclass, field
from pathlib import Path

from typing import TYPE_CHECKING

import numpy as np

from calib import fileio, limits
from calib.errors import Problem
from calib.network import pump_curve
from calib.network.model import (VALVE_TYPE_WORDS, Network, PipeStatus, ValveMode,
                                 ValveType)
from calib.units import DISPLAY, from_si, parse_header, unit_factor

if TYPE_CHECKING:
    import pandas as pd  # the writers' frames only: reading a network needs no pandas

#: Physical kinds that need a unit in the header (see ``calib.units.SI_UNIT``).
UNIT_KINDS = ("elevation", "head", "flow", "length", "diameter", "pressure")


@dataclass(frozen=True)
class Column:
    """One column of a table: its name (without unit), what it holds, whether it must be there.

    ``kind`` is a unit kind of ``calib.units`` (then the header needs a unit), or one of ``id``,
    ``text``, ``node`` (a node id), ``number`` (dimensionless), ``year``, ``bool``, ``status``,
    ``source_kind``, ``coordinate`` (a map coordinate: a length unit is optional).
    """

    name: str
    kind: str
    required: bool = False
    hint: str | None = None  # unit suggested when the header has none, e.g. "[mm]"


_XY = (Column("x", "coordinate"), Column("y", "coordinate"), Column("zone", "text"))

SCHEMA: dict[str, tuple[Column, ...]] = {
    "junctions": (Column("id", "id", True), Column("elevation", "elevation", True),
                  Column("demand", "flow", True), *_XY, Column("hydrant", "bool")),
    "sources": (Column("id", "id", True), Column("head", "head", True),
                Column("kind", "source_kind"), Column("elevation", "elevation"), *_XY,
                # A tank's floor (grade of its bottom) and greatest water depth: a level the
                # operator gives then becomes a grade (calib.network.tanks).
                Column("floor", "elevation"), Column("level_max", "head")),
    "pipes": (Column("id", "id", True), Column("from", "node", True), Column("to", "node", True),
              Column("length", "length", True), Column("diameter", "diameter", True),
              Column("roughness", "number", True), Column("group", "text"),
              Column("material", "text"), Column("installed", "year"), Column("status", "status"),
              Column("minor_loss", "number"), Column("roughness_height", "length", hint="[mm]")),
    "pumps": (Column("id", "id", True), Column("from", "node", True), Column("to", "node", True),
              *(Column(f"{q}_{i}", "head" if q == "head" else "flow")
                for i in (1, 2, 3) for q in ("head", "flow")),
              Column("shutoff_head", "head"), Column("design_head", "head"),
              Column("design_flow", "flow"), Column("speed", "number")),
    # control valves (see ``calib.network.model.Valves``); the setting column depends on the type
    "valves": (Column("id", "id", True), Column("from", "node", True), Column("to", "node", True),
               Column("diameter", "diameter", True), Column("type", "text", True),
               Column("pressure", "pressure"), Column("flow", "flow"),
               Column("loss_coefficient", "number"), Column("status", "text"),
               Column("minor_loss", "number")),
}
FILES = {"junctions": "junctions.csv", "sources": "sources.csv", "pipes": "pipes.csv",
         "pumps": "pumps.csv", "valves": "valves.csv"}
OPTIONAL_TABLES = ("pumps", "valves")

_TRUE = {"yes", "y", "true", "t", "1"}
_FALSE = {"no", "n", "false", "f", "0", ""}
STATUS_WORDS = {"open": PipeStatus.OPEN, "": PipeStatus.OPEN, "closed": PipeStatus.CLOSED,
                "check": PipeStatus.CHECK_VALVE, "check valve": PipeStatus.CHECK_VALVE,
                "cv": PipeStatus.CHECK_VALVE}
SOURCE_KINDS = ("reservoir", "tank")
YEAR_RANGE = (limits.INSTALL_YEAR.low, limits.INSTALL_YEAR.high)  # stated in calib.limits


@dataclass
class ParsedTable:
    """One table after parsing: per column an array (SI floats, or text/bool/int codes)."""

    file: str
    rows: np.ndarray  # row number of each record as a person counts (header = 1)
    values: dict[str, np.ndarray] = field(default_factory=dict)
    present: set[str] = field(default_factory=set)  # columns given in the file

    def __len__(self) -> int:
        return len(self.rows)

    def get(self, name: str, default=np.nan) -> np.ndarray:
        """The column ``name``, or an array filled with ``default`` when the file did not give it."""
        if name in self.values:
            return self.values[name]
        return np.full(len(self), default, dtype=object if isinstance(default, str) else None)


@dataclass
class NetworkTables:
    """The parsed tables of one network, before the checks between them."""

    junctions: ParsedTable
    sources: ParsedTable
    pipes: ParsedTable
    pumps: ParsedTable | None = None
    valves: ParsedTable | None = None


# --- parsing of cells ----------------------------------------------------------------------------

def _text(cells) -> np.ndarray:
    """Cells as stripped strings; None and NaN (GeoJSON null, a missing property) become ''."""
    def one(v):
        if v is None or (isinstance(v, float) and math.isnan(v)):
            return ""
        return str(v).strip()
    try:
        return np.array([c.strip() for c in cells], dtype=object)  # CSV: all text already
    except AttributeError:
        return np.array([one(v) for v in cells], dtype=object)


def _number(cell: str) -> float:
    """A cell's float (Python's correctly rounded ``float``), NaN where it is no plain decimal
    number: as ``pandas.to_numeric(errors="coerce")`` read it before, without pandas' import
    (tests/network/test_tables.py: the same bits on random decimal strings), also refusing what
    ``float`` alone would take (digit separators ``1_000``, non-ASCII digits)."""
    if not cell.isascii() or "_" in cell:
        return math.nan
    try:
        return float(cell)
    except ValueError:
        return math.nan


def _numbers(text: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Parse text to floats; returns (values with NaN where empty or bad, mask of bad cells)."""
    values = np.array([_number(c) if c != "" else math.nan for c in text], dtype=float)
    bad = (text != "") & ~np.isfinite(values)
    values[bad] = np.nan
    return values, bad


def _example(column: Column) -> str:
    if column.hint:
        return f"'{column.name} {column.hint}'"
    kind = "length" if column.kind == "coordinate" else column.kind
    return f"'{column.name} [{DISPLAY['us'][kind]}]' or '{column.name} [{DISPLAY['si'][kind]}]'"


def _header_factor(file: str, header: str, column: Column, unit: str | None,
                   problems: list[Problem], header_row: int | None = 1) -> float | None:
    """SI factor of a header's unit; None (and a problem) when it is missing or wrong."""
    if column.kind not in UNIT_KINDS and column.kind != "coordinate":
        return 1.0
    if unit is None:
        if column.kind == "coordinate":
            return 1.0  # map units as given
        problems.append(Problem(f"column '{header}' has no unit in its header", file=file,
                                row=header_row,
                                field=column.name, expected=f"a unit in brackets, e.g. "
                                f"{_example(column)}"))
        return None
    kind = "length" if column.kind == "coordinate" else column.kind
    try:
        return unit_factor(unit, kind)
    except ValueError as exc:
        problems.append(Problem(f"column '{header}': {exc}", file=file, row=header_row,
                                field=column.name,
                                expected=f"a unit of {kind} that pint knows, e.g. {_example(column)}"))
        return None


def _parse_cells(file: str, column: Column, text: np.ndarray, factor: float, rows, ids,
                 problems: list[Problem]) -> np.ndarray:
    """Turn one column's text into its values, adding a problem per bad cell."""
    def report(mask, message, expected=None):
        for i in np.flatnonzero(mask):
            problems.append(Problem(message.format(text[i]), file=file, row=int(rows[i]),
                                    id=ids[i] or None, field=column.name, expected=expected))

    kind = column.kind
    if column.required and kind not in ("id",):
        report(text == "", "value is missing")
    if kind in ("id", "text", "node"):
        if kind == "id":
            report(text == "", "the id is empty", "a short unique name such as 'J12'")
        return text
    if kind == "bool":
        lower = np.array([t.lower() for t in text], dtype=object)
        bad = ~np.isin(lower, list(_TRUE | _FALSE))
        report(bad, "'{}' is not yes or no", "yes/no, true/false or 1/0")
        return np.isin(lower, list(_TRUE))
    if kind == "status":
        lower = np.array([" ".join(t.lower().split()) for t in text], dtype=object)
        bad = ~np.isin(lower, list(STATUS_WORDS))
        report(bad, "'{}' is not a pipe status", "open, closed or check (a check valve, "
               "flow only from -> to)")
        return np.array([STATUS_WORDS.get(t, PipeStatus.OPEN) for t in lower], dtype=np.int8)
    if kind == "source_kind":
        lower = np.array([t.lower() for t in text], dtype=object)
        bad = ~np.isin(lower, [*SOURCE_KINDS, ""])
        report(bad, "'{}' is not a kind of source", "reservoir or tank")
        return np.where(lower == "tank", "tank", "reservoir").astype(object)
    values, bad = _numbers(text)
    report(bad, "'{}' is not a number")
    if kind == "year":
        lo, hi = YEAR_RANGE
        report(np.isfinite(values) & ((values < lo) | (values > hi)),
               "install year {} is out of range", f"a year between {lo} and {hi}")
    return values * factor


def parse_table(file: str, table: str, headers: list[str], cells: list, rows,
                problems: list[Problem], header_row: int | None = 1) -> ParsedTable:
    """Parse raw columns (``cells[j]`` holds the cells under ``headers[j]``) of ``table``.

    Unknown columns are ignored (a table may carry notes). When two columns give the same field
    (``elevation [ft]`` and ``elevation [m]``) a row may fill only one of them. ``header_row`` is
    the row named in problems with a header (None for GeoJSON, which has no header row).
    """
    rows = np.asarray(rows, dtype=np.int64)
    schema = {c.name: c for c in SCHEMA[table]}
    by_field: dict[str, list[tuple[str, str | None, np.ndarray]]] = {}
    for header, column_cells in zip(headers, cells):
        name, unit = parse_header(header)
        name = name.replace(" ", "_")
        if name in schema:
            by_field.setdefault(name, []).append((header, unit, _text(column_cells)))
    parsed = ParsedTable(file=file, rows=rows, present=set(by_field))
    for column in schema.values():
        if column.required and column.name not in by_field:
            problems.append(Problem(f"required column '{column.name}' is missing", file=file,
                                    row=header_row, field=column.name,
                                    expected=f"a column headed {_example(column)}"
                                    if column.kind in UNIT_KINDS else
                                    f"a column headed '{column.name}'"))
    ids = by_field["id"][0][2] if "id" in by_field else np.full(len(rows), "", dtype=object)
    for name, given in by_field.items():
        column = schema[name]
        parts = []
        for header, unit, text in given:
            factor = _header_factor(file, header, column, unit, problems, header_row)
            if factor is not None:
                parts.append((text, factor))
        if not parts:
            continue  # the header problem is reported; do not pile up one problem per row
        text, factor = parts[0]
        if len(parts) > 1:
            text, factor = _merge_columns(file, column, parts, rows, ids, problems)
        parsed.values[name] = _parse_cells(file, column, text, factor, rows, ids, problems)
    return parsed


def _merge_columns(file, column, parts, rows, ids, problems):
    """Fold two columns of one field (different units) into one text column already in SI."""
    merged = np.full(len(rows), "", dtype=object)
    filled = np.zeros(len(rows), dtype=int)
    for text, factor in parts:
        values, _ = _numbers(text)
        scaled = np.array([t if t == "" or not np.isfinite(v) else repr(float(v * factor))
                           for t, v in zip(text, values)], dtype=object)
        take = (text != "") & (merged == "")
        merged[take] = scaled[take]
        filled += text != ""
    for i in np.flatnonzero(filled > 1):
        problems.append(Problem("the value is given in more than one column", file=file,
                                row=int(rows[i]), id=ids[i] or None, field=column.name,
                                expected="one column per field"))
    return merged, 1.0


# --- the CSV folder -------------------------------------------------------------------------------

def _csv_records(path: Path, problems: list[Problem]):
    """Header, records and the line each record starts on, as a person counts lines (from 1).

    Blank lines are skipped but counted, so row numbers match the file even after them or after a
    quoted cell that spans lines. A record with more cells than the header is reported.
    """
    header, header_line, records, lines = None, None, [], []
    with open(path, newline="", encoding="utf-8-sig") as fh:
        reader = csv.reader(fh, skipinitialspace=True)
        start = 1
        for record in reader:
            line, start = start, reader.line_num + 1
            if not any(cell.strip() for cell in record):
                continue
            if header is None:
                header, header_line = record, line
                continue
            if len(record) > len(header):
                problems.append(Problem(f"the row has {len(record)} cells, the header "
                                        f"{len(header)}", file=path.name, row=line,
                                        id=record[0].strip() or None,
                                        expected="one cell per column (quote text with commas)"))
            records.append((record + [""] * len(header))[: len(header)])
            lines.append(line)
    return header, header_line, records, lines


def read_csv_table(path: Path, table: str, problems: list[Problem]) -> ParsedTable | None:
    """Read one CSV file of ``table``; None when it cannot be read at all (a problem says why)."""
    try:
        header, header_line, records, lines = _csv_records(path, problems)
    except FileNotFoundError:
        return None
    except IsADirectoryError:
        problems.append(Problem("is a folder, not a file", file=path.name,
                                expected="a CSV file with a header row"))
        return None
    except (csv.Error, UnicodeDecodeError, OSError) as exc:
        problems.append(Problem(f"cannot be read as CSV: {exc}", file=path.name,
                                expected="comma-separated text in UTF-8"))
        return None
    if header is None:
        problems.append(Problem("the file is empty", file=path.name,
                                expected="a header row and one row per item"))
        return None
    cells = np.array(records, dtype=object).reshape(len(records), len(header))
    return parse_table(path.name, table, header, [cells[:, j] for j in range(len(header))],
                       lines, problems, header_row=header_line)


def read_tables(folder) -> tuple[NetworkTables | None, list[Problem]]:
    """Parse the CSV tables of a network folder; returns the tables and every problem found."""
    folder = Path(folder)
    problems: list[Problem] = []
    parsed = {}
    for table, name in FILES.items():
        path = folder / name
        if not path.exists():
            if table not in OPTIONAL_TABLES:
                problems.append(Problem(f"file is missing from the network folder '{folder}'",
                                        file=name))
            continue
        parsed[table] = read_csv_table(path, table, problems)
    if any(parsed.get(t) is None for t in FILES if t not in OPTIONAL_TABLES):
        return None, problems
    return NetworkTables(parsed["junctions"], parsed["sources"], parsed["pipes"],
                         parsed.get("pumps"), parsed.get("valves")), problems


# --- writing a network as CSV tables -------------------------------------------------------------

def network_frames(network: Network, units: str = "us") -> dict[str, pd.DataFrame]:
    """The tables of ``network`` as DataFrames with unit headers in the ``us`` or ``si`` system."""
    import pandas as pd
    u = DISPLAY[units]
    nj = network.n_junctions
    status_word = {int(PipeStatus.OPEN): "open", int(PipeStatus.CLOSED): "closed",
                   int(PipeStatus.CHECK_VALVE): "check"}

    def conv(values, kind):
        return from_si(np.asarray(values, dtype=float), kind, u[kind])

    xy_unit = u["length"]
    junctions = pd.DataFrame({
        "id": network.junction_ids.astype(str),
        f"elevation [{u['elevation']}]": conv(network.elevation[:nj], "elevation"),
        f"demand [{u['flow']}]": conv(network.demand, "flow"),
        f"x [{xy_unit}]": conv(network.x[:nj], "length"),
        f"y [{xy_unit}]": conv(network.y[:nj], "length"),
        "zone": network.zone[:nj].astype(str),
        "hydrant": np.where(network.hydrant, "yes", "no"),
    })
    sources = pd.DataFrame({
        "id": network.source_ids.astype(str),
        f"head [{u['head']}]": conv(network.source_head, "head"),
        "kind": network.source_kind.astype(str),
        f"elevation [{u['elevation']}]": conv(network.elevation[nj:], "elevation"),
        f"x [{xy_unit}]": conv(network.x[nj:], "length"),
        f"y [{xy_unit}]": conv(network.y[nj:], "length"),
        "zone": network.zone[nj:].astype(str),
    })
    ids = network.node_ids.astype(str)
    rh_unit = "mm" if units == "si" else "in"
    pipes = pd.DataFrame({
        "id": network.pipe_ids.astype(str), "from": ids[network.pipe_from],
        "to": ids[network.pipe_to],
        f"length [{u['length']}]": conv(network.length, "length"),
        f"diameter [{u['diameter']}]": conv(network.diameter, "diameter"),
        "roughness": network.roughness, "group": network.group.astype(str),
        "material": network.material.astype(str), "installed": network.installed,
        "status": [status_word[int(s)] for s in network.status],
        "minor_loss": network.minor_loss,
        f"roughness_height [{rh_unit}]": from_si(network.roughness_height, "length", rh_unit),
    })
    frames = {"junctions": junctions, "sources": sources, "pipes": pipes}
    if len(network.pumps):
        frames["pumps"] = _pump_frame(network, units)
    if len(network.valves):
        frames["valves"] = valve_frame(network, units)
    return frames


def valve_frame(network: Network, units: str) -> pd.DataFrame:
    """Valves with their setting in the column of their type (the others left empty)."""
    import pandas as pd
    return pd.DataFrame(valve_columns(network, units))


def valve_columns(network: Network, units: str) -> dict:
    """``valve_frame``'s columns as arrays and lists, without pandas (the GeoJSON writer's)."""
    u = DISPLAY[units]
    v, ids = network.valves, network.node_ids.astype(str)
    kind_word = {int(code): word for word, code in VALVE_TYPE_WORDS.items()}
    mode_word = {int(ValveMode.ACTIVE): "active", int(ValveMode.OPEN): "open",
                 int(ValveMode.CLOSED): "closed"}
    pressure = np.isin(v.kind, (ValveType.REDUCING, ValveType.SUSTAINING))
    return {
        "id": v.ids.astype(str), "from": ids[v.from_node], "to": ids[v.to_node],
        f"diameter [{u['diameter']}]": from_si(v.diameter, "diameter", u["diameter"]),
        "type": [kind_word[int(k)] for k in v.kind],
        f"pressure [{u['pressure']}]": np.where(pressure, from_si(v.setting, "pressure",
                                                                  u["pressure"]), np.nan),
        f"flow [{u['flow']}]": np.where(v.kind == ValveType.FLOW_LIMITING,
                                        from_si(v.setting, "flow", u["flow"]), np.nan),
        "loss_coefficient": np.where(v.kind == ValveType.THROTTLE, v.setting, np.nan),
        "status": [mode_word[int(m)] for m in v.mode], "minor_loss": v.minor_loss,
    }


def _pump_frame(network: Network, units: str) -> pd.DataFrame:
    """Pumps as three points of their curve (``pump_curve.curve_points``)."""
    import pandas as pd
    u = DISPLAY[units]
    pumps, ids = network.pumps, network.node_ids.astype(str)
    frame = {"id": pumps.ids.astype(str), "from": ids[pumps.from_node], "to": ids[pumps.to_node]}
    points = pump_curve.curve_points(pumps.shutoff_head, pumps.curve_r, pumps.curve_n)
    for i, (q, h) in enumerate(points, start=1):
        frame[f"head_{i} [{u['head']}]"] = from_si(h, "head", u["head"])
        frame[f"flow_{i} [{u['flow']}]"] = from_si(q, "flow", u["flow"])
    frame["speed"] = pumps.speed
    return pd.DataFrame(frame)


def write_tables(network: Network, folder, units: str = "us") -> Path:
    """Write ``network`` as a folder of CSV tables (atomic per file), full float precision."""
    folder = Path(folder)
    for table, frame in network_frames(network, units).items():
        fileio.write_csv(folder / FILES[table], frame, float_format=None)
    return folder
