"""The GeoJSON writer's text: each feature written as the standard library's json.dumps writes it.

``write_network_geojson`` formats a column at a time instead of calling json.dumps per feature
(benchmarks/README.md, "C4"); the reference here is Python's json module (RFC 8259 text, its
default ``ensure_ascii`` escapes and ``float.__repr__`` numbers) over ``network_features``' dicts.
"""

import json
from pathlib import Path

import numpy as np
import pytest

from calib.network import geojson
from calib.network.io import read_network, write_network_geojson

DEMO = Path(__file__).resolve().parents[2] / "field_samples" / "tallowmere"


def reference_text(network, units="us", length_unit="ft") -> str:
    """The file as json.dumps writes it: the header, then one feature a line."""
    collection = geojson.network_features(network, units, length_unit)
    features = collection.pop("features")
    head = json.dumps(collection)[:-1]
    body = ",\n".join(json.dumps(f, separators=(",", ":")) for f in features)
    return f'{head}, "features": [\n{body}\n]}}\n'


def assert_same_text(network, tmp_path, units="us", length_unit="ft"):
    path = write_network_geojson(network, tmp_path / "n.geojson", units=units,
                                 length_unit=length_unit)
    written = path.read_text(encoding="utf-8")
    expected = reference_text(network, units, length_unit)
    if written != expected:  # the first line that differs, for the message
        pairs = zip(written.splitlines(), expected.splitlines())
        line = next((w, e) for w, e in pairs if w != e) if written.count("\n") == \
            expected.count("\n") else ("line count", "differs")
        pytest.fail(f"written text differs from json.dumps: {line}")


@pytest.mark.parametrize("units, length_unit", [("us", "ft"), ("si", "m"), ("us", None)])
def test_demo_town_as_json_writes_it(tmp_path, units, length_unit):
    net = read_network(DEMO / "network")  # junctions, a reservoir, pipes, control valves
    assert len(net.valves)
    assert_same_text(net, tmp_path, units, length_unit)


def test_demo_town_from_geojson_as_json_writes_it(tmp_path):
    assert_same_text(read_network(DEMO / "network.geojson"), tmp_path)


def _awkward(make_folder):
    """A small network whose values take every path of the writer: a tank with its floor and a
    reservoir without, a pump, text to escape, -0.0 beside 0.0, a node without coordinates, kept
    vertices (one not finite, one with a third number), a missing value in a float column and in
    a text column."""
    folder = make_folder(
        junctions="id,elevation [ft],demand [gpm],hydrant,zone\n"
                  'J1,100,50,yes,Zürich "north"\nJ2,110,0,no,a\\b\nJ3,105,-0,no,\n',
        sources="id,head [ft],kind,floor [ft],level_max [ft]\nR1,300,tank,260,50\n"
                "R2,290,reservoir,,\n",
        pipes="id,from,to,length [ft],diameter [in],roughness,material\n"
              "P1,R1,J1,1000,8,100,cast iron\nP2,J1,J2,500,6,120,ductile iron \u2013 lined\n"
              "P3,J2,J3,400,6,120,\nP4,R2,J3,700,8,110,PVC\n",
        pumps="id,from,to,design_head [ft],design_flow [gpm],speed\nPU1,R2,J2,60,300,0.95\n")
    net = read_network(folder)
    n = len(net.node_ids)
    x, y = np.arange(n, dtype=float) * 100.0, np.zeros(n)
    x[0], y[1] = -0.0, -0.0  # -0.0 and 0.0 are different bits and different text ("-0.0")
    x[2] = np.nan  # J3 has no coordinates: its point and its straight lines are null
    demand = net.demand.copy()
    demand[1] = np.nan  # a value a float column cannot give: null
    zone = net.zone.copy()
    zone[2] = None
    vertices = [[(0.0, 0.0), (1e-7, 12345.678901234567)], None,
                [(1.0, 2.0), (np.inf, 3.0)], [(1.0, 2.0, 3.0), (4.0, 5.0, 6.0)]]
    return net.replace(x=x, y=y, demand=demand, zone=zone, pipe_geometry=vertices)


@pytest.mark.parametrize("units, length_unit", [("us", "ft"), ("si", "m"), ("us", None)])
def test_every_path_as_json_writes_it(make_folder, tmp_path, units, length_unit):
    net = _awkward(make_folder)
    assert_same_text(net, tmp_path, units, length_unit)
    text = (tmp_path / "n.geojson").read_text(encoding="utf-8")
    # the cases are really there (else the comparison above proves less than it says)
    assert '"zone":"Z\\u00fcrich \\"north\\""' in text and '"a\\\\b"' in text
    assert '"coordinates":[-0.0,0.0]' in text and '"geometry":null' in text
    assert '"floor [' in text and text.count('"floor [') == 1  # the reservoir has none
    assert '"kind":"pump"' in text and "null" in text


def test_float_texts_are_float_repr():
    # float.__repr__ is Python's shortest round-trip text (the language reference, "Floating
    # point"); the writer formats each distinct bit pattern once
    values = [0.1, -0.0, 0.0, 1e22, 1e-7, 5e-324, 12345.678901234567, 0.1, None, -0.0]
    texts = geojson._float_texts(values)
    assert texts == [json.dumps(v) for v in values]
    assert texts[1] == "-0.0" and texts[2] == "0.0" and texts[8] == "null"


def test_columns_keep_what_json_refuses():
    # json.dumps writes NaN for a float NaN kept in a text column, and refuses a numpy integer
    assert geojson._texts(["a", float("nan")]) == ['"a"', "NaN"]
    with pytest.raises(TypeError):
        geojson._texts([np.int64(3), "a"])
    with pytest.raises(TypeError):
        json.dumps(np.int64(3))
