"""The field app's value parsing never guesses (issue 9): a comma is refused with the reason, digits
other than 0-9 are refused. Before, ``1,004`` typed as a grade was stored as 1.0 ft, ``2,500`` as a
pitot as 2.5 psi, ``1,000`` as a residual as 1.0 psi; fullwidth digits were read as numbers."""

import pytest

from calib.errors import InputError
from mobile.services import values


@pytest.mark.parametrize("text, field", [
    ("1,004", "source_grade"), ("2,500", "pitot"), ("1,000", "residual"), ("72,5", "static"),
    ("1,000.5", "static"),
])
def test_a_comma_is_refused_with_the_reason(text, field):
    with pytest.raises(InputError) as err:
        values.parse_value(text, field)
    assert "a comma is not read" in str(err.value) and "72.5" in str(err.value)


@pytest.mark.parametrize("text", ["７２", "٧٢", "७२", "72\u00b2", "𝟕𝟐"])
def test_digits_other_than_ascii_are_refused(text):
    with pytest.raises(InputError) as err:
        values.parse_value(text, "static")
    assert "0-9" in str(err.value) or "not a number" in str(err.value)


def test_plain_values_still_read():
    assert values.parse_value("72.5", "static")[1] == "psi"
    assert values.parse_value("1004", "source_grade")[0] == pytest.approx(1004 * 0.3048)
    assert values.parse_value("500 kPa", "static")[0] == pytest.approx(500e3)


def test_field_ranges_are_the_readers():
    # one statement of each range (calib.limits): what the app takes, the calibration reader takes
    from calib import limits
    assert values.FIELDS["static"].high == limits.PRESSURE.high
    assert values.FIELDS["pitot"].low > limits.PITOT.low == 0.0  # open at zero, as the reader
    assert values.FIELDS["flow"].high == limits.FLOW.high
    with pytest.raises(InputError):
        values.parse_value("0", "pitot")
