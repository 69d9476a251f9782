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


def command_message(*args) -> str:
    done = run_cli("screen", *args)
    assert done.returncode == 2
    lines = done.stderr.decode().splitlines()
    assert len(lines) == 1 and "Traceback" not in done.stderr.decode()
    return lines[0].removeprefix("paneldiag: error: ")


def what(message: str) -> str:
    """The message without its closing location (a file path, or 'DataFrame')."""
    return message.rsplit(" (", 1)[0] if message.endswith(")") else message


@pytest.fixture
def tenants(panel_file):
    return pd.read_csv(panel_file)


def test_misuse_raises_the_commands_message_and_writes_nothing(panel_file, tenants,
                                                                tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    # a column that is not there, in a DataFrame: the command's words for the file
    printed = command_message(panel_file, "--id", "household", "--wave", "year",
                              "--value", "trst")
    with pytest.raises(paneldiag.InputProblem) as problem:
        paneldiag.screen(tenants, id="household", wave="year", value="trst")
    assert what(str(problem.value)) == what(printed)
    assert problem.value.file == "DataFrame"
    # a wave column given with wide columns
    wide = tenants.pivot(index="household", columns="year", values="trust")
    wide.columns = [f"trust{y}" for y in wide.columns]
    wide = wide.reset_index()
    wide_path = tmp_path / "wide.csv"
    wide.to_csv(wide_path, index=False)
    columns = ",".join(c for c in wide.columns if c != "household")
    printed = command_message(wide_path, "--id", "household", "--wave", "year",
                              "--wide", f"trust={columns}")
    with pytest.raises(paneldiag.InputProblem) as problem:
        paneldiag.screen(wide, id="household", wave="year", wide={"trust": columns.split(",")})
    assert str(problem.value) == printed
    assert "not both" in printed
    assert sorted(p.name for p in tmp_path.iterdir()) == ["wide.csv"]   # nothing written


@pytest.mark.parametrize("data", [[("H001", 2019, 5.0)], {"household": ["H001"]}, 42, None,
                                  np.zeros((3, 3))])
def test_data_that_is_neither_a_path_nor_a_dataframe(data, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    with pytest.raises(paneldiag.InputProblem, match="data must be a path or a pandas "
                                                     "DataFrame, not "):
        paneldiag.screen(data, id="household", wave="year", value="trust")
    assert list(tmp_path.iterdir()) == []


@pytest.mark.parametrize("option", [{"sheet": "panel"}, {"r_object": "tenants"},
                                    {"format": "csv"}, {"delimiter": ";"}])
def test_file_options_refused_for_a_dataframe(tenants, option):
    with pytest.raises(paneldiag.InputProblem, match="already read"):
        paneldiag.screen(tenants, id="household", wave="year", value="trust", **option)


def test_file_options_refused_for_other_formats(panel_file):
    printed = command_message(panel_file, "--id", "household", "--wave", "year", "--value",
                              "trust", "--sheet", "2")
    with pytest.raises(paneldiag.InputProblem) as problem:
        paneldiag.screen(str(panel_file), id="household", wave="year", value="trust", sheet=2)
    assert str(problem.value) == printed == \
        "--sheet is for spreadsheet files (xlsx, xls, ods), not csv"


def test_repr_names_families_as_every_output_does_and_says_audit_only(panel_file):
    """The family names of paneldiag.labels (one name everywhere); an audit-only report
    claims no verdict."""
    full = paneldiag.screen(panel_file, id="household", wave="year", value="trust")
    supported = [f["family"] for f in full.to_dict()["families"] if f["verdict"] == "supported"]
    from paneldiag.labels import FAMILY_NAMES
    for family in supported:
        assert FAMILY_NAMES[family] in repr(full)
    audit = paneldiag.screen(panel_file, id="household", wave="year", value="trust",
                             audit_only=True)
    assert "audit only, no verdicts" in repr(audit)


def test_a_listed_header_rides_on_the_exception_as_a_note(panel_file, tmp_path):
    """The command prints a long header below its one line; the API's exception carries
    the same line and the header in a note (PEP 678), shown under the traceback."""
    frame = pd.read_csv(panel_file)
    for i in range(8):   # a header too long to print inside the line
        frame[f"household_background_variable_{i}"] = i
    path = tmp_path / "wide_header.csv"
    frame.to_csv(path, index=False)
    with pytest.raises(paneldiag.InputProblem) as caught:
        paneldiag.screen(path, id="no_such_column", wave="year", value="trust")
    done = run_cli("screen", path, "--id", "no_such_column", "--wave", "year",
                   "--value", "trust")
    assert done.stderr.decode().splitlines()[0] == f"paneldiag: error: {caught.value}"
    notes = " ".join(getattr(caught.value, "__notes__", []))
    assert all(name in notes for name in frame.columns)
