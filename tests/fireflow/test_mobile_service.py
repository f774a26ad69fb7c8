"""The field app's fire-flow service shows the command's numbers for one hydrant."""

import pandas as pd

from calib.cli import main
from mobile.services.fireflow import hydrant_fire_flow

from tests.fireflow.conftest import NETWORK


def test_service_matches_the_command_for_one_hydrant(town, fit_dir, tmp_path):
    out = tmp_path / "ff.csv"
    assert main(["fireflow", str(NETWORK), "--fit", str(fit_dir), "--out", str(out),
                 "--workers", "0", "--nodes", "J113", "--quiet"]) == 0
    row = pd.read_csv(out).iloc[0]
    view = hydrant_fire_flow(town, "J113", fit_folder=fit_dir)
    assert view.ok
    shown = dict(view.lines)
    assert shown["Available"] == f"{row['available [gpm]']:,.0f} gpm"
    assert shown["Interval"] == f"{row['low [gpm]']:,.0f} gpm - {row['high [gpm]']:,.0f} gpm (95 %)"
    assert "licensed engineer" in view.message


def test_service_says_what_is_missing(town):
    assert not hydrant_fire_flow(None, "J113").ok
    view = hydrant_fire_flow(town, "NOPE")
    assert not view.ok and "NOPE" in view.message
