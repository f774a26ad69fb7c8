"""Shared inputs of the fire-flow checks: the demo town and one fit of its demo day, written once."""

from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]
NETWORK = ROOT / "field_samples" / "tallowmere" / "network"
TESTS = ROOT / "field_samples" / "tallowmere" / "tests"


@pytest.fixture(scope="session")
def town():
    from calib.network.io import read_network
    return read_network(NETWORK)


@pytest.fixture(scope="session")
def fit_dir(tmp_path_factory, town):
    """The demo day's fit (no leave-one-out screens, to stay quick), exported as `calib fit` does."""
    from calib.calibration import export, fit, read_tests
    result = fit(town, read_tests(TESTS, town), influence=False)
    out = tmp_path_factory.mktemp("fit")
    export.write_outputs(result, out)
    return out
