"""The field app's model check on a zoned network: it names a reducing valve that changes state
while the hydrant flows (reference: the valve's definition - it opens fully once the grade upstream
falls below its setting; common practice). Invented data (``synthetic.zoned_grid``)."""

import numpy as np

from calib.calibration import predict_test
from calib.units import GPM, PSI
from calib.calibration.synthetic import zoned_grid


def test_field_model_check_says_when_a_valve_changes_state():
    from mobile.services.check import CheckJob, run_job  # the service layer, no window

    net, east = zoned_grid(119.5)
    far = str(net.node_ids[int(np.flatnonzero(east)[-1])])
    predicted = predict_test(net, flows={far: 1500 * GPM}, gauges=[far])[0]
    job = CheckJob(net, {far: 1500 * GPM}, [far], {far: (predicted.static, predicted.residual)},
                   "us", 3 * PSI)
    result = run_job(job)
    assert result.ok
    assert "valve V1 is active in the static snapshot and open" in result.message
