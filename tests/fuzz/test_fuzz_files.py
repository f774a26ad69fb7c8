"""Fuzz: mutated copies of the demo town's network and tests folders through the readers, and
``solve`` / ``fit`` through ``main(argv)`` with generated options.

Oracle (``oracle.py``): a value that cannot be a number in range, put in any numeric cell, is
refused naming the file and the row; any other mutation (a folder for a file, an empty or truncated
file, binary bytes, a duplicated or deleted row, a dropped column, a header unit changed) is either
read into plausible finite arrays or refused naming a file - never another exception, never a hang.
The command line never writes over an input file (checked by content before and after).
"""

import csv
import hashlib
import io
import shutil
import tempfile
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, strategies as st

from calib import limits
from calib.calibration import read_tests
from calib.errors import InputError, NetworkError
from calib.network.io import read_network
from calib.units import parse_header

from . import oracle
from .strategies import maybe, must_refuse

DEMO = Path(__file__).resolve().parents[2] / "field_samples" / "tallowmere"
NETWORK_FILES = ("junctions.csv", "sources.csv", "pipes.csv")
TEST_FILES = ("flows.csv", "pressures.csv", "boundary.csv", "tests.csv")
KEEP_TESTS = {"T01", "T02", "T03"}  # a short season keeps each case quick


def _rows(path: Path) -> list[list[str]]:
    with open(path, newline="", encoding="utf-8") as fh:
        return [r for r in csv.reader(fh)]


NETWORK = {name: _rows(DEMO / "network" / name) for name in NETWORK_FILES}
TESTS = {name: [r for i, r in enumerate(_rows(DEMO / "tests" / name)) if i == 0 or r[0] in KEEP_TESTS]
         for name in TEST_FILES}
NUMERIC = {"roughness", "minor_loss", "installed", "coefficient"}


def numeric_columns(header: list[str]) -> list[int]:
    """Columns holding numbers: a unit in the header, or a dimensionless number column."""
    return [j for j, h in enumerate(header)
            if parse_header(h)[1] is not None or parse_header(h)[0] in NUMERIC]


def write(folder: Path, tables: dict[str, list[list[str]]]) -> None:
    folder.mkdir(parents=True, exist_ok=True)
    for name, rows in tables.items():
        buf = io.StringIO()
        csv.writer(buf, lineterminator="\n").writerows(rows)
        (folder / name).write_text(buf.getvalue(), encoding="utf-8")


def digest(folder: Path) -> str:
    h = hashlib.sha256()
    for p in sorted(folder.rglob("*")):
        h.update(str(p.relative_to(folder)).encode())
        if p.is_file():
            h.update(p.read_bytes())
    return h.hexdigest()


@st.composite
def cell_mutation(draw, tables):
    """(file, row as a person counts it, column, bad value): a numeric cell made impossible."""
    name = draw(st.sampled_from(sorted(n for n, rows in tables.items()
                                       if len(rows) > 1 and numeric_columns(rows[0]))))
    rows = tables[name]
    i = draw(st.integers(1, len(rows) - 1))
    j = draw(st.sampled_from(numeric_columns(rows[0])))
    return name, i, j, draw(must_refuse)


STRUCTURE = ("folder", "empty", "binary", "truncate", "duplicate row", "delete row", "drop column",
             "header unit", "any cell", "header only", "utf-16")


@st.composite
def structural_mutation(draw, tables):
    return (draw(st.sampled_from(STRUCTURE)), draw(st.sampled_from(sorted(tables))),
            draw(st.integers(0, 10**6)), draw(maybe))


def apply_structure(folder: Path, tables, mutation) -> str:
    kind, name, k, text = mutation
    rows = [list(r) for r in tables[name]]
    path = folder / name
    if kind == "folder":
        path.unlink()
        path.mkdir()
    elif kind == "empty":
        path.write_text("")
    elif kind == "binary":
        path.write_bytes(bytes((k * 7919 + i * 104729) % 256 for i in range(64 + k % 512)))
    elif kind == "truncate":
        data = path.read_bytes()
        path.write_bytes(data[: k % max(len(data), 1)])
    elif kind == "utf-16":
        path.write_bytes(path.read_text(encoding="utf-8").encode("utf-16"))
    elif kind in ("duplicate row", "delete row", "any cell") and len(rows) > 1:
        i = 1 + k % (len(rows) - 1)
        if kind == "duplicate row":
            rows.insert(i, list(rows[i]))
        elif kind == "delete row":
            del rows[i]
        else:
            rows[i][k % len(rows[i])] = text
        write(folder, {name: rows})
    elif kind == "drop column":
        j = k % len(rows[0])
        write(folder, {name: [r[:j] + r[j + 1:] for r in rows]})
    elif kind == "header unit":
        j = k % len(rows[0])
        rows[0][j] = f"{parse_header(rows[0][j])[0]} [{text}]"
        write(folder, {name: rows})
    elif kind == "header only":
        write(folder, {name: rows[:1]})
    return kind


def check_network(net) -> None:
    """A network that was read holds plausible finite numbers."""
    for values, limit in ((net.length, limits.PIPE_LENGTH), (net.diameter, limits.PIPE_DIAMETER),
                          (net.elevation, limits.ELEVATION), (net.source_head, limits.HEAD),
                          (net.demand, limits.DEMAND)):
        assert np.all(np.isfinite(values))
        assert not any(limit.refuses(float(v)) for v in values), limit.name
    assert np.all((net.roughness >= limits.C_FACTOR.low) & (net.roughness <= limits.C_FACTOR.high))


def refusal_of_cell(mutation, tables, read, error) -> str:
    """Write ``tables`` with one cell replaced, read them: the refusal's text (any other outcome fails)."""
    name, i, j, value = mutation
    tables = {n: [list(r) for r in rows] for n, rows in tables.items()}
    tables[name][i][j] = value
    with tempfile.TemporaryDirectory() as tmp:
        write(Path(tmp), tables)
        with oracle.time_bound(), pytest.raises(error) as err:
            read(tmp)
    assert oracle.names_something(str(err.value)), str(err.value)
    return str(err.value)


@oracle.fuzz_settings(100)
@given(mutation=cell_mutation(NETWORK))
def test_network_cell_that_cannot_be_a_number_in_range_is_refused(mutation):
    name, i, _, _ = mutation
    text = refusal_of_cell(mutation, NETWORK, read_network, NetworkError)
    assert name in text, text
    assert f"{name}, row {i + 1}" in text or "cannot be read" in text, text
    oracle.COUNTS[("network reader", "refused well")] += 1


def structural_case(mutation, tables, read, error, target, refuse_kinds, check):
    """One structural mutation of a copy of ``tables``: read into plausible values, or refused."""
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        write(folder, tables)
        kind = apply_structure(folder, tables, mutation)
        try:
            with oracle.time_bound():
                got = read(folder)
        except error as exc:
            oracle.library_refusal(exc, target)
            return
    assert (kind, mutation[1]) not in refuse_kinds, f"{kind} of {mutation[1]} accepted"
    check(got)
    oracle.COUNTS[(target, "accepted")] += 1


@oracle.fuzz_settings(100)
@given(mutation=structural_mutation(NETWORK))
def test_network_folder_mutations(mutation):
    must = {(k, n) for k in ("folder", "empty", "duplicate row", "binary") for n in NETWORK_FILES}
    structural_case(mutation, NETWORK, read_network, NetworkError, "network reader", must,
                    check_network)


_NET = read_network(DEMO / "network")


def check_tests(ts) -> None:
    for values, limit in ((ts.pressure, limits.PRESSURE), (ts.sigma, limits.SIGMA),
                          (ts.gauge_height, limits.GAUGE_HEIGHT)):
        assert np.all(np.isfinite(values)) and not any(limit.refuses(float(v)) for v in values)
    for flows in ts.flows:
        assert all(np.isfinite(q) and not limits.FLOW.refuses(q) for q in flows.values())


@oracle.fuzz_settings(100)
@given(mutation=cell_mutation(TESTS))
def test_tests_cell_that_cannot_be_a_number_in_range_is_refused(mutation):
    name, i, _, _ = mutation
    text = refusal_of_cell(mutation, TESTS, lambda folder: read_tests(folder, _NET), InputError)
    assert f"{name}, row {i + 1}" in text or ("cannot be read" in text and name in text), text
    oracle.COUNTS[("tests reader", "refused well")] += 1


@oracle.fuzz_settings(100)
@given(mutation=structural_mutation(TESTS))
def test_tests_folder_mutations(mutation):
    must = {(k, n) for k in ("folder", "binary") for n in TEST_FILES} | \
        {("empty", n) for n in ("flows.csv", "pressures.csv")}
    structural_case(mutation, TESTS, lambda folder: read_tests(folder, _NET), InputError,
                    "tests reader", must, check_tests)


SMALL = {"junctions.csv": "id,elevation [ft],demand [gpm]\nJ1,100,50\nJ2,110,20\n",
         "sources.csv": "id,head [ft]\nR1,300\n",
         "pipes.csv": "id,from,to,length [ft],diameter [in],roughness\nP1,R1,J1,1000,8,100\n"
                      "P2,J1,J2,500,6,120\n"}
OUT_NAMES = ["nodes.csv", "pipes_out.csv", "net/junctions.csv", "net/pipes.csv", "net",
             "net/./sources.csv", "sub/dir/x.csv", "nodes.csv"]


@oracle.fuzz_settings(60)
@given(factor=st.one_of(maybe, st.sampled_from(["1", "0", "2.5", "20", "1e-3"])),
       out=st.sampled_from(OUT_NAMES), pipes=st.one_of(st.none(), st.sampled_from(OUT_NAMES)),
       system=st.sampled_from(["us", "si"]), law=st.sampled_from(["hazen-williams",
                                                                    "darcy-weisbach"]))
def test_solve_command(factor, out, pipes, system, law):
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        (tmp / "net").mkdir()
        for name, text in SMALL.items():
            (tmp / "net" / name).write_text(text)
        before = digest(tmp / "net")
        argv = ["solve", tmp / "net", "--out", tmp / out, f"--demand-factor={factor}",
                "--units", system, "--headloss", law]
        if pipes is not None:
            argv += ["--pipes", tmp / pipes]
        code, _, err = oracle.run_cli(argv)
        refused = oracle.refused_well(code, err, "cli solve")
        assert digest(tmp / "net") == before, "an input file changed"
        if out.startswith("net/") or (pipes or "").startswith("net/") or (pipes and
                                                                           pipes == out):
            assert refused, "an output over an input or another output was accepted"
        if code == 0:
            assert oracle.is_plausible_text(factor) and not limits.DEMAND_FACTOR.refuses(
                float(factor))


@oracle.fuzz_settings(60)
@given(sigma=st.one_of(maybe, st.just("1 psi")), bounds=st.one_of(maybe, st.just("40,160"),
                                                                   st.text(",0123456789.e-",
                                                                           max_size=12)),
       threshold=st.one_of(maybe, st.just("3")), group_by=st.one_of(st.none(), maybe))
def test_fit_options_and_a_broken_tests_folder(sigma, bounds, threshold, group_by):
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        tests = tmp / "tests"
        write(tests, {**TESTS, "pressures.csv": TESTS["pressures.csv"][:1]})  # header only
        before = digest(tests)
        argv = ["fit", DEMO / "network", tests, "--out", tmp / "out", "--quiet",
                f"--sigma={sigma}", f"--c-bounds={bounds}", f"--threshold={threshold}"]
        if group_by is not None:
            argv.append(f"--group-by={group_by}")
        code, _, err = oracle.run_cli(argv)
        assert oracle.refused_well(code, err, "cli fit")  # the tests folder has no readings
        assert digest(tests) == before
        assert not (tmp / "out").exists()  # nothing written on refusal
