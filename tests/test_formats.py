"""The file formats researchers receive, each read through the command line: a panel written
in the format and screened gives the same JSON report as the CSV of the same panel, apart
from the input section (source: the round trip itself; the CSV run is the reference).

The panel is simulated from a known process (a stable household trait plus occasion noise,
MCAR gaps and reasoned-missing codes); the writers are pandas (openpyxl for .xlsx, odfpy
for .ods), xlwt (.xls), pyreadr (.rds, .RData) and pyarrow (Feather, Arrow IPC).
"""

from __future__ import annotations

import json
import sys

import numpy as np
import pandas as pd
import pytest

import paneldiag
from conftest import FIXTURES, run_cli
from test_bad_input import run_forked

sys.path.insert(0, str(FIXTURES / "formats"))
from make_fixtures import join_rdata, write_xls  # noqa: E402

YEARS = (2015, 2016, 2017, 2018)


@pytest.fixture(scope="module")
def long_panel() -> pd.DataFrame:
    rng = np.random.default_rng(2026)
    n = 60
    trust = 5 + rng.normal(0, 1.2, (n, 1)) + rng.normal(0, 0.8, (n, len(YEARS)))
    trust[rng.random(trust.shape) < 0.12] = np.nan
    energy = 250 + rng.normal(0, 30, (n, 1)) + rng.normal(0, 15, (n, len(YEARS)))
    energy[rng.random(energy.shape) < 0.06] = -9        # refused
    frame = pd.DataFrame({
        "household": np.repeat([f"H{u:05d}" for u in range(1, n + 1)], len(YEARS)),
        "year": np.tile(YEARS, n),
        "district": np.repeat(rng.choice(["Harbour Row", "Kilnfield", "Old Mill"], n),
                              len(YEARS)),
        "trust": trust.reshape(-1).round(1), "energy_use": energy.reshape(-1).round(1)})
    return frame


@pytest.fixture(scope="module")
def wide_panel(long_panel) -> pd.DataFrame:
    wide = long_panel.pivot(index="household", columns="year", values="trust")
    wide.columns = [f"trust{y}" for y in wide.columns]
    return wide.reset_index()


def write_rdata(frame, path, name="tenants"):
    import pyreadr
    pyreadr.write_rdata(str(path), frame, df_name=name)


def write_rds(frame, path):
    import pyreadr
    pyreadr.write_rds(str(path), frame, compress="gzip")


def write_feather(frame, path, version=2):
    import pyarrow.feather as feather
    feather.write_feather(frame, str(path), version=version)


def write_stream(frame, path):
    import pyarrow as pa
    table = pa.Table.from_pandas(frame, preserve_index=False)
    with pa.OSFile(str(path), "wb") as sink, pa.ipc.new_stream(sink, table.schema) as writer:
        writer.write_table(table)


WRITERS = {
    "xlsx": lambda f, p: f.to_excel(p, sheet_name="panel", index=False, engine="openpyxl"),
    "xls": lambda f, p: write_xls(f, str(p)),
    "ods": lambda f, p: f.to_excel(p, index=False, engine="odf"),
    "rds": write_rds,
    "RData": write_rdata,
    "feather": write_feather,
    "v1.feather": lambda f, p: write_feather(f, p, version=1),
    "arrow": write_stream,          # an Arrow IPC stream
    "ipc": lambda f, p: write_feather(f, p),   # an Arrow IPC file
}

FULL = ["--id", "household", "--wave", "year", "--value", "trust", "--value", "energy_use",
        "--missing-codes", "-9", "--group", "district", "--min-cell", "3"]
# The audit covers all that a reader hands on (the ledger, every value through the wave
# profile, the patterns and the EM moments); the rest of a screen is a function of the
# panel, checked once in full (test_title_rows_and_blank_rows_of_a_sheet).
LONG = [*FULL, "--audit-only"]
WIDE = ["--id", "household", "--wide", "trust=trust2015,trust2016,trust2017,trust2018",
        "--wave-labels", "2015,2016,2017,2018", "--audit-only"]


def without_input(report: dict) -> dict:
    report = {k: v for k, v in report.items() if k != "input"}
    if "measures" in report:
        report["measures"] = {name: without_input(one)
                              for name, one in report["measures"].items()}
    return report


def screened(path, options, folder) -> dict:
    out = folder / f"{path.name}.json"
    done = run_forked(["screen", path, *options, "--json", out, "-q"], folder)
    assert done.returncode == 0, done.stderr.decode()
    return json.loads(out.read_text())


@pytest.fixture(scope="module")
def references(long_panel, wide_panel, tmp_path_factory):
    folder = tmp_path_factory.mktemp("csv")
    long_panel.to_csv(folder / "long.csv", index=False)
    wide_panel.to_csv(folder / "wide.csv", index=False)
    return {"long": screened(folder / "long.csv", LONG, folder),
            "wide": screened(folder / "wide.csv", WIDE, folder),
            "full": screened(folder / "long.csv", FULL, folder)}


@pytest.mark.filterwarnings("ignore:Feather V1")
@pytest.mark.parametrize("layout", ["long", "wide"])
@pytest.mark.parametrize("suffix", list(WRITERS))
def test_round_trip_gives_the_csv_report(suffix, layout, long_panel, wide_panel, references,
                                         tmp_path):
    frame, options = (long_panel, LONG) if layout == "long" else (wide_panel, WIDE)
    path = tmp_path / f"panel.{suffix}"
    WRITERS[suffix](frame, path)
    report = screened(path, options, tmp_path)
    reference = references[layout]
    assert report["input"]["format"] != "csv"
    assert report["measures" if layout == "long" else "missingness"]   # a real report
    assert without_input(report) == without_input(reference)      # source: the CSV run


def test_sheets_by_name_position_and_default(long_panel, references, tmp_path):
    path = tmp_path / "tenants.xlsx"
    with pd.ExcelWriter(path, engine="openpyxl") as book:
        pd.DataFrame({"note": ["invented demo data"]}).to_excel(book, sheet_name="about", index=False)
        long_panel.to_excel(book, sheet_name="panel", index=False)
    for choice in ("panel", "2"):
        report = screened(path, [*LONG, "--sheet", choice], tmp_path)
        assert report["input"]["sheet"] == "panel"
        assert report["input"]["options"]["sheet"] == choice
        assert without_input(report) == without_input(references["long"])
    done = run_cli("screen", path, *LONG)          # the first sheet has no panel
    assert done.returncode == 2
    assert "column 'household' not found" in done.stderr.decode()


def test_the_sheet_read_is_named_when_there_are_several(long_panel, tmp_path):
    path = tmp_path / "tenants.ods"
    with pd.ExcelWriter(path, engine="odf") as book:
        long_panel.to_excel(book, sheet_name="panel", index=False)
        long_panel.head(4).to_excel(book, sheet_name="checks", index=False)
    done = run_cli("screen", path, *LONG, "--details", "--json",
                   tmp_path / "report.json")
    assert done.returncode == 0, done.stderr.decode()
    shown = "sheet 'panel' (the first of 2; another with --sheet)"
    text = done.stdout.decode()
    assert text.splitlines()[0].count(shown) == 1       # the header line
    assert f"read from {shown}" in text                 # the intake block
    info = json.loads((tmp_path / "report.json").read_text())["input"]
    assert (info["sheet"], info["sheets"]) == ("panel", ["panel", "checks"])


def test_title_rows_and_blank_rows_of_a_sheet(long_panel, references, tmp_path):
    from openpyxl import Workbook

    book = Workbook()
    page = book.active
    page.append(["Ostervale Tenant Panel: trust and energy use by year"])
    page.append([])
    page.append(list(long_panel.columns))
    for i, row in enumerate(long_panel.itertuples(index=False)):
        page.append([None if isinstance(v, float) and np.isnan(v) else v for v in row])
        if i % 50 == 49:
            page.append([])      # blank rows are skipped, as blank lines of a text file
    path = tmp_path / "titled.xlsx"
    book.save(path)
    report = screened(path, FULL, tmp_path)
    assert report["measures"]["trust"]["families"]      # the full screen, verdicts too
    assert without_input(report) == without_input(references["full"])  # source: CSV run
    ledger = report["measures"]["trust"]["ledger"]
    assert ledger["rows_read"] == len(long_panel)       # every data row, no blank one


def test_rdata_with_several_frames(long_panel, references, tmp_path):
    write_rdata(long_panel, tmp_path / "a.RData", "tenants")
    write_rdata(long_panel.head(8), tmp_path / "b.RData", "districts")
    path = tmp_path / "both.RData"
    join_rdata(str(tmp_path / "a.RData"), str(tmp_path / "b.RData"), str(path))
    report = screened(path, [*LONG, "--r-object", "tenants"], tmp_path)
    assert report["input"]["r_object"] == "tenants"
    assert report["input"]["r_objects"] == ["tenants", "districts"]
    assert without_input(report) == without_input(references["long"])  # source: CSV run
    api = paneldiag.screen(str(path), id="household", wave="year",
                           value=["trust", "energy_use"], missing_codes="-9",
                           group="district", min_cell=3, audit_only=True,
                           r_object="tenants").to_dict()
    assert without_input(api) == without_input(references["long"])


def test_spreadsheet_from_standard_input(long_panel, references, tmp_path):
    path = tmp_path / "panel.xlsx"
    WRITERS["xlsx"](long_panel, path)
    done = run_cli("screen", "-", "--format", "xlsx", *LONG, "--json",
                   tmp_path / "report.json", "-q", stdin=path.read_bytes())
    assert done.returncode == 0, done.stderr.decode()
    report = json.loads((tmp_path / "report.json").read_text())
    assert without_input(report) == without_input(references["long"])  # source: CSV run


def test_api_takes_a_sheet_position_as_a_number(long_panel, references, tmp_path):
    path = tmp_path / "tenants.xlsx"
    with pd.ExcelWriter(path, engine="openpyxl") as book:
        long_panel.head(4).to_excel(book, sheet_name="checks", index=False)
        long_panel.to_excel(book, sheet_name="panel", index=False)
    report = paneldiag.screen(path, id="household", wave="year",
                              value=["trust", "energy_use"], missing_codes="-9",
                              group="district", min_cell=3, audit_only=True,
                              sheet=2).to_dict()
    assert report["input"]["sheet"] == "panel"
    assert without_input(report) == without_input(references["long"])  # source: CSV run


def test_a_message_that_reads_every_column_finds_the_header_below_a_title(tmp_path):
    """Household numbers restarting in every district: the duplicates message looks at
    the columns not asked for, read again from the sheet whose first row is a title."""
    from openpyxl import Workbook

    frame = pd.read_csv(FIXTURES / "bad" / "district_numbered.csv")
    book = Workbook()
    page = book.active
    page.append(["Ostervale Tenant Panel"])
    page.append(list(frame.columns))
    for row in frame.itertuples(index=False):
        page.append(list(row))
    path = tmp_path / "districts.xlsx"
    book.save(path)
    done = run_cli("screen", path, "--id", "household", "--wave", "year", "--value", "trust")
    message = done.stderr.decode()
    assert done.returncode == 2 and len(message.splitlines()) == 1, message
    assert "give both, --id district --id household" in message   # as for the CSV
    assert message.rstrip().endswith(":3:household)")        # sheet row 3: below the title
