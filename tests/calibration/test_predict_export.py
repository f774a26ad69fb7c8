"""predict_test against a closed-form single pipe; exports written atomically and formula-safe."""

import numpy as np
import pandas as pd
import pytest

from calib import units
from calib.calibration import export, predict_test
from calib.errors import InputError
from calib.network.model import Network


def one_pipe(c=100.0):
    """Reservoir -> 1000 ft of 8 in pipe -> junction J1 (elevation 0), no base demand."""
    return Network(node_ids=["J1", "R1"], n_junctions=1, elevation=[0.0, 60.0], demand=[0.0],
                   source_head=[60.0], pipe_ids=["P1"], pipe_from=[1], pipe_to=[0],
                   length=[1000 * units.FT], diameter=[8 * units.INCH], roughness=[c])


def test_predicted_drop_is_the_hazen_williams_loss_of_the_pipe():
    # check-values.md [C]: 8 in, C 100, 1000 ft, 1000 gpm: 9.04476 m (SI form, 10.67) and 29.694 ft
    # (US form, 4.727); the two forms differ by 0.07 %, so the tolerance is 0.2 %
    net = one_pipe()
    (r,) = predict_test(net, {"J1": 1000 * units.GPM}, ["J1"])
    assert r.static == pytest.approx(60.0 * units.GAMMA_WATER, rel=1e-9)
    assert units.pressure_to_head(r.drop) == pytest.approx(9.04476, rel=2e-3)
    # 8 in, C 130, 1000 gpm, 1000 ft: 18.266 ft US form / 18.254 ft SI form
    (r130,) = predict_test(net, {0: 1000 * units.GPM}, [0], roughness=np.array([130.0]))
    assert units.pressure_to_head(r130.drop) / units.FT == pytest.approx(18.26, rel=2e-3)
    (bare,) = predict_test(net, {"J1": 1000 * units.GPM}, "J1")  # one gauge given without a list
    assert bare.drop == pytest.approx(r.drop, rel=1e-12)


def test_predict_names_bad_ids():
    with pytest.raises(InputError) as err:
        predict_test(one_pipe(), {"J9": 0.01}, ["R1"])
    text = str(err.value)
    assert "node 'J9' is not in the network" in text and "node 'R1' is a source" in text


def test_csv_cells_that_look_like_formulas_are_neutralized(tmp_path):
    class Fake:  # the smallest result export.write_outputs needs for roughness.csv
        pass
    net = one_pipe().replace(pipe_ids=np.array(["=HYPERLINK(1)"], dtype=object),
                             group=np.array(["G1"], dtype=object), x=[np.nan, np.nan],
                             y=[np.nan, np.nan])
    from calib.calibration.groups import make_groups
    res = Fake()
    res.network, res.grouping = net, make_groups(net)
    res.c, res.c_low, res.c_high = np.array([90.0]), np.array([80.0]), np.array([100.0])
    res.roughness = res.roughness_export = lambda: np.array([90.0])
    res.c_determined = np.array([True])
    res.c_low_open = res.c_high_open = np.array([False])
    frame = export.roughness_frame(res)
    from calib import fileio
    fileio.write_csv(tmp_path / "roughness.csv", frame)
    back = pd.read_csv(tmp_path / "roughness.csv")
    assert back.pipe_id[0] == "'=HYPERLINK(1)" and back.c_factor[0] == 90.0
