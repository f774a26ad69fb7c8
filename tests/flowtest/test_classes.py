"""NFPA 291 hydrant classes by rated flow (NFPA 291 marking chapter, via check-values.md [S]):
AA >= 1500 gpm light blue; A 1000-1499 green; B 500-999 orange; C < 500 red."""

import pytest

from calib.errors import FlowTestError
from calib.flowtest import CLASSES, hydrant_class, pitot_discharge, rated_flow
from calib.units import GPM


@pytest.mark.parametrize("gpm, label, colour", [
    (1500.0, "AA", "light blue"),   # check-values.md: 1500 -> AA
    (1499.9, "A", "green"),         # check-values.md: 1499.9 -> A
    (1000.0, "A", "green"),
    (999.9, "B", "orange"),
    (500.0, "B", "orange"),         # check-values.md: 500 -> B
    (499.9, "C", "red"),
    (0.0, "C", "red"),
    (5000.0, "AA", "light blue"),
])
def test_class_boundaries(gpm, label, colour):
    cls = hydrant_class(gpm * GPM)
    assert (cls.label, cls.colour) == (label, colour)


def test_boundary_holds_through_unit_conversion():
    # 1500 gpm given in L/s (94.63529460 L/s, NIST SP 811 gallon) still lands in AA.
    assert hydrant_class("94.6352946 L/s").label == "AA"
    assert hydrant_class("1500 gpm").label == "AA"


def test_classes_are_labelled_as_nfpa_291_with_local_code_note():
    cls = hydrant_class("1600 gpm")
    assert cls.standard == "NFPA 291"
    assert cls.title.startswith("NFPA 291 class AA")
    assert "local codes" in cls.note
    assert [c.label for c in CLASSES] == ["AA", "A", "B", "C"]
    assert hydrant_class("1200 gpm").title == "NFPA 291 class A (1000 - 1499 gpm), green"
    assert hydrant_class("100 gpm").title == "NFPA 291 class C (less than 500 gpm), red"


def test_worked_example_22_psi_is_class_aa():
    # check-values.md: 22 psi on a 2.5 in smooth outlet, static 72, residual 58 -> 1598.53 gpm, class AA.
    q20 = rated_flow(pitot_discharge("22 psi", "2.5 in", 0.9), "72 psi", "58 psi")
    assert hydrant_class(q20).label == "AA"


def test_negative_or_junk_rated_flow_raises():
    with pytest.raises(FlowTestError, match="rated flow"):
        hydrant_class(-1.0)
    with pytest.raises(FlowTestError, match="rated flow"):
        hydrant_class("20 psi")


def test_si_description_gives_litres_per_second_beside_gpm():
    # 1500 gpm = 94.6 L/s; 1000 gpm = 63.1 L/s (1 gal = 3.785411784 L, NIST SP 811)
    assert hydrant_class("100 L/s").describe("si") == "NFPA 291 class AA (1500 gpm = 94.6 L/s or more), light blue"
    assert "1000 - 1499 gpm = 63.1 - 94.6 L/s" in hydrant_class("70 L/s").describe("si")
