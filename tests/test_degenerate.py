"""Degenerate panels through the command line: each gives a result whose empty figures
have a stated reason, or stops with one line (exit 2); never a silent NaN.

The fixtures are in fixtures/degenerate/ (README there). A null figure of the JSON is
accepted when the dict holding it (or one above it) gives a reason (a reason, note,
problem, skipped or caveat key), when a finding of the measure's ``degenerate`` section
names its area, or when the healthy panel of the same design (healthy.csv) has the same
null (figures that are empty for ordinary reasons, such as dropout figures of a panel
without dropout, are not this module's subject).
"""

from __future__ import annotations

import json
import re

import pandas as pd
import pytest

from conftest import FIXTURES, run_cli

DEGENERATE = FIXTURES / "degenerate"
LONG = ["--id", "household", "--wave", "year", "--value", "satisfaction"]
REASON = re.compile(r"reason|note|problem|skipped|caveat|scale_basis", re.I)

# (file, extra options) -> the kinds of finding its degenerate section must hold
CASES = {
    ("constant_wave.csv", ()): {"constant_wave"},
    ("identical_waves.csv", ()): {"perfect_correlation"},
    ("one_respondent_wave.csv", ()): {"too_few_respondents"},
    ("two_units.csv", ()): {"fewer_units_than_waves", "below_min_cell"},
    ("two_waves.csv", ()): {"two_waves"},
    ("fewer_units_than_waves.csv", ()): {"fewer_units_than_waves"},
    ("one_category.csv", ()): {"one_value"},
    ("one_category.csv", ("--ordinal",)): {"one_value"},
    ("observed_once.csv", ()): {"seen_once"},
}


def _nulls(node, path, reasoned, out) -> None:
    if isinstance(node, dict):
        here = reasoned or any(REASON.search(k) and v not in (None, "", [], {})
                               for k, v in node.items())
        for key, value in node.items():
            _nulls(value, path + [key], here, out)
    elif isinstance(node, list):
        for value in node:
            _nulls(value, path + ["#"], reasoned, out)
    elif node is None and not reasoned:
        out.add("/".join(path))


def _bare_nulls(report: dict) -> set[str]:
    out: set[str] = set()
    _nulls(report, [], False, out)
    return out


def _screen(tmp_path, name, *extra):
    out = tmp_path / f"{name}.json"
    done = run_cli("screen", DEGENERATE / name, *LONG, "--json", out, *extra)
    return done, out


@pytest.fixture(scope="module")
def healthy_nulls(tmp_path_factory):
    done, out = _screen(tmp_path_factory.mktemp("healthy"), "healthy.csv", "-q")
    assert done.returncode == 0, done.stderr.decode()
    report = json.loads(out.read_text())
    assert "degenerate" not in report   # an ordinary panel has no such finding
    return _bare_nulls(report)


@pytest.mark.parametrize("name,extra", sorted(CASES), ids=[" ".join([n, *e]) for n, e in
                                                             sorted(CASES)])
def test_degenerate_panel_states_its_reasons(tmp_path, healthy_nulls, name, extra):
    done, out = _screen(tmp_path, name, *extra)
    assert done.returncode == 0, done.stderr.decode()
    text = done.stdout.decode()
    report = json.loads(out.read_text())
    findings = report.get("degenerate", [])
    assert CASES[name, extra] <= {f["kind"] for f in findings}
    affected = {area for f in findings for area in f["affects"]}
    unexplained = sorted(path for path in _bare_nulls(report) - healthy_nulls
                         if path.split("/")[0] not in affected)
    assert unexplained == []
    # the terminal states every reason and never prints a NaN
    for finding in findings:
        assert finding["note"][1:] in text
    assert not re.search(r"\bnan\b", text, re.I)
    assert "Traceback" not in done.stderr.decode()


def test_appendix_prints_the_reasons(tmp_path):
    report_dir = tmp_path / "report"
    done = run_cli("screen", DEGENERATE / "identical_waves.csv", *LONG, "--report",
                   report_dir, "-q")
    assert done.returncode == 0, done.stderr.decode()
    markdown = (report_dir / "appendix.md").read_text()
    assert "Not defined for satisfaction: waves 2020 and 2021 are perfectly correlated" \
        in markdown
    assert not re.search(r"\bnan\b", markdown, re.I)


def test_one_unit_stops_with_one_line(tmp_path):
    done, out = _screen(tmp_path, "one_unit.csv")
    lines = done.stderr.decode().splitlines()
    assert done.returncode == 2 and len(lines) == 1
    assert "only one unit found; a panel needs at least two units" in lines[0]
    assert not out.exists()


def test_units_seen_once_leave_every_family_undetermined(tmp_path):
    done, out = _screen(tmp_path, "observed_once.csv", "-q")
    assert done.returncode == 0, done.stderr.decode()
    families = json.loads(out.read_text())["families"]
    assert {f["verdict"] for f in families} == {"undetermined"}
    assert all(f["evidence"] for f in families)   # each says why


def _distinct_units(report: dict) -> int:
    return report["panel"]["n_units"]


def test_ids_beyond_two_to_the_53_stay_distinct_in_csv(tmp_path):
    # 9007199254740992 + i for i < 30: above 2^53 neighbours differ by less than a
    # double's spacing, so read as doubles they would fall together in pairs
    done, out = _screen(tmp_path, "big_ids.csv", "-q")
    assert done.returncode == 0, done.stderr.decode()
    assert _distinct_units(json.loads(out.read_text())) == 30


def test_ids_beyond_two_to_the_53_with_a_missing_id(tmp_path):
    # an empty id cell once made the whole column doubles: ids 2^53 and 2^53 + 1 merged
    done, out = _screen(tmp_path, "big_ids_missing_id.csv", "--drop-bad-rows", "-q")
    assert done.returncode == 0, done.stderr.decode()
    report = json.loads(out.read_text())
    assert _distinct_units(report) == 30
    assert report["ledger"]["dropped_by_reason"] == {"missing_id": 1}


def test_ids_beyond_two_to_the_53_in_wide_layout(tmp_path):
    out = tmp_path / "wide.json"
    done = run_cli("screen", DEGENERATE / "big_ids_wide.csv", "--id", "household", "--wide",
                   "satisfaction=sat_2019,sat_2020,sat_2021", "--json", out, "-q")
    assert done.returncode == 0, done.stderr.decode()
    assert _distinct_units(json.loads(out.read_text())) == 30


@pytest.mark.parametrize("with_missing", [False, True])
def test_ids_beyond_two_to_the_53_in_parquet(tmp_path, with_missing):
    import pyarrow as pa
    import pyarrow.parquet as pq
    frame = pd.read_csv(DEGENERATE / "big_ids.csv", dtype={"household": "int64"})
    ids = pa.array(frame["household"].tolist() + ([None] if with_missing else []),
                   type=pa.int64())
    table = pa.table({"household": ids,
                      "year": frame["year"].tolist() + ([2019] if with_missing else []),
                      "satisfaction": frame["satisfaction"].tolist()
                      + ([4.0] if with_missing else [])})
    data = tmp_path / "big_ids.parquet"
    pq.write_table(table, data)
    out = tmp_path / "report.json"
    done = run_cli("screen", data, *LONG, "--json", out, "--drop-bad-rows", "--audit-only", "-q")
    assert done.returncode == 0, done.stderr.decode()
    assert _distinct_units(json.loads(out.read_text())) == 30
