"""Handbook priors, grouping rules and the calibration accuracy criteria."""

import numpy as np
import pytest

from calib import units
from calib.calibration import criteria
from calib.calibration.groups import make_groups, parse_rule
from calib.calibration.priors import cast_iron_c, normalize_material, pipe_prior
from calib.calibration.synthetic import grid_network
from calib.errors import CalibrationError, InputError


@pytest.mark.parametrize("age, d_in, c", [
    # Unlined cast iron by age, 4 in / 12 in columns: Walski et al. (2003) after Lamont (1981), as in
    # check-values.md (from memory, medium-low)
    (5, 4, 118), (10, 4, 107), (20, 4, 89), (5, 12, 120), (10, 12, 111), (20, 12, 96),
    (0, 8, 130),  # new cast iron 130: Lindeburg, Civil Engineering Reference Manual
])
def test_cast_iron_table_points(age, d_in, c):
    assert cast_iron_c(age, d_in * units.INCH) == pytest.approx(c, abs=1e-9)


def test_cast_iron_interpolates_between_columns_and_ages():
    # [C] linear interpolation: 20 yr, 8 in -> (89 + 96) / 2 = 92.5; 15 yr, 4 in -> (107 + 89) / 2 = 98
    assert cast_iron_c(20, 8 * units.INCH) == pytest.approx(92.5)
    assert cast_iron_c(15, 4 * units.INCH) == pytest.approx(98.0)


def test_material_priors_from_lindeburg():
    # Lindeburg: DI cement-mortar lined 140, asbestos cement 140, PVC 150 (check-values.md)
    c, spread = pipe_prior(["cement-lined ductile iron", "AC", "PVC", "granite"],
                           [1990, 1970, 2000, np.nan], np.full(4, 0.2), year=2026)
    np.testing.assert_allclose(c[:3], [140, 140, 150])
    assert c[3] == 110 and spread[3] == 25  # unknown material: a wide prior
    assert normalize_material("Unlined Cast Iron") == "cast iron"


def test_group_rules():
    net = grid_network(5, 4, n_groups=2, seed=0)
    assert parse_rule("material,diameter=8,12") == [("material", None), ("diameter", (8.0, 12.0))]
    g = make_groups(net, "material,decade")
    assert set(g.names) == {"cast iron / 1950s", "ductile iron / 1960s"}
    gd = make_groups(net, "diameter")
    assert all(name.endswith("in") for name in gd.names)
    assert gd.n_pipes().sum() == net.n_pipes
    with pytest.raises(InputError, match="unknown grouping key 'age'"):
        make_groups(net, "age")
    empty = net.replace(group=np.full(net.n_pipes, "", dtype=object))
    with pytest.raises(CalibrationError, match="--group-by"):
        make_groups(empty)


def test_wrc_1989_shares():
    # WRc (1989) Network Analysis - A Code of Practice (from memory): 85 % within 0.5 m,
    # 95 % within 0.75 m, 100 % within 2 m
    err = np.array([0.1] * 17 + [0.6, 0.7, 1.5])  # 85 % within 0.5, 95 % within 0.75, 100 % within 2
    got = criteria.wrc_1989(err)
    assert [c.achieved for c in got] == pytest.approx([0.85, 0.95, 1.0])
    assert all(c.passed for c in got)
    assert not criteria.wrc_1989(err + 0.45)[0].passed
    # "or 5 % of the maximum head loss, whichever is greater": 20 m of loss widens 0.5 m to 1 m
    assert criteria.wrc_1989(err, max_headloss_m=20.0)[0].tolerance == pytest.approx(1.0)


def test_awwa_ecac_1999_shares():
    # AWWA ECAC (1999) guidelines (from memory): +/-5 psi for 100 %; +/-2 psi for 90 %
    err = np.array([1.0] * 9 + [3.0]) * units.PSI
    planning, design = criteria.awwa_ecac_1999(err)
    assert planning.passed and planning.achieved == 1.0
    assert design.achieved == pytest.approx(0.9) and design.passed
    assert not criteria.awwa_ecac_1999(err * 2.5)[1].passed  # 2.5 psi: none within 2


def test_length_weighted_group_mean_and_spread_back_to_pipes():
    # closed form: sum(L_k v_k) / sum(L_k) over each group's pipes; pipes in no group keep their own
    net = grid_network(5, 4, n_groups=2, seed=0)
    g = make_groups(net)
    v = np.arange(net.n_pipes, dtype=float)
    for k, name in enumerate(g.names):
        sel = g.index == k
        assert g.length_weighted(net, v)[k] == pytest.approx(
            np.sum(net.length[sel] * v[sel]) / np.sum(net.length[sel]), rel=1e-12), name
    idx = g.index.copy()
    idx[0] = -1
    from calib.calibration.groups import Grouping
    partial = Grouping(names=g.names, index=idx, rule="test")
    back = partial.per_pipe([70.0, 130.0], fallback=v)
    assert back[0] == v[0]  # in no group: unchanged
    np.testing.assert_array_equal(back[1:], np.array([70.0, 130.0])[idx[1:]])
