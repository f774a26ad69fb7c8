"""Network files that crashed the reader or were read silently wrong before (issue 9), each now one
``NetworkError`` naming the file, row, id and field. Ranges: ``calib.limits`` (common practice, as
it says there); RFC 7946 for longitude/latitude.
"""

import json

import numpy as np
import pytest

from calib.errors import ConvergenceError, NetworkError
from calib.hydraulics import NetworkSolver
from calib.network.io import read_network

from .conftest import PIPES


def problems_of(path) -> str:
    with pytest.raises(NetworkError) as err:
        read_network(path)
    return str(err.value)


@pytest.mark.parametrize("name", ["junctions.csv", "sources.csv", "pipes.csv", "pumps.csv"])
def test_a_folder_where_a_table_should_be(make_folder, name):
    folder = make_folder()
    path = folder / name
    if path.exists():
        path.unlink()
    path.mkdir()  # IsADirectoryError from the CSV reader before
    assert f"{name}: is a folder, not a file" in problems_of(folder)


def test_diameter_of_1e9_is_refused_with_the_range(make_folder):
    text = problems_of(make_folder(pipes=PIPES.replace("P2,J1,J2,500,6,", "P2,J1,J2,500,1e9,")))
    assert "pipes.csv, row 3, id 'P2', field 'diameter': pipe diameter" in text
    assert "above the plausible range" in text and "5 to 10000 mm" in text


@pytest.mark.parametrize("table, old, new, field", [
    ("junctions", "J2,110,20", "J2,1e300,20", "elevation"),
    ("junctions", "J2,110,20", "J2,110,1e300", "demand"),
    ("sources", "R1,300", "R1,1e300", "head"),
    ("pipes", "P2,J1,J2,500,", "P2,J1,J2,1e300,", "length"),
])
def test_huge_numbers_in_the_tables_are_refused(make_folder, table, old, new, field):
    from . import conftest
    texts = {"junctions": conftest.JUNCTIONS, "sources": conftest.SOURCES, "pipes": PIPES}
    assert old in texts[table]
    texts[table] = texts[table].replace(old, new)
    text = problems_of(make_folder(**texts))
    assert f"field '{field}'" in text and "plausible range" in text


def test_singular_solver_matrix_is_a_convergence_error_not_a_traceback():
    # read_network refuses such a pipe; a Network built in code reaches the solver: the sparse LU
    # raised a bare RuntimeError ("Factor is exactly singular") before
    from pathlib import Path
    demo = Path(__file__).resolve().parents[2] / "field_samples" / "tallowmere" / "network"
    net = read_network(demo)
    diameter = net.diameter.copy()
    diameter[7] = 1e9
    # on the zoned demo town which symptom comes first (a singular factor, a non-finite step, no
    # convergence) depends on the factorization backend; each is a ConvergenceError naming the
    # network, never a bare traceback
    with pytest.raises(ConvergenceError, match="network 'tallowmere': .*(singular|non-finite|no "
                                               "convergence)"):
        NetworkSolver(net.replace(diameter=diameter)).solve()


def _collection(features, **top):
    return {"type": "FeatureCollection", **top, "features": features}


def _point(ident, kind, x, y, **props):
    return {"type": "Feature", "geometry": {"type": "Point", "coordinates": [x, y]},
            "properties": {"id": ident, "kind": kind, **props}}


def _pipe(ident, a, b, coords, **props):
    return {"type": "Feature", "geometry": {"type": "LineString", "coordinates": coords},
            "properties": {"id": ident, "kind": "pipe", "from": a, "to": b, "diameter [in]": 8,
                           "roughness": 100, **props}}


def _grid_features(x0=500000.0, y0=3700000.0, dx=300.0):
    # a projected-grid network (metres of a national grid, invented), or lon/lat with a small dx
    return [_point("R1", "reservoir", x0, y0, **{"head [ft]": 300}),
            _point("J1", "junction", x0 + dx, y0, **{"elevation [ft]": 100, "demand [gpm]": 50}),
            _pipe("P1", "R1", "J1", [[x0, y0], [x0 + dx, y0]])]


def test_map_grid_coordinates_without_length_unit_are_refused(tmp_path):
    path = tmp_path / "net.geojson"
    path.write_text(json.dumps(_collection(_grid_features())))
    text = problems_of(path)
    assert "outside longitude -180..180 / latitude -90..90" in text and "length_unit" in text
    path.write_text(json.dumps(_collection(_grid_features(), length_unit="m")))
    assert read_network(path).length[0] == pytest.approx(300.0)  # said so: read as a grid


def test_properties_that_are_a_string(tmp_path):
    features = _grid_features(10.0, 50.0, 0.004)
    features[1]["properties"] = "J1 junction"
    path = tmp_path / "net.geojson"
    path.write_text(json.dumps(_collection(features)))
    assert "net.geojson, row 2, field 'properties': the properties are a str, not an object" \
        in problems_of(path)


def test_deeply_nested_json(tmp_path):
    path = tmp_path / "net.geojson"
    path.write_text('{"type": "FeatureCollection", "features": [' + "[" * 100000 + "]" * 100000
                    + "]}")
    assert "nested too deeply" in problems_of(path)


def test_deeply_nested_property_value(tmp_path):
    features = _grid_features(10.0, 50.0, 0.004)
    path = tmp_path / "net.geojson"
    text = json.dumps(_collection(features)).replace('"roughness": 100', '"roughness": '
                                                     + "[" * 5000 + "]" * 5000)
    path.write_text(text)
    message = problems_of(path)
    assert "net.geojson" in message


def test_good_lon_lat_file_still_reads(tmp_path):
    path = tmp_path / "net.geojson"
    path.write_text(json.dumps(_collection(_grid_features(10.0, 50.0, 0.004))))
    net = read_network(path)
    assert np.isfinite(net.length).all() and net.length[0] > 0


def test_header_unit_that_is_an_expression_is_refused_at_once(make_folder):
    import time
    started = time.monotonic()
    text = problems_of(make_folder(pipes=PIPES.replace("diameter [in]", "diameter [9**9**9]")))
    assert "pipes.csv, row 1, field 'diameter'" in text and "unknown unit" in text
    assert time.monotonic() - started < 10  # not evaluated by pint
