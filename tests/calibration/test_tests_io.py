"""The tests-folder reader: units in brackets, pitot conversion, grades, and errors a person can act on."""

import numpy as np
import pytest

from calib import units
from calib.calibration import read_tests
from calib.calibration.synthetic import grid_network
from calib.errors import InputError


@pytest.fixture()
def net():
    return grid_network(4, 3, seed=0)


def _write(folder, **files):
    folder.mkdir(parents=True, exist_ok=True)
    for name, text in files.items():
        (folder / f"{name}.csv").write_text(text)
    return folder


def test_pitot_rows_become_flows_by_nfpa_291(tmp_path, net):
    # check-values.md [C]: c 0.90, d 2.5 in, p 40 psi -> 1061.22 gpm (Q = 29.83 c d^2 sqrt(p), NFPA 291)
    # and two 2.5 in outlets, c 0.90, pitots 18 and 20 psi: 711.89 + 750.40 = 1462.29 gpm (sum flows)
    folder = _write(tmp_path / "t",
                    flows="test_id,node,pitot [psi],outlet_diameter [in],coefficient,flow [gpm]\n"
                          "A,J5,40,2.5,0.9,\nB,J6,18,2.5,0.90,\nB,J6,20,2.5,smooth,\n",
                    pressures="test_id,node,static [psi],residual [psi]\nA,J4,80,70\nB,J7,80,66\n")
    ts = read_tests(folder, net)
    assert ts.flows[0][5] / units.GPM == pytest.approx(1061.22, abs=0.01)
    assert ts.flows[1][6] / units.GPM == pytest.approx(1462.29, abs=0.01)
    assert ts.pitot_tests == ["A", "B"]


def test_readings_become_grades_with_elevation_and_gauge_height(tmp_path, net):
    # HGL = p / gamma + elevation + gauge height; 1 psi = 2.308965 ft of 60 degF water (NIST SP 811,
    # from memory, as in check-values.md)
    folder = _write(tmp_path / "t", flows="test_id,node,flow [gpm]\nA,J5,1000\n",
                    pressures="test_id,node,static [psi],residual [psi],gauge_height [ft]\n"
                              "A,J4,80,70,2.5\n")
    ts = read_tests(folder, net)
    assert list(ts.kind) == ["static", "residual"]
    expected_ft = 80 * 2.308965 + net.elevation[4] / units.FT + 2.5
    assert ts.hgl[0] / units.FT == pytest.approx(expected_ft, rel=1e-6)
    assert ts.sigma[0] == pytest.approx(units.PSI)  # default 1 psi


def test_si_headers_give_the_same_si_values(tmp_path, net):
    us = _write(tmp_path / "us", flows="test_id,node,flow [gpm]\nA,J5,1000\n",
                pressures="test_id,node,static [psi],residual [psi],gauge_height [ft]\nA,J4,80,70,2\n",
                boundary="test_id,source,head [ft]\nA,R1,250\n")
    si = _write(tmp_path / "si", flows=f"test_id,node,flow [L/s]\nA,J5,{1000 * units.GPM * 1000!r}\n",
                pressures="test_id,node,static [kPa],residual [kPa],gauge_height [m]\n"
                          f"A,J4,{80 * units.PSI / 1000!r},{70 * units.PSI / 1000!r},{2 * 0.3048!r}\n",
                boundary=f"test_id,source,head [m]\nA,R1,{250 * 0.3048!r}\n")
    a, b = read_tests(us, net), read_tests(si, net)
    assert a.flows[0][5] == pytest.approx(b.flows[0][5], rel=1e-12)
    np.testing.assert_allclose(a.hgl, b.hgl, rtol=1e-12)
    assert a.source_head[0][net.n_junctions] == pytest.approx(250 * 0.3048)


def test_extra_columns_and_files_are_ignored(tmp_path, net):
    folder = _write(tmp_path / "t", flows="test_id,node,flow [gpm],outlet,remark\nA,J5,900,2,ok\n",
                    pressures="test_id,node,static [psi],residual [psi],photo\nA,J4,80,70,x.jpg\n",
                    tests="test_id,date,crew\nA,2026-05-14T09:00,demo crew\n")
    (folder / "A.json").write_text("{}")
    ts = read_tests(folder, net)
    assert ts.days == ["2026-05-14"] and ts.info["crew"][0] == "demo crew"


def test_every_problem_is_named_with_file_row_id_field(tmp_path, net):
    folder = _write(tmp_path / "t",
                    flows="test_id,node,pitot [psi],outlet_diameter [in]\nA,J99,400,2.5\n",
                    pressures="test_id,node,static [psi],residual [psi]\nA,J4,eighty,70\nA,R1,80,70\n")
    with pytest.raises(InputError) as err:
        read_tests(folder, net)
    text = str(err.value)
    assert "flows.csv, row 2, id 'A', field 'node': node 'J99' is not in the network" in text
    assert "flows.csv, row 2, id 'A', field 'pitot [psi]': 400 is outside the plausible range" in text
    assert "pressures.csv, row 2, id 'A', field 'static [psi]': 'eighty' is not a number" in text
    assert "pressures.csv, row 3" in text and "is a source" in text
    assert len(err.value.problems) == 4


def test_wrong_unit_and_missing_files(tmp_path, net):
    folder = _write(tmp_path / "t", flows="test_id,node,flow [ft]\nA,J5,900\n",
                    pressures="test_id,node,static [psi],residual [psi]\nA,J4,80,70\n")
    with pytest.raises(InputError, match=r"flows.csv, field 'flow \[ft\]': unit 'ft' is not a flow unit"):
        read_tests(folder, net)
    with pytest.raises(InputError, match="pressures.csv is missing"):
        read_tests(_write(tmp_path / "u", flows="test_id,node,flow [gpm]\n"), net)


def test_field_app_export_layout_reads(tmp_path, net):
    # the field app writes flow and the pitot it came from side by side (the flow is taken as it is),
    # an empty boundary.csv when no grade was noted, and extra columns in tests.csv
    folder = _write(tmp_path / "t",
                    flows="test_id,node,flow [gpm],pitot [psi],outlet_diameter [in],coefficient,"
                          "pumper_factor,outlet,read_by\nA,J5,1061.2,40,2.5,0.9,,hose 1,demo\n",
                    pressures="test_id,node,static [psi],residual [psi],gauge_height [ft]\nA,J4,80,70,2\n",
                    boundary="test_id,source,head [ft]\n",
                    tests="test_id,date,time,crew,area,weather,notes,revision,status,"
                          "rated_flow [gpm],target [psi],class\n"
                          "A,2026-05-14,09:00,demo crew,north,dry,,1,finished,2500,20,AA\n")
    ts = read_tests(folder, net)
    assert ts.flows[0][5] / units.GPM == pytest.approx(1061.2)
    assert ts.pitot_tests == [] and ts.source_head == [{}]
    assert ts.n_readings == 2


def test_empty_or_broken_files_are_input_errors(tmp_path, net):
    folder = _write(tmp_path / "t", flows="", pressures="test_id,node,static [psi]\nA,J4,80,70,1,2\n")
    with pytest.raises(InputError) as err:
        read_tests(folder, net)
    text = str(err.value)
    assert "flows.csv: the file is empty" in text
    # a row with more cells than the header must not shift the columns (pandas would make an index)
    assert "pressures.csv, row 2: 6 cells but the header has 3" in text


def test_a_gauge_twice_in_one_test_is_a_problem(tmp_path, net):
    folder = _write(tmp_path / "t", flows="test_id,node,flow [gpm]\nA,J5,1000\n",
                    pressures="test_id,node,static [psi],residual [psi]\nA,J4,80,70\nA,J4,81,71\n")
    with pytest.raises(InputError, match=r"pressures.csv, row 3, id 'A', field 'node': node 'J4' "
                                         r"already has a row for this test \(row 2\)"):
        read_tests(folder, net)


def test_outlet_coefficient_cells_shape_number_or_problem(tmp_path, net):
    # NFPA 291 outlet figure: smooth 0.90, square 0.80, projecting 0.70 (check-values.md);
    # Q = 29.83 c d^2 sqrt(p): c 0.80, 2.5 in, 28 psi -> 789.23 gpm (check-values.md worked arithmetic)
    folder = _write(tmp_path / "t",
                    flows="test_id,node,pitot [psi],outlet_diameter [in],coefficient\nA,J5,28,2.5,Square\n",
                    pressures="test_id,node,static [psi],residual [psi]\nA,J4,80,70\n")
    assert read_tests(folder, net).flows[0][5] / units.GPM == pytest.approx(789.23, abs=0.01)
    bad = _write(tmp_path / "u",
                 flows="test_id,node,pitot [psi],outlet_diameter [in],coefficient\n"
                       "A,J5,28,2.5,oval\nA,J6,28,2.5,1.3\n",
                 pressures="test_id,node,static [psi],residual [psi]\nA,J4,80,70\n")
    with pytest.raises(InputError) as err:
        read_tests(bad, net)
    text = str(err.value)
    assert "flows.csv, row 2, id 'A', field 'coefficient': 'oval' is not a number" in text
    assert "flows.csv, row 3, id 'A', field 'coefficient': 1.3 is outside the plausible range" in text
    assert "smooth (0.90)" in text
