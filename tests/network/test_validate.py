"""Validation: every kind of problem gives a message with file, row (header = row 1), id and field,
and all of them are reported at once in one NetworkError (the behaviour the issue asks for)."""

import numpy as np
import pytest

from calib.errors import InputError, NetworkError
from calib.network.io import read_network
from calib.network.validate import C_RANGE, ROUGHNESS_HEIGHT_MAX

# The same invented three-node network as conftest.py's default folder.
JUNCTIONS = "id,elevation [ft],demand [gpm],hydrant\nJ1,100,50,yes\nJ2,110,20,no\n"
SOURCES = "id,head [ft]\nR1,300\n"
PIPES = ("id,from,to,length [ft],diameter [in],roughness\nP1,R1,J1,1000,8,100\n"
         "P2,J1,J2,500,6,120\n")

HEAD = "id,from,to,length [ft],diameter [in],roughness\n"


def problems_of(folder) -> list[str]:
    with pytest.raises(NetworkError) as err:
        read_network(folder)
    assert isinstance(err.value, InputError)  # the CLI maps InputError to exit code 2
    return [str(p) for p in err.value.problems]


def test_a_clean_network_passes(make_folder):
    assert read_network(make_folder()).n_pipes == 2


def test_pipe_end_naming_no_node(make_folder):
    got = problems_of(make_folder(pipes=HEAD + "P1,R1,J1,1000,8,100\nP2,J1,J9,500,6,120\n"))
    assert ("pipes.csv, row 3, id 'P2', field 'to': node 'J9' is not in junctions.csv or "
            "sources.csv (expected the id of a junction or a source)") in got


def test_duplicate_ids_within_and_across_tables(make_folder):
    got = problems_of(make_folder(
        junctions="id,elevation [ft],demand [gpm]\nJ1,100,50\nJ2,110,20\nJ1,120,0\n",
        sources="id,head [ft]\nR1,300\nJ2,250\n",
        pipes=HEAD + "P1,R1,J1,1000,8,100\nP1,J1,J2,500,6,120\n"))
    assert ("junctions.csv, row 4, id 'J1', field 'id': duplicate node id 'J1', already used in "
            "junctions.csv row 2 (expected ids unique across nodes)") in got
    assert any(p.startswith("sources.csv, row 3, id 'J2', field 'id': duplicate node id 'J2', "
                            "already used in junctions.csv row 3") for p in got)
    assert any(p.startswith("pipes.csv, row 3, id 'P1', field 'id': duplicate pipe or pump id")
               for p in got)


@pytest.mark.parametrize("length, diameter, field", [("0", "8", "length"), ("-5", "8", "length"),
                                                     ("1000", "0", "diameter")])
def test_non_positive_length_or_diameter(make_folder, length, diameter, field):
    got = problems_of(make_folder(pipes=HEAD + f"P1,R1,J1,{length},{diameter},100\n"
                                              "P2,J1,J2,500,6,120\n"))
    assert got == [f"pipes.csv, row 2, id 'P1', field '{field}': the {field} must be positive "
                   f"(expected a {field} above zero)"]


@pytest.mark.parametrize("c, bad", [(0.5, True), (1, False), (200, False), (200.5, True)])
def test_hazen_williams_c_range(make_folder, c, bad):
    # The 1-200 range is the plausibility bound for C (common practice).
    folder = make_folder(pipes=HEAD + f"P1,R1,J1,1000,8,{c}\nP2,J1,J2,500,6,120\n")
    if not bad:
        assert read_network(folder).roughness[0] == c
        return
    got = problems_of(folder)
    assert len(got) == 1
    assert got[0].startswith(f"pipes.csv, row 2, id 'P1', field 'roughness': Hazen-Williams C "
                             f"{c:g} is out of range (expected C between {C_RANGE[0]:g} and "
                             f"{C_RANGE[1]:g}")


def test_part_of_the_network_without_a_source(make_folder):
    got = problems_of(make_folder(
        junctions=JUNCTIONS + "J3,100,5\nJ4,100,5\n",
        pipes=PIPES + "P3,J3,J4,300,6,120\n"))
    assert len(got) == 1
    assert got[0].startswith("junctions.csv, row 4, id 'J3': 2 junction(s) ('J3', 'J4') reach no "
                             "source through open pipes or running pumps")


def test_closed_pipe_cuts_a_part_off(make_folder):
    got = problems_of(make_folder(pipes=HEAD.strip() + ",status\nP1,R1,J1,1000,8,100,open\n"
                                                       "P2,J1,J2,500,6,120,closed\n"))
    assert got[0].startswith("junctions.csv, row 3, id 'J2': 1 junction(s) ('J2') reach no source")


def test_many_unfed_junctions_are_summarised(make_folder):
    rows = "".join(f"K{i},100,1\n" for i in range(8))
    links = "".join(f"Q{i},K{i},K{i + 1},100,6,120\n" for i in range(7))
    got = problems_of(make_folder(junctions=JUNCTIONS + rows, pipes=PIPES + links))
    assert "8 junction(s) ('K0', 'K1', 'K2', 'K3', 'K4' and 3 more)" in got[0]


def test_source_with_no_pipe(make_folder):
    got = problems_of(make_folder(sources=SOURCES + "R2,280\n"))
    assert got == ["sources.csv, row 3, id 'R2': the source has no pipe (expected at least one "
                   "pipe or pump joining it to the network)"]


def test_unparseable_numbers(make_folder):
    got = problems_of(make_folder(
        junctions="id,elevation [ft],demand [gpm]\nJ1,1O0,50\nJ2,110,inf\n"))
    assert got == ["junctions.csv, row 2, id 'J1', field 'elevation': '1O0' is not a number",
                   "junctions.csv, row 3, id 'J2', field 'demand': 'inf' is not a number"]


def test_missing_value_and_column(make_folder):
    got = problems_of(make_folder(
        junctions="id,elevation [ft],demand [gpm]\nJ1,,50\nJ2,110,20\n",
        pipes="id,from,to,length [ft],diameter [in]\nP1,R1,J1,1000,8\nP2,J1,J2,500,6\n"))
    assert "junctions.csv, row 2, id 'J1', field 'elevation': value is missing" in got
    assert ("pipes.csv, row 1, field 'roughness': required column 'roughness' is missing "
            "(expected a column headed 'roughness')") in got


def test_missing_file(make_folder):
    folder = make_folder(pipes=None)
    got = problems_of(folder)
    assert got == [f"pipes.csv: file is missing from the network folder '{folder}'"]


def test_pipe_from_a_node_to_itself(make_folder):
    got = problems_of(make_folder(pipes=PIPES + "P3,J2,J2,100,6,120\n"))
    assert got == ["pipes.csv, row 4, id 'P3', field 'to': the link runs from node 'J2' to itself "
                   "(expected two different nodes)"]


def test_negative_minor_loss(make_folder):
    got = problems_of(make_folder(pipes=HEAD.strip() + ",minor_loss\nP1,R1,J1,1000,8,100,-1\n"
                                                       "P2,J1,J2,500,6,120,0\n"))
    assert got == ["pipes.csv, row 2, id 'P1', field 'minor_loss': minor loss must not be "
                   "negative (expected zero or more)"]


@pytest.mark.parametrize("mm, bad", [(0, False), (0.26, False), (10, False), (10.5, True),
                                     (250, True)])
def test_roughness_height_range(make_folder, mm, bad):
    # 0-10 mm: Moody's roughness chart (Moody 1944, Trans. ASME 66) runs from drawn tubing
    # (0.0015 mm) to riveted steel (up to 9 mm), from memory; 0.26 mm is its new cast iron.
    folder = make_folder(pipes=HEAD.strip() + ",roughness_height [mm]\n"
                         f"P1,R1,J1,1000,8,100,{mm}\nP2,J1,J2,500,6,120,0.26\n")
    if not bad:
        assert read_network(folder).roughness_height[0] == pytest.approx(mm * 1e-3, rel=1e-12)
        return
    assert ROUGHNESS_HEIGHT_MAX == pytest.approx(0.010)
    assert problems_of(folder) == [
        f"pipes.csv, row 2, id 'P1', field 'roughness_height': roughness height {mm:g} mm is out "
        "of range (expected 0 to 10 mm; new cast iron about 0.26 mm, riveted steel up to 9 mm)"]


def test_roughness_height_range_in_geojson(tmp_path, make_folder):
    # The same rule reaches a GeoJSON network: both readers share validate.assemble.
    from calib.network.io import write_network_geojson
    net = read_network(make_folder())
    path = write_network_geojson(net.replace(roughness_height=np.array([0.25, 2.6e-4])),
                         tmp_path / "net.geojson")
    with pytest.raises(NetworkError, match=r"roughness height 250 mm is out of range"):
        read_network(path)


def test_every_problem_at_once(make_folder):
    folder = make_folder(
        junctions="id,elevation [ft],demand [gpm]\nJ1,100,50\nJ2,abc,20\nJ1,100,0\n",
        sources="id,head [ft]\nR1,300\nR2,250\n",
        pipes=HEAD + "P1,R1,J1,-3,8,100\nP2,J1,J9,500,6,120\nP3,J1,J1,10,6,500\n")
    with pytest.raises(NetworkError) as err:
        read_network(folder)
    text = str(err.value)
    lines = text.splitlines()
    assert lines[0] == f"{len(err.value.problems)} problems:"
    expected = ["junctions.csv, row 3, id 'J2', field 'elevation': 'abc' is not a number",
                "junctions.csv, row 4, id 'J1', field 'id': duplicate node id 'J1'",
                "pipes.csv, row 2, id 'P1', field 'length': the length must be positive",
                "pipes.csv, row 3, id 'P2', field 'to': node 'J9' is not in junctions.csv",
                "pipes.csv, row 4, id 'P3', field 'to': the link runs from node 'J1' to itself",
                "pipes.csv, row 4, id 'P3', field 'roughness': Hazen-Williams C 500 is out",
                "sources.csv, row 3, id 'R2': the source has no pipe",
                "junctions.csv, row 3, id 'J2': 1 junction(s) ('J2') reach no source"]
    for part in expected:
        assert any(line.startswith(f"  - {part}") for line in lines), part
    assert len(err.value.problems) == len(expected)
