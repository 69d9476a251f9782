"""The whole-report disclosure audit (paneldiag/disclosure_audit.py).

Crafted panels, written as CSV files here, where one to three units form a response
pattern, a late-entry type or a dropout wave within a group. Before the audit is wired
in (its step in the pipeline switched off), the released counts give each small count
by a subtraction the test writes out, and the audit finds it; through the command
line, the released report passes the audit, says so in its ``disclosure`` block, and
the terminal says so in one line. The threshold (min-cell 5) is common practice in
statistical disclosure control (Hundepool et al. 2012, Statistical Disclosure Control,
Wiley - from memory).
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from paneldiag import disclosure_audit as da
from paneldiag.request import ScreenRequest, run_screen
from conftest import run_cli

M = 5   # --min-cell, the default


def _panel_csv(path, design: dict[tuple[str, str], int], seed: int = 7):
    """A long CSV of households with the given (pattern, district): count design."""
    rng = np.random.default_rng(seed)
    rows, unit = [], 0
    for (pattern, district), n in design.items():   # a loop over a few crafted types
        for _ in range(n):
            unit += 1
            rows += [{"household": f"h{unit:03d}", "year": 2020 + w, "district": district,
                      "satisfaction": int(rng.integers(1, 6))}
                     for w, seen in enumerate(pattern) if seen == "o"]
    pd.DataFrame(rows).to_csv(path, index=False)
    return path


def _request(**extra) -> ScreenRequest:
    return ScreenRequest(id=("household",), wave="year", value=("satisfaction",),
                         audit_only=True, **{"disclosure_audit": True, **extra})


def _unprotected(path, **extra):
    """The report as it would be released without the audit, its panel and counts."""
    report, panel = run_screen(str(path), _request(disclosure_audit=False, **extra))
    cells = da.panel_cells(panel, "satisfaction")
    counts, unmodelled = da.released_counts(report, cells, panel.wave_times, M)
    return report, panel, cells, counts, unmodelled


def _reaudit(report: dict, panel) -> list:
    """The audit run again on a released report: what an attacker could still derive."""
    cells = da.panel_cells(panel, "satisfaction")
    counts, unmodelled = da.released_counts(report, cells, panel.wave_times, M)
    assert unmodelled == []   # every count the audit reads matches its relation
    return da.audit(counts, cells, M, panel.wave_labels)


DROPOUT_IN_A_GROUP = {("oooo", "North"): 20, ("oooo", "South"): 20,
                      ("ooo.", "North"): 6, ("ooo.", "South"): 6,
                      ("oo..", "North"): 3,           # three households leave after wave 2
                      (".ooo", "North"): 5, (".ooo", "South"): 5}
LATE_ENTRY = {("oooo", "North"): 25, ("oooo", "South"): 25, ("ooo.", "North"): 8,
              ("ooo.", "South"): 8, ("..oo", "South"): 2}   # two households join at wave 3
SMALL_GROUP = {("oooo", "North"): 30, ("ooo.", "North"): 8, ("oooo", "South"): 30,
               ("ooo.", "South"): 8,
               ("oooo", "Quay"): 2, ("oo..", "Quay"): 1}   # a district of three households
NOTHING_SMALL = {("oooo", "North"): 30, ("oooo", "South"): 30, ("ooo.", "North"): 10,
                 ("ooo.", "South"): 10, (".ooo", "North"): 10, (".ooo", "South"): 10}


def test_dropout_pattern_in_a_group_is_found_before_the_audit(tmp_path):
    path = _panel_csv(tmp_path / "dropout.csv", DROPOUT_IN_A_GROUP)
    report, panel, cells, counts, unmodelled = _unprotected(path,
                                                            group="district")
    assert unmodelled == []
    north = report["groups"]["reports"]["North"]
    # The derivation, from released counts only: North's units minus North's
    # respondents at wave 3 are the North households missing there, who are exactly
    # the 'oo..' households (the only North pattern without wave 3) - 3 of them.
    missing_w3 = north["panel"]["n_units"] - north["wave_profile"][2]["n"]
    assert missing_w3 == 3   # simulation with known truth: 3 'oo..' units in North
    found = {f.what: (f.low, f.high) for f in da.audit(counts, cells, M, panel.wave_labels)}
    assert found["units with response pattern oo.. in group North"] == (3, 3)


def test_late_entry_pair_is_found_before_the_audit(tmp_path):
    path = _panel_csv(tmp_path / "late.csv", LATE_ENTRY)
    report, panel, cells, counts, _ = _unprotected(path, group="district")
    # all units minus the respondents at wave 2 are the two households who join at
    # wave 3 (every other household answers wave 2)
    assert report["panel"]["n_units"] - report["wave_profile"][1]["n"] == 2  # known truth
    found = {f.what: (f.low, f.high) for f in da.audit(counts, cells, M, panel.wave_labels)}
    assert found["units with response pattern ..oo in group South"] == (2, 2)


def test_small_group_dropout_is_found_before_the_audit(tmp_path):
    """Quay's three households are not reported (nor North, the group's secondary
    suppression), yet the whole panel's tables give away Quay's one early leaver."""
    path = _panel_csv(tmp_path / "group.csv", SMALL_GROUP)
    report, panel, cells, counts, _ = _unprotected(path, group="district")
    assert list(report["groups"]["reports"]) == ["South"]
    att = report["attrition"]
    monotone = next(r for r in att["unit_types"] if r["type"] == "monotone_dropout")
    leave_last = att["selective"]["by_wave"][2]["n_dropping"]        # last seen at wave 3
    leave_first = report["panel"]["n_units"] - report["wave_profile"][1]["n"]  # at wave 1
    # the monotone leavers minus those last seen at wave 3 or at wave 1: last seen at 2
    assert monotone["n"] - leave_last - leave_first == 1   # known truth: one 'oo..' unit
    found = {f.what: (f.low, f.high) for f in da.audit(counts, cells, M, panel.wave_labels)}
    assert found["attrition.unit_types.1.last_wave.1.n"] == (1, 1)


@pytest.mark.parametrize("design", [DROPOUT_IN_A_GROUP, LATE_ENTRY, SMALL_GROUP],
                         ids=["dropout", "late", "group"])
def test_released_report_passes_the_audit(tmp_path, design):
    """Through the command line: the JSON records the audit and its withheld counts,
    the terminal says so in one line, and the released counts give nothing away."""
    path = _panel_csv(tmp_path / "panel.csv", design)
    out = tmp_path / "report.json"
    run = run_cli("screen", path, "--id", "household", "--wave", "year", "--value",
                  "satisfaction", "--group", "district", "--audit-only", "--disclosure-audit",
                  "--json", out)
    assert run.returncode == 0, run.stderr.decode()
    report = json.loads(out.read_text())
    block = report["disclosure"]
    assert block["audited"] and block["unresolved"] == []
    assert block["secondary_suppressions"] or block["removed"]
    terminal = run.stdout.decode()
    assert sum("Disclosure audit" in line for line in terminal.splitlines()) == 1
    _, panel = run_screen(str(path), _request(group="district"))
    assert _reaudit(report, panel) == []


def test_nothing_small_gets_no_extra_suppression(tmp_path):
    path = _panel_csv(tmp_path / "plain.csv", NOTHING_SMALL)
    report, panel = run_screen(str(path), _request(group="district"))
    assert report["disclosure"]["secondary_suppressions"] == []
    assert report["disclosure"]["removed"] == []
    assert _reaudit(report, panel) == []


def test_bounds_of_a_two_by_two_table_are_frechet_bounds():
    """Two waves, units observed at both / first only / second only / neither: with
    only the margins shown (all units, respondents at each wave), the units observed at
    both lie within max(0, n1 + n2 - N) .. min(n1, n2) - the Frechet bounds of a 2 x 2
    table (Frechet 1951; from memory), which linear programming must reproduce."""
    observed = np.array([[1, 1]] * 30 + [[1, 0]] * 12 + [[0, 1]] * 9 + [[0, 0]] * 4, bool)
    cells = da.build_cells(observed, None, {})
    names = ["".join("o" if o else "." for o in row) for row in cells.observed]
    n, n1, n2 = len(observed), observed[:, 0].sum(), observed[:, 1].sum()
    one = lambda mask: np.asarray(mask, float)
    counts = [da.Count([("all",)], one([True] * 4), n, n),
              da.Count([("w1",)], one(cells.observed[:, 0]), n1, n1),
              da.Count([("w2",)], one(cells.observed[:, 1]), n2, n2)]
    bounds = da.Bounds(counts, cells)
    both = np.eye(1, 4, names.index("oo"))[0]
    assert bounds.low(both) == max(0, n1 + n2 - n)   # Frechet lower bound
    assert bounds.high(both) == min(n1, n2)          # Frechet upper bound
    # shown beside the margins, the pair count pins every cell: the 4 units seen at
    # neither wave are n - n1 - n2 + both, disclosed, and mended by withholding
    counts.append(da.Count([("both",)], both, 30, 30))
    found = da.audit(counts, cells, M, ("1", "2"))
    assert [(f.what, f.low, f.high) for f in found] == [
        ("units with response pattern ..", 4, 4)]
    withheld, left = da.protect(counts, cells, M, ("1", "2"))
    assert withheld and left == []
    assert da.audit(counts, cells, M, ("1", "2")) == []


def _demo(tmp_path, *extra):
    run = run_cli("demo", tmp_path / "tenants.csv")
    assert run.returncode == 0, run.stderr.decode()
    out = tmp_path / "report.json"
    args = ("--id", "household", "--wave", "year", "--value", "satisfaction",
            "--missing-codes", "-9,-8", "--weight", "weight", "--group", "district",
            "--disclosure-audit")
    run = run_cli("screen", tmp_path / "tenants.csv", *args, *extra, "--json", out)
    assert run.returncode == 0, run.stderr.decode()
    request = ScreenRequest(id=("household",), wave="year", value=("satisfaction",),
                            missing_codes="-9,-8", weight="weight", group="district",
                            audit_only="--audit-only" in extra, disclosure_audit=True)
    _, panel = run_screen(str(tmp_path / "tenants.csv"), request)
    return json.loads(out.read_text()), panel


def test_demo_audit_passes(tmp_path):
    """The invented demo panel (Ostervale Tenant Panel), audit-only screen: its
    released counts give no small count away."""
    report, panel = _demo(tmp_path, "--audit-only")
    assert report["disclosure"]["unresolved"] == []
    assert _reaudit(report, panel) == []


@pytest.mark.slow
def test_demo_full_screen_passes(tmp_path):
    """The same on the full screen (dependence, growth: more counts, and degrees of
    freedom that stand for unit counts)."""
    report, panel = _demo(tmp_path)
    assert report["disclosure"]["unresolved"] == []
    assert _reaudit(report, panel) == []
