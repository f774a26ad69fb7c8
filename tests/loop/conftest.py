"""Shared fixtures: the demo town and its day of tests (read once per session)."""

import json
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]
DEMO = ROOT / "field_samples" / "tallowmere"


@pytest.fixture(scope="session")
def demo():
    from calib.calibration import make_groups, read_tests
    from calib.network.io import read_network
    net = read_network(DEMO / "network")
    tests = read_tests(DEMO / "tests", net)
    truth = json.loads((DEMO / "tests" / "truth.json").read_text())
    return net, tests, make_groups(net), truth
