"""CSV tables: unit headers parsed by pint, the optional columns, and US vs SI round trips.

Unit factors checked here are exact by definition: 1 ft = 0.3048 m, 1 in = 0.0254 m, 1 US gallon =
231 in^3 = 3.785411784 L (NIST SP 811, 2008 edition, appendix B).
"""

from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from calib.errors import InputError, NetworkError
from calib.network import PipeStatus
from calib.network.io import read_network, write_network_tables

DEMO = Path(__file__).resolve().parents[2] / "field_samples" / "tallowmere" / "network"
FT, INCH, GALLON = 0.3048, 0.0254, 3.785411784e-3  # NIST SP 811, exact


def assert_same_network(a, b, rtol=1e-12):
    """Every array of two networks equal: numbers to ``rtol`` relative, text and codes exactly."""
    assert list(a.node_ids) == list(b.node_ids)
    assert list(a.pipe_ids) == list(b.pipe_ids)
    assert a.n_junctions == b.n_junctions
    for name in ("elevation", "demand", "source_head", "length", "diameter", "roughness",
                 "minor_loss", "roughness_height", "installed", "x", "y"):
        np.testing.assert_allclose(getattr(a, name), getattr(b, name), rtol=rtol, atol=0,
                                   equal_nan=True, err_msg=name)
    for name in ("pipe_from", "pipe_to", "status", "hydrant"):
        np.testing.assert_array_equal(getattr(a, name), getattr(b, name), err_msg=name)
    for name in ("group", "material", "source_kind", "zone"):
        assert list(getattr(a, name)) == list(getattr(b, name)), name


def test_us_headers_convert_by_exact_definitions(make_folder):
    net = read_network(make_folder())
    # NIST SP 811 exact factors (module docstring)
    np.testing.assert_allclose(net.elevation, [100 * FT, 110 * FT, 300 * FT], rtol=1e-15)
    np.testing.assert_allclose(net.source_head, [300 * FT], rtol=1e-15)
    np.testing.assert_allclose(net.demand, [50 * GALLON / 60, 20 * GALLON / 60], rtol=1e-15)
    np.testing.assert_allclose(net.length, [1000 * FT, 500 * FT], rtol=1e-15)
    np.testing.assert_allclose(net.diameter, [8 * INCH, 6 * INCH], rtol=1e-15)
    assert list(net.node_ids) == ["J1", "J2", "R1"]  # junctions first, then sources (contract)
    assert list(net.pipe_from) == [2, 0] and list(net.pipe_to) == [0, 1]
    assert list(net.hydrant) == [True, False]


def test_any_unit_pint_knows(make_folder):
    folder = make_folder(
        junctions="id,elevation [m],demand [L/s]\nJ1,30,2.5\nJ2,31,1\n",
        sources="id,head [m]\nR1,90\n",
        pipes="id,from,to,length [km],diameter [mm],roughness\nP1,R1,J1,0.3,200,100\n"
              "P2,J1,J2,0.15,150,120\n")
    net = read_network(folder)
    np.testing.assert_allclose(net.elevation, [30, 31, 90], rtol=1e-15)
    np.testing.assert_allclose(net.demand, [2.5e-3, 1e-3], rtol=1e-15)  # 1 L = 1e-3 m3 (SI)
    np.testing.assert_allclose(net.length, [300, 150], rtol=1e-15)
    np.testing.assert_allclose(net.diameter, [0.2, 0.15], rtol=1e-15)


def test_us_and_si_tables_give_the_same_network(tmp_path):
    demo = read_network(DEMO)
    write_network_tables(demo, tmp_path / "us", units="us")
    write_network_tables(demo, tmp_path / "si", units="si")
    us, si = read_network(tmp_path / "us"), read_network(tmp_path / "si")
    header = (tmp_path / "si" / "pipes.csv").read_text().splitlines()[0]
    assert "length [m]" in header and "diameter [mm]" in header
    assert "demand [L/s]" in (tmp_path / "si" / "junctions.csv").read_text().splitlines()[0]
    assert_same_network(us, si)
    assert_same_network(demo, si)


def test_column_without_unit_names_it_and_suggests_units(make_folder):
    folder = make_folder(junctions="id,elevation,demand [gpm]\nJ1,100,50\nJ2,110,20\n")
    with pytest.raises(NetworkError) as err:
        read_network(folder)
    assert str(err.value) == ("junctions.csv, row 1, field 'elevation': column 'elevation' has no "
                              "unit in its header (expected a unit in brackets, e.g. "
                              "'elevation [ft]' or 'elevation [m]')")
    assert isinstance(err.value, InputError)


def test_roughness_height_without_unit_suggests_mm(make_folder):
    folder = make_folder(pipes="id,from,to,length [ft],diameter [in],roughness,roughness_height\n"
                               "P1,R1,J1,1000,8,100,0.26\nP2,J1,J2,500,6,120,0.26\n")
    with pytest.raises(NetworkError, match=r"'roughness_height \[mm\]'"):
        read_network(folder)


@pytest.mark.parametrize("header, text", [
    ("elevation [ftt]", "unknown unit 'ftt'"),
    ("elevation [gpm]", "unit 'gpm' is not an elevation unit"),
])
def test_unknown_or_wrong_units_are_reported(make_folder, header, text):
    folder = make_folder(junctions=f"id,{header},demand [gpm]\nJ1,100,50\nJ2,110,20\n")
    with pytest.raises(NetworkError) as err:
        read_network(folder)
    assert text in str(err.value) and "junctions.csv, row 1, field 'elevation'" in str(err.value)


def test_optional_pipe_columns(make_folder):
    folder = make_folder(
        pipes="id,from,to,length [ft],diameter [in],roughness,status,minor_loss,"
              "roughness_height [mm],group,material,installed\n"
              "P1,R1,J1,1000,8,100,Open,2.5,0.26,CI-1950s,cast iron,1955\n"
              "P2,J1,J2,500,6,120,check,,,,,\n")
    net = read_network(folder)
    assert list(net.status) == [PipeStatus.OPEN, PipeStatus.CHECK_VALVE]
    np.testing.assert_allclose(net.minor_loss, [2.5, 0.0])
    np.testing.assert_allclose(net.roughness_height[0], 0.26e-3, rtol=1e-15)
    assert np.isnan(net.roughness_height[1]) and np.isnan(net.installed[1])
    assert list(net.group) == ["CI-1950s", ""] and net.installed[0] == 1955


def test_hydrant_and_status_words(make_folder):
    folder = make_folder(
        junctions="id,elevation [ft],demand [gpm],hydrant\nJ1,100,50,True\nJ2,110,20,0\n"
                  "J3,105,0,Y\nJ4,105,0,maybe\n",
        pipes="id,from,to,length [ft],diameter [in],roughness,status\n"
              "P1,R1,J1,1000,8,100,CLOSED\nP2,J1,J2,500,6,120,shut\n"
              "P3,R1,J3,500,6,120,\nP4,J3,J4,500,6,120,Check Valve\n")
    with pytest.raises(NetworkError) as err:
        read_network(folder)
    text = str(err.value)
    assert ("junctions.csv, row 5, id 'J4', field 'hydrant': 'maybe' is not yes or no "
            "(expected yes/no, true/false or 1/0)") in text
    assert ("pipes.csv, row 3, id 'P2', field 'status': 'shut' is not a pipe status "
            "(expected open, closed or check") in text


def test_rows_count_blank_lines_as_a_person_does(make_folder):
    folder = make_folder(pipes="id,from,to,length [ft],diameter [in],roughness\n"
                               "P1,R1,J1,1000,8,100\n\nP2,J1,J2,five hundred,6,120\n")
    with pytest.raises(NetworkError) as err:
        read_network(folder)
    assert str(err.value) == ("pipes.csv, row 4, id 'P2', field 'length': 'five hundred' is not "
                              "a number")


def test_the_demo_town_matches_its_description():
    net = read_network(DEMO)
    assert 400 <= net.n_pipes <= 700
    assert set(net.source_kind) == {"reservoir", "tank"}
    relief = (net.elevation[: net.n_junctions].max() - net.elevation[: net.n_junctions].min()) / FT
    assert 20 <= relief <= 100  # 87 ft with Mereside, the low zone by the mere
    # Mereside: a realistic share of the town behind two reducing valves, and one throttle
    assert 0.1 <= (net.zone[: net.n_junctions] == "mereside").mean() <= 0.3
    assert sorted(net.valves.kind.tolist()) == [0, 0, 3]
    total_gpm = net.demand.sum() / (GALLON / 60)
    assert 300 <= total_gpm <= 1500
    assert 5 <= len(set(net.group)) <= 7
    assert 0.25 <= net.hydrant.mean() <= 0.4


def test_coordinates_with_or_without_a_unit(make_folder):
    net = read_network(make_folder(
        junctions="id,elevation [ft],demand [gpm],x [ft],y\nJ1,100,50,1000,250\nJ2,110,20,,\n"))
    np.testing.assert_allclose(net.x[:2], [1000 * FT, np.nan], rtol=1e-15)  # NIST SP 811, exact
    np.testing.assert_allclose(net.y[:2], [250, np.nan])  # no unit: map units as given


def test_one_field_in_two_unit_columns(make_folder):
    folder = make_folder(
        junctions="id,elevation [ft],elevation [m],demand [gpm]\nJ1,100,,50\nJ2,,30,20\n"
                  "J3,100,30,0\n",
        pipes="id,from,to,length [ft],diameter [in],roughness\nP1,R1,J1,1000,8,100\n"
              "P2,J1,J2,500,6,120\nP3,J2,J3,500,6,120\n")
    with pytest.raises(NetworkError) as err:
        read_network(folder)
    assert [str(p) for p in err.value.problems] == [
        "junctions.csv, row 4, id 'J3', field 'elevation': the value is given in more than one "
        "column (expected one column per field)"]
    (folder / "junctions.csv").write_text("id,elevation [ft],elevation [m],demand [gpm]\n"
                                          "J1,100,,50\nJ2,,30,20\nJ3,,31,0\n")
    net = read_network(folder)
    np.testing.assert_allclose(net.elevation[:3], [100 * FT, 30, 31], rtol=1e-15)


def test_missing_quantity_column_suggests_its_units(make_folder):
    with pytest.raises(NetworkError) as err:
        read_network(make_folder(sources="id,level [ft]\nR1,300\n"))
    assert ("sources.csv, row 1, field 'head': required column 'head' is missing (expected a "
            "column headed 'head [ft]' or 'head [m]')") in str(err.value)


def test_pumps_round_trip_through_si_tables(make_folder, tmp_path):
    folder = make_folder(
        pumps="id,from,to,head_1 [ft],flow_1 [gpm],head_2 [ft],flow_2 [gpm],head_3 [ft],"
              "flow_3 [gpm],speed\nPU1,R1,J2,200,100,180,500,120,1000,0.9\n")
    net = read_network(folder)
    back = read_network(write_network_tables(net, tmp_path / "si", units="si"))
    for name in ("shutoff_head", "curve_r", "curve_n", "speed"):
        np.testing.assert_allclose(getattr(back.pumps, name), getattr(net.pumps, name),
                                   rtol=1e-9, err_msg=name)
    assert "head_1 [m]" in (tmp_path / "si" / "pumps.csv").read_text().splitlines()[0]


def test_rows_after_a_quoted_cell_spanning_lines_and_a_ragged_row(make_folder):
    folder = make_folder(pipes='id,from,to,length [ft],diameter [in],roughness,material\n'
                               'P1,R1,J1,1000,8,100,"cast iron,\nlined 1988"\n'
                               'P2,J1,J2,500,6,120,PVC,extra\n'
                               'P3,J1,J2,x,6,120,PVC\n')
    with pytest.raises(NetworkError) as err:
        read_network(folder)
    assert [str(p) for p in err.value.problems] == [
        "pipes.csv, row 4, id 'P2': the row has 8 cells, the header 7 (expected one cell per "
        "column (quote text with commas))",
        "pipes.csv, row 5, id 'P3', field 'length': 'x' is not a number"]


def test_empty_file(make_folder):
    with pytest.raises(NetworkError, match="sources.csv: the file is empty"):
        read_network(make_folder(sources=""))


@settings(max_examples=15, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(seed=st.integers(0, 2**32 - 1), units=st.sampled_from(["us", "si"]))
def test_random_networks_round_trip_through_tables_and_geojson(tmp_path, seed, units):
    # Round trip property (no outside value): write then read gives the same arrays to 1e-12.
    from calib.network import Network
    from calib.network.io import write_network_geojson
    rng = np.random.default_rng(seed)
    nj = int(rng.integers(2, 30))
    chain = np.arange(nj)  # a path through every junction from the source keeps it one network
    extra = rng.integers(0, nj, 5)  # and five more pipes between two different junctions
    frm = np.concatenate([[nj], chain[:-1], extra])
    to = np.concatenate([[0], chain[1:], (extra + rng.integers(1, nj, 5)) % nj])
    p = len(frm)
    net = Network(
        node_ids=[f"N{i}" for i in range(nj + 1)], n_junctions=nj,
        elevation=rng.uniform(0, 200, nj + 1), demand=rng.uniform(0, 0.01, nj),
        source_head=rng.uniform(250, 300, 1), pipe_ids=[f"L{k}" for k in range(p)],
        pipe_from=frm, pipe_to=to, length=rng.uniform(1, 2000, p),
        diameter=rng.uniform(0.05, 0.6, p), roughness=rng.uniform(40, 150, p),
        minor_loss=rng.uniform(0, 3, p), roughness_height=rng.uniform(1e-6, 2e-3, p),
        x=rng.uniform(0, 5000, nj + 1), y=rng.uniform(0, 5000, nj + 1),
        hydrant=rng.random(nj) < 0.3)
    folder = tmp_path / f"t{seed}{units}"
    back = read_network(write_network_tables(net, folder, units=units))
    assert_same_network(net, back)
    geo = read_network(write_network_geojson(net, folder / "n.geojson", units=units,
                                             length_unit="ft" if units == "us" else "m"))
    assert_same_network(back, geo)


def test_cells_parse_to_the_floats_pandas_to_numeric_gave():
    # reference: pandas.to_numeric(errors="coerce"), which the reader used before; Python's float
    # is correctly rounded, so the bits must agree on any plain decimal number
    import random

    import numpy as np
    import pandas as pd

    from calib.network.tables import _numbers

    rng = random.Random(14)
    cells = []
    for _ in range(20000):
        digits = "".join(rng.choice("0123456789") for _ in range(rng.randint(1, 19)))
        p = rng.randint(0, len(digits))
        cell = digits[:p] + "." + digits[p:] if rng.random() < 0.8 else digits
        if rng.random() < 0.2:
            cell += f"e{rng.randint(-30, 30)}"
        cells.append("-" + cell if rng.random() < 0.3 else cell)
    cells += ["", "1e3", "+5", ".5", "5.", "1,000", "1e", "e5", "0x10", "abc", "inf", "-inf", "nan",
              "1e400", "4.9e-324", "123456789012345678901234567890", "True", "1.5.2"]
    text = np.array(cells, dtype=object)
    values, bad = _numbers(text)
    ref = pd.to_numeric(pd.Series(text, dtype=object).where(text != "", None),
                        errors="coerce").to_numpy(dtype=float, copy=True)
    ref_bad = (text != "") & ~np.isfinite(ref)
    ref[ref_bad] = np.nan
    assert np.array_equal(bad, ref_bad)
    assert np.array_equal(values, ref, equal_nan=True)
    assert values[~bad].tobytes() == ref[~ref_bad].tobytes()  # bit for bit, -0.0 included


def test_cells_that_python_alone_would_read_are_refused():
    # digit separators and non-ASCII digits: float() takes them, a CSV table of ours does not
    import numpy as np

    from calib.network.tables import _numbers

    values, bad = _numbers(np.array(["1_000", "\u0661\u0662", "12"], dtype=object))
    assert bad.tolist() == [True, True, False] and values[2] == 12.0
