"""The Python API (paneldiag.screen) against the command: the same report for the same
input and options, the same messages, the same appendix. A property of the program
itself; the panel is simulated from a known process (trait + carry-over with MCAR gaps,
paneldiag.simulate)."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

import paneldiag
from paneldiag.simulate import family_values
from conftest import run_cli


@pytest.fixture(scope="module")
def panel_file(tmp_path_factory):
    values = family_values("trait_autoregressive", 300, 5, 0.8, "mcar",
                           np.random.default_rng(12), "none")
    frame = pd.DataFrame(values, columns=[2019, 2020, 2021, 2022, 2023])
    frame.insert(0, "household", [f"H{i:03d}" for i in range(len(frame))])
    frame["district"] = np.where(np.arange(len(frame)) % 2, "north", "south")
    long = frame.melt(id_vars=["household", "district"], var_name="year",
                      value_name="trust").dropna()
    path = tmp_path_factory.mktemp("api") / "panel.csv"
    long.to_csv(path, index=False)
    return path


OPTIONS = ["--id", "household", "--wave", "year", "--value", "trust", "--group", "district",
           "--min-cell", "10"]


def test_the_report_equals_the_commands_json(panel_file, tmp_path):
    out = tmp_path / "report.json"
    done = run_cli("screen", panel_file, *OPTIONS, "--json", out, "-q")
    assert done.returncode == 0, done.stderr.decode()
    report = paneldiag.screen(str(panel_file), id="household", wave="year", value="trust",
                              group="district", min_cell=10)
    assert report.to_dict() == json.loads(out.read_text())


def test_a_dataframe_gives_the_files_results_and_is_left_as_it_was(panel_file):
    frame = pd.read_csv(panel_file)
    before = frame.copy()
    from_frame = paneldiag.screen(frame, id="household", wave="year", value="trust",
                                  group="district", min_cell=10).to_dict()
    from_file = paneldiag.screen(panel_file, id="household", wave="year", value="trust",
                                 group="district", min_cell=10).to_dict()
    pd.testing.assert_frame_equal(frame, before)
    assert from_frame["input"]["path"] == "DataFrame"
    for report in (from_frame, from_file):
        del report["input"]
    assert from_frame == from_file


def test_tables_hold_the_reports_rows(panel_file):
    report = paneldiag.screen(panel_file, id="household", wave="year", value="trust")
    data = report.to_dict()
    families = report.families
    assert list(families["family"]) == [f["family"] for f in data["families"]]
    assert families["bic_weight"].sum() == pytest.approx(1.0, abs=0.01)  # rounded weights
    assert list(report.wave_profile["wave"]) == data["panel"]["waves"]
    assert len(report.retention) == len(data["attrition"]["retention"])
    assert len(report.lag_profile) == len(data["lag_profile"])
    assert len(report.reliability) == len(data["reliability"]["heise"])
    assert "supported" in repr(report) or "no family supported" in repr(report)
    assert "<table" in report._repr_html_()


def test_several_measures_get_a_measure_column(panel_file):
    frame = pd.read_csv(panel_file)
    frame["trust_copy"] = frame["trust"] * 2 + 1     # a positive affine copy
    report = paneldiag.screen(frame, id="household", wave="year",
                              value=["trust", "trust_copy"])
    families = report.families
    assert set(families["measure"]) == {"trust", "trust_copy"}
    by = {m: part.set_index("family")["verdict"] for m, part in families.groupby("measure")}
    assert by["trust"].equals(by["trust_copy"])      # verdicts do not depend on the scale


def test_errors_carry_the_commands_message(panel_file):
    done = run_cli("screen", panel_file, "--id", "household", "--wave", "yaer",
                   "--value", "trust")
    printed = done.stderr.decode().splitlines()[0].removeprefix("paneldiag: error: ")
    with pytest.raises(paneldiag.InputProblem) as problem:
        paneldiag.screen(str(panel_file), id="household", wave="yaer", value="trust")
    assert str(problem.value) == printed
    with pytest.raises(paneldiag.InputProblem, match="unknown option 'min_cells'"):
        paneldiag.screen(str(panel_file), id="household", wave="year", value="trust",
                         min_cells=3)


def test_write_report_writes_the_commands_appendix(panel_file, tmp_path):
    done = run_cli("screen", panel_file, *OPTIONS, "--report", tmp_path / "cli", "-q")
    assert done.returncode == 0, done.stderr.decode()
    report = paneldiag.screen(str(panel_file), id="household", wave="year", value="trust",
                              group="district", min_cell=10)
    report.write_report(tmp_path / "api")
    for name in ("appendix.md", "tables.tex", "report.json"):
        assert (tmp_path / "api" / name).read_bytes() == (tmp_path / "cli" / name).read_bytes()
