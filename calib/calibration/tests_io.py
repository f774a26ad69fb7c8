"""Read a folder of hydrant flow tests into plain SI arrays, and turn gauge readings into grades.

The folder holds CSV tables with units in brackets in the headers (``flow [gpm]``, ``static [kPa]``):

- ``flows.csv``: ``test_id, node, flow`` per flowing outlet, or ``pitot, outlet_diameter, coefficient``
  (converted with ``calib.flowtest.pitot_discharge``); both forms may be mixed row by row.
- ``pressures.csv``: ``test_id, node, static, residual`` with optional ``gauge_height`` and ``sigma``.
- ``boundary.csv`` (optional): ``test_id, source, head`` - a source's grade during that test.
- ``tests.csv`` (optional): ``test_id, date, ...`` - free notes, carried through to the report.

Extra columns and other files (the field app's per-test JSON) are ignored. Every problem found is
collected and raised at once as ``calib.errors.InputError`` naming file, row, id and field; rows are
counted as a spreadsheet shows them (the header is row 1).

This module does not solve anything; ``problem.py`` builds the least-squares problem from a ``TestSet``.
"""

from __future__ import annotations

import csv
import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from calib import limits, units
from calib.errors import InputError, Problem
from calib.network import tanks
from calib.flowtest.pitot import OUTLET_COEFFICIENTS, pitot_discharge

#: Unit assumed for a column whose header has no bracket (the trade's US units).
DEFAULT_UNIT = {"flow": "gpm", "pitot": "psi", "outlet_diameter": "in", "static": "psi",
                "residual": "psi", "gauge_height": "ft", "sigma": "psi", "head": "ft", "level": "ft"}
KIND = {"flow": "flow", "pitot": "pressure", "outlet_diameter": "diameter", "static": "pressure",
        "residual": "pressure", "gauge_height": "length", "sigma": "pressure", "head": "head",
        "level": "head"}
#: Plausible ranges in SI, with the text shown in messages (US units, as crews read them).
#: Each is stated once, in ``calib.limits``; messages give the SI range beside.
RANGE = {
    "flow": limits.FLOW,
    "pitot": limits.PITOT,
    "outlet_diameter": limits.OUTLET_DIAMETER,
    "coefficient": limits.COEFFICIENT,
    "static": limits.PRESSURE,
    "residual": limits.PRESSURE,
    "gauge_height": limits.GAUGE_HEIGHT,
    "sigma": limits.SIGMA,
    "head": limits.HEAD,
    "level": limits.TANK_LEVEL,  # a tank's level above its floor, where boundary.csv gives one
}
DEFAULT_COEFFICIENT = 0.90  # NFPA 291 outlet figure: smooth, well-rounded outlet


class GaugeGrades:
    """Grades of gauge readings, for any record with ``pressure``, ``elevation``, ``gauge_height``
    and ``sigma`` arrays (SI)."""

    @property
    def hgl(self) -> np.ndarray:
        """Observed hydraulic grade at each gauge's node [m]: HGL = p / gamma + elevation + gauge height."""
        return units.pressure_to_head(self.pressure) + self.elevation + self.gauge_height

    @property
    def sigma_head(self) -> np.ndarray:
        """Stated accuracy as head [m of water]."""
        return units.pressure_to_head(self.sigma)


@dataclass(frozen=True)
class TextTable:
    """A CSV table as read: its header and its rows of stripped text cells (``TestSet.info``).

    Plain lists, no pandas (whose import is a quarter of a fit command's start-up): ``table[name]``
    is a column as a numpy object array (``astype``, ``tolist``, comparisons as a Series of text
    gives them), ``empty`` and ``len`` as a DataFrame's, ``to_frame()`` the DataFrame.
    """

    columns: list[str] = field(default_factory=list)
    rows: list[list[str]] = field(default_factory=list)

    @property
    def empty(self) -> bool:
        return not self.columns or not self.rows

    def __len__(self) -> int:
        return len(self.rows)

    def __getitem__(self, name: str) -> np.ndarray:
        j = self.columns.index(name)
        return np.array([r[j] for r in self.rows], dtype=object)

    def to_frame(self):
        import pandas as pd
        return pd.DataFrame(self.rows, columns=self.columns, dtype=object)


@dataclass
class TestSet(GaugeGrades):
    """A season of flow tests in SI, indexed against one network's node numbers.

    Readings are a structure of arrays, one entry per gauge reading (a pressures.csv row gives a
    static and a residual reading). ``kind`` is ``"static"`` (normal demand) or ``"residual"``
    (normal demand plus the test's flows).
    """

    __test__ = False  # not a pytest class

    folder: str
    test_ids: list[str]
    flows: list[dict[int, float]]  # per test: node number -> flow drawn [m3/s]
    source_head: list[dict[int, float]]  # per test: source node number -> grade [m] (boundary.csv)
    day: np.ndarray  # (n_tests,) index into ``days``
    days: list[str]
    info: TextTable  # tests.csv as read (strings), one row per test id, may be empty
    test: np.ndarray  # (n_readings,) test index
    node: np.ndarray  # (n_readings,) node number
    kind: np.ndarray  # (n_readings,) "static" | "residual"
    pressure: np.ndarray  # observed gauge pressure [Pa]
    gauge_height: np.ndarray  # gauge above the node elevation [m]
    sigma: np.ndarray  # stated accuracy of the reading [Pa]
    row: np.ndarray  # row in pressures.csv (header = row 1)
    elevation: np.ndarray  # node elevation at each reading [m]
    pitot_tests: list[str] = field(default_factory=list)  # tests whose flows came as pitot readings
    notes: list[str] = field(default_factory=list)
    # per reading: True where someone stated the gauge's accuracy (pressures.csv `sigma`, --sigma);
    # where not, ``sigma`` holds the nominal 1 psi and the fit takes the scale from the scatter.
    # None: stated everywhere
    sigma_stated: np.ndarray | None = None

    @property
    def n_tests(self) -> int:
        return len(self.test_ids)

    @property
    def n_readings(self) -> int:
        return len(self.node)

    def subset(self, keep: np.ndarray) -> "TestSet":
        """The same tests with only the readings where ``keep`` is True."""
        keep = np.asarray(keep, dtype=bool)
        arrays = {name: getattr(self, name)[keep] for name in
                  ("test", "node", "kind", "pressure", "gauge_height", "sigma", "row", "elevation")}
        return TestSet(folder=self.folder, test_ids=self.test_ids, flows=self.flows,
                       source_head=self.source_head, day=self.day, days=self.days, info=self.info,
                       pitot_tests=self.pitot_tests, notes=list(self.notes),
                       sigma_stated=None if self.sigma_stated is None else self.sigma_stated[keep],
                       **arrays)


# --- reading tables --------------------------------------------------------------------------
class _Table:
    """One CSV file read as text, with its columns mapped by name and their units resolved."""

    def __init__(self, path: Path, problems: list[Problem], required: tuple[str, ...]):
        self.path, self.name, self.problems = path, path.name, problems
        self.table = self._read(path, problems)
        self._at = {h: j for j, h in enumerate(self.table.columns)}  # raw header -> cell index
        self.columns: dict[str, str] = {}  # name -> raw header
        self.factor: dict[str, float] = {}
        for header in self.table.columns:
            name, unit = units.parse_header(header)
            name = name.replace(" ", "_")
            if name in self.columns:
                problems.append(Problem(f"column '{name}' appears twice", file=self.name, field=header,
                                        expected="each column once, in one unit"))
                continue
            self.columns[name] = header
            if name in KIND:
                try:
                    self.factor[name] = units.unit_factor(unit or DEFAULT_UNIT[name], KIND[name])
                except ValueError as exc:
                    problems.append(Problem(str(exc), file=self.name, field=header,
                                            expected=f"a {KIND[name]} unit in brackets, "
                                                     f"e.g. '{name} [{DEFAULT_UNIT[name]}]'"))
                    self.factor[name] = math.nan
        missing = [c for c in required if c not in self.columns]
        if missing:
            problems.append(Problem(f"missing column(s) {', '.join(missing)}", file=self.name,
                                    expected="columns " + ", ".join(required)))
        self.ok = not missing

    @staticmethod
    def _read(path: Path, problems: list[Problem]) -> TextTable:
        """The table as text cells; a row with more cells than the header is a problem (pandas
        would silently take the extra leading cells as an index and shift every column)."""
        try:
            with open(path, newline="", encoding="utf-8-sig") as fh:
                rows = [r for r in csv.reader(fh) if any(c.strip() for c in r)]
        except (UnicodeDecodeError, csv.Error, OSError) as exc:
            problems.append(Problem(f"cannot be read as CSV ({exc})", file=path.name,
                                    expected="a comma-separated UTF-8 table with a header row"))
            return TextTable()
        if not rows:
            problems.append(Problem("the file is empty", file=path.name,
                                    expected="a comma-separated table with a header row"))
            return TextTable()
        header = [h.strip() for h in rows[0]]
        for k, h in enumerate(header):
            if h in header[:k]:
                problems.append(Problem(f"column '{h}' appears twice", file=path.name, field=h,
                                        expected="each column once"))
        header = [h if h not in header[:k] else f"{h}#{k}" for k, h in enumerate(header)]
        body = []
        for i, r in enumerate(rows[1:]):
            cells = [c.strip() for c in r]
            if len(cells) > len(header) and any(cells[len(header):]):
                problems.append(Problem(f"{len(cells)} cells but the header has {len(header)}",
                                        file=path.name, row=i + 2,
                                        expected="one cell per column (quote text holding commas)"))
                continue
            body.append((cells + [""] * len(header))[: len(header)])
        return TextTable(header, body)

    def require_any(self, names: tuple[str, ...], message: str, expected: str) -> None:
        """A problem, and the table set aside, when none of the columns ``names`` is present."""
        if self.ok and not any(n in self.columns for n in names):
            self.problems.append(Problem(message, file=self.name, expected=expected))
            self.ok = False

    def __len__(self) -> int:
        return len(self.table)

    def text(self, i: int, name: str) -> str:
        if name not in self.columns:
            return ""
        return self.table.rows[i][self._at[self.columns[name]]]  # stripped when read

    def number(self, i: int, name: str, row_id: str | None, required: bool = False) -> float:
        """The SI value in row i, column ``name``; nan when blank (a problem if ``required``).

        A cell is a plain number (``units.parse_number``: ASCII digits, no comma, no expression);
        the value must lie in the column's range (``RANGE``, from ``calib.limits``).
        """
        raw = self.text(i, name)
        where = dict(file=self.name, row=i + 2, id=row_id, field=self.columns.get(name, name))
        if raw == "" and not required:
            return math.nan
        expected = _expected(name)
        if raw == "":
            if required:
                self.problems.append(Problem("value is missing", **where, expected=expected))
            return math.nan
        try:
            value = units.parse_number(raw)
        except ValueError as exc:
            self.problems.append(Problem(str(exc), **where, expected=expected))
            return math.nan
        if not math.isfinite(value):
            self.problems.append(Problem(f"'{raw}' is not a finite number", **where))
            return math.nan
        value *= self.factor.get(name, 1.0)
        if name in RANGE and RANGE[name].refuses(value):
            self.problems.append(Problem(f"{raw} is outside the plausible range", **where,
                                         expected=expected))
            return math.nan
        return value


def _boundary_grade(network, b: _Table, i: int, tid: str, s_idx, problems) -> float:
    """A boundary.csv row's grade [m]: its head, or its level above the tank's floor."""
    has_head = b.text(i, "head") != ""
    if has_head or "level" not in b.columns:
        head = b.number(i, "head", tid, required=True)
        if math.isnan(head) or s_idx is None:
            return head
        try:
            return tanks.check_grade(network, str(network.node_ids[s_idx]), head)
        except InputError as exc:
            p = exc.problems[0]
            problems.append(Problem(p.message, file=b.name, row=i + 2, id=tid,
                                    field=b.columns["head"], expected=p.expected))
            return math.nan
    level = b.number(i, "level", tid, required=True)
    if math.isnan(level) or s_idx is None:
        return math.nan
    source = str(network.node_ids[s_idx])
    try:
        return tanks.grade_from_level(network, source, level)
    except InputError as exc:
        p = exc.problems[0]
        problems.append(Problem(p.message, file=b.name, row=i + 2, id=tid,
                                field=b.columns["level"], expected=p.expected))
        return math.nan


def _coefficient(table: _Table, i: int, row_id: str) -> float:
    """Outlet coefficient of row i: a number, an outlet shape (NFPA 291 outlet figure), 0.90 if blank."""
    raw = table.text(i, "coefficient").lower()
    if raw == "":
        return DEFAULT_COEFFICIENT
    if raw in OUTLET_COEFFICIENTS:
        return OUTLET_COEFFICIENTS[raw]
    return table.number(i, "coefficient", row_id)  # range and message as for every other number


def _expected(name: str) -> str | None:
    """The plausible range of column ``name`` in words (None for a column without one)."""
    if name not in RANGE:
        return None
    text = RANGE[name].expected()
    if name == "coefficient":
        text += "; or smooth (0.90), square (0.80), projecting (0.70) (NFPA 291)"
    if name == "gauge_height":
        text += " above the node elevation"
    return text


#: A flow given beside the pitot reading it came from (the field app writes both) must agree with
#: the pitot formula within this fraction (rounding of the written flow; common practice).
FLOW_PITOT_AGREEMENT = 0.01


def _flow_matches_pitot(table: _Table, i: int, row_id: str, flow: float, problems) -> bool:
    """A row giving both a flow and a pitot reading: True when they agree (the flow is then used);
    else a problem naming both, never one of them silently ignored."""
    where = dict(file=table.name, row=i + 2, id=row_id, field="pitot")
    n_before = len(problems)
    p = table.number(i, "pitot", row_id)
    d = table.number(i, "outlet_diameter", row_id, required=True)
    c = _coefficient(table, i, row_id)
    factor_text = table.text(i, "pumper_factor")
    try:
        factor = 1.0 if factor_text == "" else units.parse_number(factor_text)
    except ValueError:
        factor = math.nan
    if len(problems) > n_before or math.isnan(flow):
        return False
    if not (math.isfinite(factor) and 0.5 <= factor <= 1.5):
        problems.append(Problem(f"pumper_factor '{factor_text}' is not a plausible factor",
                                **{**where, "field": "pumper_factor"}, expected="about 0.8 to 1.0"))
        return False
    from_pitot = factor * float(pitot_discharge(p, d, c))
    if abs(from_pitot - flow) > FLOW_PITOT_AGREEMENT * max(flow, from_pitot):
        problems.append(Problem(
            f"both a flow ({flow / units.GPM:.1f} gpm) and a pitot reading are given and they "
            f"disagree: the pitot gives {from_pitot / units.GPM:.1f} gpm", **where,
            expected="one of them per row, or a flow that is the pitot's (within 1 %)"))
        return False
    return True


def _node(network, table: _Table, i: int, row_id: str, problems, junction_only=True) -> int | None:
    raw = table.text(i, "node" if "node" in table.columns else "source")
    fld = "node" if "node" in table.columns else "source"
    if raw == "":
        problems.append(Problem("node id is missing", file=table.name, row=i + 2, id=row_id,
                                field=fld))
        return None
    idx = network.node_index.get(raw)
    if idx is None:
        problems.append(Problem(f"node '{raw}' is not in the network", file=table.name, row=i + 2,
                                id=row_id, field=fld, expected="a node id of the network files"))
        return None
    if junction_only and idx >= network.n_junctions:
        problems.append(Problem(f"node '{raw}' is a source (reservoir or tank), not a junction",
                                file=table.name, row=i + 2, id=row_id, field=fld,
                                expected="a junction where a hydrant or gauge stands"))
        return None
    if not junction_only and idx < network.n_junctions:
        problems.append(Problem(f"'{raw}' is a junction, not a source", file=table.name, row=i + 2,
                                id=row_id, field=fld, expected="a reservoir or tank id"))
        return None
    return int(idx)


def read_tests(folder, network, sigma: float | None = None) -> TestSet:
    """Read a tests folder against ``network``; ``sigma`` [Pa] is the gauge accuracy where none is given.

    ``sigma=None``: nobody stated it; such readings get the nominal 1 psi as a relative weight and
    ``sigma_stated`` False, and the fit takes their scale from the scatter.

    Raises ``InputError`` listing every problem (file, row, test id, field, plausible range).
    """
    folder = Path(folder)
    problems: list[Problem] = []
    if not folder.is_dir():
        raise InputError(f"tests folder '{folder}' does not exist", file=str(folder),
                         expected="a folder with flows.csv and pressures.csv")
    for name in ("flows.csv", "pressures.csv", "boundary.csv", "tests.csv"):
        path = folder / name
        if path.exists() and not path.is_file():  # a folder: never skipped without a word
            problems.append(Problem("is a folder, not a file", file=str(path),
                                    expected=f"{name} as a CSV file with a header row"))
        elif not path.exists() and name in ("flows.csv", "pressures.csv"):
            problems.append(Problem(f"{name} is missing", file=str(path),
                                    expected="flows.csv and pressures.csv in the tests folder"))
    if problems:
        raise InputError(problems)

    # tests.csv first: it fixes the order of tests and their dates
    info = TextTable()
    order: list[str] = []
    position: dict[str, int] = {}  # test id -> index in order
    if (folder / "tests.csv").is_file():
        t = _Table(folder / "tests.csv", problems, ("test_id",))
        if t.ok:
            info = TextTable(["test_id" if h == t.columns["test_id"] else h for h in t.table.columns],
                             t.table.rows)
            for i, tid in enumerate(info["test_id"]):
                if tid == "":
                    problems.append(Problem("test_id is missing", file="tests.csv", row=i + 2,
                                            field="test_id"))
                elif tid in position:
                    problems.append(Problem(f"test '{tid}' appears twice", file="tests.csv",
                                            row=i + 2, id=tid, field="test_id"))
                else:
                    position[tid] = len(order)
                    order.append(tid)

    def test_index(tid: str, table: _Table, i: int) -> int | None:
        if tid == "":
            problems.append(Problem("test_id is missing", file=table.name, row=i + 2, field="test_id"))
            return None
        if tid not in position:
            if not info.empty:
                problems.append(Problem(f"test '{tid}' is not in tests.csv", file=table.name,
                                        row=i + 2, id=tid, field="test_id",
                                        expected="a test_id listed in tests.csv"))
                return None
            position[tid] = len(order)
            order.append(tid)
        return position[tid]

    # flows.csv
    flows: dict[int, dict[int, float]] = {}
    pitot_tests: set[str] = set()
    f = _Table(folder / "flows.csv", problems, ("test_id", "node"))
    f.require_any(("flow", "pitot"), "neither a flow nor a pitot column",
                  "'flow [gpm]', or 'pitot [psi]' with 'outlet_diameter [in]'")
    if f.ok:
        for i in range(len(f)):
            tid = f.text(i, "test_id")
            t_idx = test_index(tid, f, i)
            n_idx = _node(network, f, i, tid, problems)
            q = f.number(i, "flow", tid) if "flow" in f.columns else math.nan
            if f.text(i, "flow") != "" and f.text(i, "pitot") != "":
                if not _flow_matches_pitot(f, i, tid, q, problems):
                    continue
            elif f.text(i, "flow") != "":  # unused beside a measured flow, yet never junk
                _coefficient(f, i, tid)
                f.number(i, "outlet_diameter", tid)
            if math.isnan(q) and f.text(i, "flow") == "":
                if "pitot" not in f.columns or f.text(i, "pitot") == "":
                    problems.append(Problem("neither flow nor pitot is given", file="flows.csv",
                                            row=i + 2, id=tid, field="flow",
                                            expected="a flow [gpm] or a pitot reading [psi]"))
                    continue
                p = f.number(i, "pitot", tid, required=True)
                d = f.number(i, "outlet_diameter", tid, required=True)
                c = _coefficient(f, i, tid)
                if math.isnan(p) or math.isnan(d) or math.isnan(c):
                    continue
                q = float(pitot_discharge(p, d, c))
                pitot_tests.add(tid)
            if t_idx is None or n_idx is None or math.isnan(q):
                continue
            per = flows.setdefault(t_idx, {})
            per[n_idx] = per.get(n_idx, 0.0) + q  # two outlets on one hydrant add up

    # pressures.csv
    cols = {k: [] for k in ("test", "node", "kind", "pressure", "gauge_height", "sigma", "row", "stated")}
    pr = _Table(folder / "pressures.csv", problems, ("test_id", "node"))
    pr.require_any(("static", "residual"), "neither a static nor a residual column",
                   "'static [psi]' and 'residual [psi]'")
    if pr.ok and len(pr) == 0:
        problems.append(Problem("has a header but no readings", file=pr.name,
                                expected="one row per gauge and test: test_id, node, static, "
                                "residual"))
    if pr.ok:
        seen_gauges: dict[tuple[int, int], int] = {}
        for i in range(len(pr)):
            tid = pr.text(i, "test_id")
            t_idx = test_index(tid, pr, i)
            n_idx = _node(network, pr, i, tid, problems)
            gh = pr.number(i, "gauge_height", tid)
            sg = pr.number(i, "sigma", tid)
            gh = 0.0 if math.isnan(gh) else gh
            stated = not (math.isnan(sg) and sigma is None)
            sg = (units.PSI if sigma is None else sigma) if math.isnan(sg) else sg
            values = {k: pr.number(i, k, tid) for k in ("static", "residual") if k in pr.columns}
            if all(math.isnan(v) for v in values.values()) and all(pr.text(i, k) == "" for k in values):
                problems.append(Problem("no reading in the row", file="pressures.csv", row=i + 2,
                                        id=tid, field="static", expected="a static and/or a residual"))
                continue
            if t_idx is None or n_idx is None:
                continue
            if (t_idx, n_idx) in seen_gauges:
                problems.append(Problem(f"node '{network.node_ids[n_idx]}' already has a row for this "
                                        f"test (row {seen_gauges[(t_idx, n_idx)]})", file=pr.name,
                                        row=i + 2, id=tid, field="node",
                                        expected="one row per gauge and test"))
                continue
            seen_gauges[(t_idx, n_idx)] = i + 2
            for kind, value in values.items():
                if math.isnan(value):
                    continue
                cols["test"].append(t_idx)
                cols["node"].append(n_idx)
                cols["kind"].append(kind)
                cols["pressure"].append(value)
                cols["gauge_height"].append(gh)
                cols["sigma"].append(sg)
                cols["stated"].append(stated)
                cols["row"].append(i + 2)

    # boundary.csv
    heads: dict[int, dict[int, float]] = {}
    if (folder / "boundary.csv").is_file():
        b = _Table(folder / "boundary.csv", problems, ("test_id", "source"))
        b.require_any(("head", "level"), "no 'head' or 'level' column",
                      "'head [ft]' (the source's grade) or 'level [ft]' (a tank's water depth "
                      "above its floor, as the operator gives it)")
        if b.ok:
            seen_sources: dict[tuple[int, int], int] = {}
            for i in range(len(b)):
                tid = b.text(i, "test_id")
                t_idx = test_index(tid, b, i)
                s_idx = _node(network, b, i, tid, problems, junction_only=False)
                h = _boundary_grade(network, b, i, tid, s_idx, problems)
                if t_idx is None or s_idx is None or math.isnan(h):
                    continue
                given = heads.setdefault(t_idx, {})
                if s_idx in given:
                    problems.append(Problem(f"source '{network.node_ids[s_idx]}' already has a "
                                            f"grade for this test (row {seen_sources[(t_idx, s_idx)]})",
                                            file=b.name, row=i + 2, id=tid, field="source",
                                            expected="one row per source and test"))
                    continue
                seen_sources[(t_idx, s_idx)] = i + 2
                given[s_idx] = h

    if problems:
        raise InputError(problems)

    n_tests = len(order)
    residual_tests = {t for t, k in zip(cols["test"], cols["kind"]) if k == "residual"}
    bad = [order[t] for t in sorted(residual_tests) if not flows.get(t)]
    if bad:
        raise InputError([Problem("residual readings given but the test has no flowing hydrant",
                                  file="flows.csv", id=t, field="test_id",
                                  expected="one row per flowing outlet of the test") for t in bad])
    read = set(cols["test"])
    notes = [f"test {order[t]}: no gauge readings in pressures.csv; it informs nothing"
             for t in range(n_tests) if t not in read]

    # days for the optional demand factor: the date column of tests.csv, else one day
    dates = ["" for _ in range(n_tests)]
    if not info.empty and "date" in {units.parse_header(c)[0] for c in info.columns}:
        date_col = next(c for c in info.columns if units.parse_header(c)[0] == "date")
        by_id = dict(zip(info["test_id"], info[date_col]))
        dates = [by_id.get(t, "")[:10] for t in order]
    days = sorted(set(dates))
    day = np.array([days.index(d) for d in dates], dtype=np.int64)

    node = np.asarray(cols["node"], dtype=np.int64)
    return TestSet(
        folder=str(folder), test_ids=order, flows=[flows.get(t, {}) for t in range(n_tests)],
        source_head=[heads.get(t, {}) for t in range(n_tests)], day=day, days=days, info=info,
        test=np.asarray(cols["test"], dtype=np.int64), node=node,
        kind=np.asarray(cols["kind"], dtype=object), pressure=np.asarray(cols["pressure"], float),
        gauge_height=np.asarray(cols["gauge_height"], float), sigma=np.asarray(cols["sigma"], float),
        row=np.asarray(cols["row"], dtype=np.int64), elevation=network.elevation[node].astype(float),
        pitot_tests=sorted(pitot_tests), notes=notes, sigma_stated=np.asarray(cols["stated"], bool))
