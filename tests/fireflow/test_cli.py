"""`python -m calib fireflow` on the demo town: the outputs a reviewer opens."""

import json

import pandas as pd

from calib.cli import main

from tests.fireflow.conftest import NETWORK

COLUMNS = ["node", "static [psi]", "flow_at_residual [gpm]", "flow_system [gpm]", "limiting_node", "zone",
           "available [gpm]", "low [gpm]", "high [gpm]", "class", "note"]


def test_fireflow_command_writes_csv_geojson_and_page(tmp_path, fit_dir, capsys):
    out = tmp_path / "fireflow.csv"
    code = main(["fireflow", str(NETWORK), "--fit", str(fit_dir), "--out", str(out),
                 "--workers", "0", "--nodes", "J017,J113,J322,J342", "--quiet"])
    assert code == 0
    table = pd.read_csv(out, keep_default_na=False)
    assert list(table.columns) == COLUMNS
    assert table["node"].tolist() == ["J017", "J113", "J322", "J342"]
    avail = table["available [gpm]"].astype(float)
    assert (table["low [gpm]"].astype(float) < avail).all() and (avail < table["high [gpm]"].astype(float)).all()
    assert (avail <= table["flow_at_residual [gpm]"].astype(float)).all()
    geo = json.loads((tmp_path / "fireflow.geojson").read_text())
    assert len(geo["features"]) == 4 and geo["features"][0]["geometry"]["type"] == "Point"
    page = (tmp_path / "fireflow.html").read_text()
    assert "<svg" in page and "authority having jurisdiction" in page and "J342" in page
    assert "light blue" not in page  # our own bands, not the marking colours
    # whole gpm in the page's table, also in a column with an empty figure (5017, not 5017.0)
    assert f"<td>{avail[0]:.0f}</td>" in page and f"<td>{avail[0]:.1f}</td>" not in page
    text = capsys.readouterr().out
    assert "target residual: 20.0 psi" in text and "95 %" in text
    # the zones used are said, in the run's settings (also on the page) and per hydrant
    assert "zone (hydraulic: hydraulic zones of the static solution" in text
    assert "hydraulic zones of the static solution" in page
    assert table["zone"].tolist() == ["PLANT+HILLTANK"] * 2 + ["PRV-2", "PLANT+HILLTANK"]
    assert main(["fireflow", str(NETWORK), "--out", str(out), "--workers", "0", "--quiet",
                 "--nodes", "J113,J144", "--zones", "column"]) == 0
    assert pd.read_csv(out)["zone"].tolist() == ["south", "mereside"]
    assert "zone (column: the junctions' zone column" in capsys.readouterr().out


def test_si_units_and_bad_options(tmp_path, capsys):
    out = tmp_path / "ff.csv"
    assert main(["fireflow", str(NETWORK), "--out", str(out), "--workers", "0", "--units", "si",
                 "--nodes", "J017", "--quiet", "--residual", "140 kPa"]) == 0
    table = pd.read_csv(out, keep_default_na=False)
    assert "available [L/s]" in table.columns and table["low [L/s]"].tolist() == [""]
    assert main(["fireflow", str(NETWORK), "--out", str(out), "--residual", "900 psi"]) == 2
    assert main(["fireflow", str(NETWORK), "--out", str(out), "--nodes", "NOPE"]) == 2
    assert main(["fireflow", str(NETWORK), "--out", str(out), "--fit", str(tmp_path / "none")]) == 2
    err = capsys.readouterr().err
    assert "--residual" in err and "NOPE" in err and "--fit" in err


def test_fit_report_carries_the_fire_flow_summary(town, fit_dir):
    from calib.calibration import fit, read_tests
    from calib.calibration.report import render
    from calib.fireflow import FireFlowScan
    from calib.fireflow.fitdir import read_fit
    from calib.units import GPM
    from tests.fireflow.conftest import TESTS
    result = fit(town, read_tests(TESTS, town), influence=False)
    page = render(result, curves=False)
    assert "Fire flow with the fitted C" in page and "python -m calib fireflow" in page
    # the figure shown for J007 (flowed in the demo day's T05) is the one the command gives from the
    # exported fit folder
    inputs = read_fit(fit_dir, network=town)
    j007 = FireFlowScan(town, roughness=inputs.roughness, covariance=inputs.covariance).hydrant("J007")
    assert "<td>J007</td>" in page and f"<td>{j007.available / GPM:.0f}</td>" in page


def test_map_bands_are_contiguous_and_named():
    from calib.fireflow.outputs import BANDS, NO_FIGURE, band
    assert band(float("nan")) == ("no figure", NO_FIGURE)
    for k, (lower, colour) in enumerate(BANDS):
        assert band(lower)[1] == colour  # lower bound inclusive
        if k:
            assert band(lower - 0.01)[1] == BANDS[k - 1][1]
    assert band(1e9)[0].endswith("or more")


def test_binding_system_search_keeps_the_available_flow(tmp_path, fit_dir, capsys):
    # the same hydrants with --system-search always and binding (the default): same available
    # flow, interval and class; flow_system empty only where it was not searched
    tables = {}
    for mode in ("always", "binding"):
        out = tmp_path / f"{mode}.csv"
        assert main(["fireflow", str(NETWORK), "--fit", str(fit_dir), "--out", str(out),
                     "--workers", "0", "--nodes", "J017,J113", "--quiet",
                     "--system-search", mode]) == 0
        tables[mode] = pd.read_csv(out, keep_default_na=False)
    a, b = tables["always"], tables["binding"]
    for col in ("available [gpm]", "low [gpm]", "high [gpm]", "class"):
        assert a[col].tolist() == b[col].tolist()
    assert (b["flow_system [gpm]"] == "").any()
    assert "only where it can limit" in capsys.readouterr().out


def test_fireflow_written_into_the_fit_folder_runs_again(tmp_path, fit_dir, capsys):
    # the README writes fireflow.csv beside the fit's outputs; a second run rewrites its own files
    # but never the fit's roughness.csv or covariance.csv that it reads
    import shutil
    fit = tmp_path / "fit"
    shutil.copytree(fit_dir, fit)
    args = ["fireflow", str(NETWORK), "--fit", str(fit), "--workers", "0", "--quiet",
            "--nodes", "J017,J113"]
    assert main(args + ["--out", str(fit / "fireflow.csv")]) == 0
    assert main(args + ["--out", str(fit / "fireflow.csv")]) == 0
    assert pd.read_csv(fit / "fireflow.csv")["node"].tolist() == ["J017", "J113"]
    before = (fit / "roughness.csv").read_bytes()
    assert main(args + ["--out", str(fit / "roughness.csv")]) == 2
    assert "is an input of this run" in capsys.readouterr().err
    assert (fit / "roughness.csv").read_bytes() == before
