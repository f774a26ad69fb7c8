"""Tests folders that were read silently wrong before (issue 9): each now an ``InputError`` naming
the file, row, test id and field. Pitot flows: Q = 29.83 c d^2 sqrt(p) [gpm, in, psi] (NFPA 291):
c 0.90, d 2.5 in, p 40 psi -> 1061.22 gpm (check-values.md [C]). Ranges: ``calib.limits``.
"""

import pytest

from calib.calibration import read_tests
from calib.errors import InputError

from .test_tests_io import _write, net  # noqa: F401 - the same small network and folder writer

FLOWS = "test_id,node,flow [gpm]\nA,J5,1000\n"
PRESSURES = "test_id,node,static [psi],residual [psi]\nA,J4,80,70\n"


def problems(folder, net) -> str:
    with pytest.raises(InputError) as err:
        read_tests(folder, net)
    return str(err.value)


@pytest.mark.parametrize("name", ["boundary.csv", "tests.csv", "flows.csv", "pressures.csv"])
def test_a_folder_where_a_file_should_be_is_named(tmp_path, net, name):
    folder = _write(tmp_path / "t", flows=FLOWS, pressures=PRESSURES)
    (folder / name).unlink(missing_ok=True)
    (folder / name).mkdir()  # boundary.csv, tests.csv: skipped without a word before
    assert f"{name}: is a folder, not a file" in problems(folder, net)


def test_flow_and_a_disagreeing_pitot_in_one_row(tmp_path, net):
    folder = _write(tmp_path / "t", pressures=PRESSURES,
                    flows="test_id,node,flow [gpm],pitot [psi],outlet_diameter [in],coefficient\n"
                          "A,J5,1500,40,2.5,0.9\n")
    text = problems(folder, net)
    assert "flows.csv, row 2, id 'A', field 'pitot': both a flow (1500.0 gpm) and a pitot" in text
    assert "the pitot gives 1061.2 gpm" in text  # NFPA 291, check-values.md [C]


def test_flow_beside_the_pitot_it_came_from_is_read(tmp_path, net):
    # the field app writes both; they agree (1061.2 gpm from 40 psi, 2.5 in, 0.90)
    folder = _write(tmp_path / "t", pressures=PRESSURES,
                    flows="test_id,node,flow [gpm],pitot [psi],outlet_diameter [in],coefficient\n"
                          "A,J5,1061.2,40,2.5,0.9\n")
    assert read_tests(folder, net).n_tests == 1


def test_flow_and_pitot_without_an_outlet_diameter(tmp_path, net):
    folder = _write(tmp_path / "t", pressures=PRESSURES,
                    flows="test_id,node,flow [gpm],pitot [psi],outlet_diameter [in]\nA,J5,1061.2,40,\n")
    assert "field 'outlet_diameter [in]': value is missing" in problems(folder, net)


def test_one_source_twice_in_one_test(tmp_path, net):
    source = str(net.node_ids[net.n_junctions])
    folder = _write(tmp_path / "t", flows=FLOWS, pressures=PRESSURES,
                    boundary=f"test_id,source,head [ft]\nA,{source},1004\nA,{source},1034\n")
    text = problems(folder, net)
    assert (f"boundary.csv, row 3, id 'A', field 'source': source '{source}' already has a grade "
            "for this test (row 2)") in text


def test_header_only_pressures_names_the_file(tmp_path, net):
    folder = _write(tmp_path / "t", flows=FLOWS,
                    pressures="test_id,node,static [psi],residual [psi]\n")
    assert "pressures.csv: has a header but no readings" in problems(folder, net)


@pytest.mark.parametrize("cell", ["８０", "8_0", "72,5", "2**6", "80 psi", "1e400", "9" * 400])
def test_cells_that_are_not_plain_numbers(tmp_path, net, cell):
    folder = _write(tmp_path / "t", flows=FLOWS,
                    pressures=f'test_id,node,static [psi],residual [psi]\nA,J4,"{cell}",70\n')
    assert "pressures.csv, row 2, id 'A', field 'static [psi]'" in problems(folder, net)


def test_tiny_sigma_is_refused(tmp_path, net):
    folder = _write(tmp_path / "t", flows=FLOWS,
                    pressures="test_id,node,static [psi],residual [psi],sigma [psi]\nA,J4,80,70,1e-300\n")
    text = problems(folder, net)
    assert "field 'sigma [psi]': 1e-300 is outside the plausible range" in text
    assert "0.01 to 20 psi" in text  # calib.limits.SIGMA
