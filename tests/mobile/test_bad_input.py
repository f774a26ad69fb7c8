"""Bad input: generated text in every numeric field never crashes the service layer and never
becomes a stored value (hypothesis). A value that is accepted is finite and in its range."""

import math

import pytest
from hypothesis import HealthCheck, given, settings, strategies as st

from calib.errors import InputError

from mobile.services import values

# Text a crew or a fumbling glove might produce, plus numbers with stray units and signs.
junk = st.one_of(
    st.text(max_size=30),
    st.text(alphabet="0123456789.,-+eE ", max_size=14),
    st.builds(lambda n, u: f"{n}{u}", st.floats(allow_nan=True, allow_infinity=True),
              st.sampled_from(["", " psi", "kPa", " gpm", "L/s", " in", "mm", " ft", "m", "%", "**2"])),
    st.sampled_from(["nan", "inf", "-inf", "1e308", "9" * 40, "2**1000", "1/0", "72 m", "0x1F",
                     "\x00", "72,5", "--3", ".", ""]),
)
FUZZ = settings(max_examples=150, deadline=None,
                suppress_health_check=[HealthCheck.function_scoped_fixture])


@FUZZ
@given(text=junk, field=st.sampled_from(sorted(values.FIELDS)), system=st.sampled_from(["us", "si"]))
def test_parse_value_raises_only_input_errors(text, field, system):
    try:
        si, unit = values.parse_value(text, field, system)
    except InputError as exc:
        assert str(exc)  # a message a person can read
        return
    spec = values.FIELDS[field]
    assert math.isfinite(si) and spec.low <= si <= spec.high and unit


@pytest.fixture
def ready(service):
    """A test with a gauge hydrant, a pitot outlet and a meter outlet: one slot of each kind."""
    h = service.area.hydrants
    tid = service.new_test(crew="Fuzz")
    service.set_gauges(tid, [h[0]])
    service.add_outlet(tid, h[1], "2.5")
    service.add_outlet(tid, h[2], kind="meter")
    return service, tid


@FUZZ
@given(text=junk, which=st.integers(0, 3))
def test_readings_never_store_junk(ready, text, which):
    service, tid = ready
    slot = [s for s, _, _ in service.slots(tid)][which]
    before = len(service.store.history(tid))
    out = service.enter(tid, slot, text)
    after = service.store.history(tid)
    if out.ok:
        assert len(after) == before + 1
        spec = values.FIELDS[slot.split("@")[0]]
        assert math.isfinite(after[-1].si_value) and spec.low <= after[-1].si_value <= spec.high
        assert after[-1].entered_text == str(text).strip()
    else:
        assert len(after) == before and out.message


@FUZZ
@given(text=junk)
def test_setup_numbers_never_store_junk(ready, text):
    service, tid = ready
    header = service.header(tid)
    out = service.set_gauge_height(tid, text)
    if not out.ok:
        assert service.header(tid)["gauge_height"] == header["gauge_height"]
    n = len(service.outlets(tid))
    out = service.add_outlet(tid, service.area.hydrants[3], diameter_text=text)
    assert len(service.outlets(tid)) == n + (1 if out.ok else 0)
    if out.ok:
        d = service.outlets(tid)[-1]["diameter"]
        assert math.isfinite(d) and values.FIELDS["diameter"].low <= d <= values.FIELDS["diameter"].high
    target = service.target
    if not service.set_target(text).ok:
        assert service.target == target
    boundary = service.header(tid).get("boundary", [])
    out = service.set_source_grade(tid, service.sources()[0], text)
    if out.ok:
        assert math.isfinite(service.header(tid)["boundary"][-1]["si"])
    else:
        assert service.header(tid).get("boundary", []) == boundary


@FUZZ
@given(text=st.text(max_size=300))
def test_text_fields_take_any_text_without_crashing(ready, text):
    service, tid = ready
    for name in ("crew", "weather", "notes"):
        assert service.set_field(tid, name, text).ok
    assert "\x00" not in service.header(tid)["notes"]
