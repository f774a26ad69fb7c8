"""Shared fixtures: the demo town and its day of tests (read once per session)."""

import json
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]
DEMO = ROOT / "field_samples" / "tallowmere"


@pytest.fixture(scope="session")
def demo(demo_day):
    from calib.calibration import make_groups
    net, tests = demo_day
    truth = json.loads((DEMO / "tests" / "truth.json").read_text())
    return net, tests, make_groups(net), truth
