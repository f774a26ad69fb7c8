"""What a full field day met (issue 10, part A): tank levels, SI mode, any junction, stale messages,
corrections and exports that never drop a test, the model-check verdict kept with the test.

Numbers: grade = floor elevation + water depth (closed form); 2.5 in = 63.5 mm and 20 psi =
137.895 kPa (NIST SP 811 exact inch and psi definitions, from memory).
"""

import json

import numpy as np
import pytest

from calib.units import FT, INCH, PSI

from mobile.services import export, values, views
from mobile.services.area import Area
from mobile.services.session import TestService


@pytest.fixture
def tank_service(store, area):
    """The built-in grid with its source as a tank: floor 250 ft, up to 40 ft deep (invented)."""
    net = area.network.replace(source_floor=np.array([250 * FT]),
                               source_level_max=np.array([40 * FT]),
                               source_kind=np.array(["tank"], dtype=object))
    return TestService(store, Area.from_network(net, name="Tallowmere"))


# --- A2: the tank box ---------------------------------------------------------------------------
def test_operator_level_becomes_the_grade(tank_service):
    s = tank_service
    tid = s.new_test(crew="X")
    src = s.sources()[0]
    out = s.set_tank_level(tid, src, "28")
    assert out.ok, out.message
    b = s.header(tid)["boundary"][0]
    assert b["si"] == pytest.approx(278 * FT)  # 250 ft floor + 28 ft of water
    assert b["entered"] == "level" and b["level"] == pytest.approx(28 * FT)
    assert "level 28.0 ft (grade 278.0 ft)" in views.setup_view(s, tid)["boundary"]


def test_a_depth_typed_as_a_grade_is_refused_naming_the_tank_range(tank_service):
    s = tank_service
    tid = s.new_test(crew="X")
    src = s.sources()[0]
    out = s.set_source_grade(tid, src, "28")
    assert not out.ok
    assert "level 0 to 40.0 ft (grade 250.0 to 290.0 ft)" in out.message, out.message
    assert not s.set_tank_level(tid, src, "45").ok  # deeper than the tank
    assert s.header(tid).get("boundary", []) == []
    assert s.set_source_grade(tid, src, "270").ok


def test_noted_value_can_be_cleared(tank_service):
    s = tank_service
    tid = s.new_test(crew="X")
    src = s.sources()[0]
    assert s.set_tank_level(tid, src, "10").ok
    assert s.clear_source(tid, src).ok
    assert s.header(tid)["boundary"] == []
    assert "none noted" in views.setup_view(s, tid)["boundary"]


def test_a_level_needs_a_floor_in_the_network(service):
    tid = service.new_test(crew="X")
    out = service.set_tank_level(tid, service.sources()[0], "10")
    assert not out.ok and "no floor" in out.message and "grade instead" in out.message
