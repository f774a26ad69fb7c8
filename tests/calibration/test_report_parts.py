"""The report's figures and fire-flow section made before the leave-one-out refits (``fit``'s
``on_result``, ``report.prepare``) are the ones made after the fit: the page is the same.

Why it holds: the leave-one-out refits only add notes to ``FitResult.influence``, which no figure and
no fire-flow number uses. The check compares the pages made both ways on the demo town (its fit
makes two leave-one-out refits), so a change that lets those refits touch anything drawn fails here.
"""

import re
from pathlib import Path

import pytest

from calib.calibration import fit, read_tests, report
from calib.network.io import read_network

ROOT = Path(__file__).resolve().parents[2]
DEMO = ROOT / "field_samples" / "tallowmere"


@pytest.fixture(scope="module")
def demo():
    net = read_network(DEMO / "network")
    tests = read_tests(DEMO / "tests", net)
    stages, seen, early = [], [], []

    def on_result(result):
        seen.append((result, list(stages)))
        early.append(report.prepare(result, "us"))  # no worker: the data only, drawn at render

    result = fit(net, tests, progress=lambda n, stage: stages.append(stage), on_result=on_result)
    return result, stages, seen, early


def _page(html: str) -> str:
    return re.sub(r"Generated \d{4}-\d\d-\d\d \d\d:\d\d", "Generated <time>", html)


def test_on_result_comes_once_before_the_leave_one_out_refits_with_the_returned_result(demo):
    result, stages, seen, _ = demo
    assert len(seen) == 1 and seen[0][0] is result
    before = seen[0][1]
    assert before and not any(s.startswith("leave-one-out") for s in before)
    # the solves counted in the result include those after the call
    assert result.n_solves >= len(stages) > len(before)


def test_a_page_from_parts_made_before_the_refits_is_the_page_made_after(demo):
    result, stages, _, early = demo
    assert any(s.startswith("leave-one-out") for s in stages)  # the case does refit after the call
    assert any(result.influence)  # and the refits added their notes after it
    late = report.prepare(result, "us")
    assert early[0].fire_flow == late.fire_flow
    assert _page(report.render(result, "us", parts=early[0])) == _page(
        report.render(result, "us", parts=late))


def test_parts_for_other_units_are_made_again(demo):
    result, _, _, early = demo
    page = report.render(result, "si", curves=False, parts=early[0])  # early[0]: US units, curves
    assert "kPa" in page and "Hydrant curves" not in page
