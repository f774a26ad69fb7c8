"""Loading an area from the office files, the data-folder override, a full disk seen from the
service, and the keypad's editing (plain pytest, no window needed)."""

import pytest

from calib.errors import InputError
from calib.network.io import read_network

from mobile.services.area import Area
from mobile.services.demo import TALLOWMERE


def test_area_from_the_network_folder_lists_its_hydrants():
    area = Area.load(TALLOWMERE)
    net = read_network(TALLOWMERE)
    assert sorted(area.hydrants) == sorted(str(i) for i in net.junction_ids[net.hydrant])
    first = area.hydrants[0]
    assert area.search(first)[0] == first
    assert area.check_hydrant(first.lower()) == first  # ids matched without regard to case


def test_area_from_geojson_matches_the_folder(tmp_path):
    geo = TALLOWMERE.parent / "network.geojson"  # the same network as GeoJSON (field_samples)
    assert Area.load(geo).hydrants == Area.load(TALLOWMERE).hydrants


def test_missing_area_file_is_an_input_error(tmp_path):
    with pytest.raises(InputError, match="no such file"):
        Area.load(tmp_path / "nope")


def test_unknown_hydrant_names_close_ones(area):
    with pytest.raises(InputError, match="not a junction of the area") as info:
        area.check_hydrant("TM-1")
    assert "TM-1" in str(info.value)


def test_hydrants_only_area_takes_plain_ids():
    area = Area("Hydrants only")
    assert area.check_hydrant(" H-12 ") == "H-12"
    with pytest.raises(InputError):
        area.check_hydrant("a,b")


def test_full_disk_while_entering_says_not_saved(service, area):
    tid = service.new_test(crew="X")
    service.set_gauges(tid, [area.hydrants[0]])
    assert service.enter(tid, f"static@{area.hydrants[0]}", "70").ok
    conn = service.store.conn
    conn.execute(f"PRAGMA max_page_count = {conn.execute('PRAGMA page_count').fetchone()[0]}")
    out = None
    for _ in range(3000):  # notes grow the header until the file is full
        out = service.set_field(tid, "notes", "n" * 2000)
        out = service.enter(tid, f"residual@{area.hydrants[0]}", "50")
        if not out.ok:
            break
    assert not out.ok and out.message.startswith("NOT SAVED") and "intact" in out.message
    assert service.readings(tid)[f"static@{area.hydrants[0]}"].entered_text == "70"


def test_data_folder_can_be_set_by_environment(tmp_path, monkeypatch):
    from mobile.app import DATA_ENV, FieldApp

    monkeypatch.setenv(DATA_ENV, str(tmp_path / "env"))
    assert FieldApp().resolve_data_dir() == tmp_path / "env"
    assert FieldApp(data_dir=tmp_path / "arg").resolve_data_dir() == tmp_path / "arg"


def test_keypad_edits_its_text():
    from mobile.widgets.keypad import MAX_CHARS, Keypad

    pad = Keypad()
    seen = []
    pad.bind(on_enter=lambda _, text: seen.append(text))
    for key in "72.5.":  # a second decimal point is ignored
        pad.press(key)
    assert pad.text == "72.5"
    pad.press("-")
    assert pad.text == "-72.5"
    pad.press("del")
    pad.enter()
    assert seen == ["-72."]
    pad.press("clear")
    for _ in range(MAX_CHARS + 5):
        pad.press("9")
    assert len(pad.text) == MAX_CHARS


def test_every_kv_file_loads():
    from mobile.app import load_kv

    load_kv()  # raises on a syntax or rule error in any .kv file
