"""The whole-report disclosure audit (paneldiag/disclosure_audit.py).

Crafted panels, written as CSV files here, where one to three units form a response
pattern, a group, a late-entry type or a dropout wave. With the audit turned off
(--no-disclosure-audit), the released counts give each small count by a subtraction the
test writes out, and the audit finds it; through the command line with its defaults,
the released report passes the audit, says so in its ``disclosure`` block, and the
terminal says so in one line; an independent enumeration of whole-number cells confirms
it on a tiny panel; and the number withheld is compared with the exact least-cost
suppression (a mixed-integer program written here). The threshold (min-cell 5) and the
protection range (a small count may be 0, or min-cell or more) are common practice in
statistical disclosure control (Hundepool et al. 2012, Statistical Disclosure Control,
Wiley, ch. 4-5 - from memory).
"""

from __future__ import annotations

import copy
import json

import numpy as np
import pandas as pd
import pytest

from paneldiag import disclosure_audit as da
from paneldiag.disclosure import small
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
                         **{"audit_only": True, **extra})


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
    # every count the audit reads matches its relation; in a weighted screen the
    # intraclass correlation's degrees of freedom are weight sums, not unit counts
    weighted = ("icc.df_between", "icc.df_within") if panel.weights is not None else ()
    assert [p for p in unmodelled if not p.endswith(weighted)] == []
    return da.audit(counts, cells, M, panel.wave_labels)


DROPOUT_IN_A_GROUP = {("oooo", "North"): 20, ("oooo", "South"): 20,
                      ("ooo.", "North"): 6, ("ooo.", "South"): 6,
                      ("oo..", "North"): 3,           # three households leave after wave 2
                      (".ooo", "North"): 5, (".ooo", "South"): 5}
LATE_ENTRY = {("oooo", "North"): 25, ("oooo", "South"): 25, ("ooo.", "North"): 8,
              ("ooo.", "South"): 8, ("..oo", "South"): 2}   # two households join at wave 3
ONE_LEAVER = {("oooo", "North"): 25, ("oooo", "South"): 25, ("ooo.", "North"): 7,
              ("ooo.", "South"): 7, ("o...", "South"): 1}   # one household leaves at once
TWO_IN_A_PATTERN = {("oooo", "North"): 25, ("oooo", "South"): 25, ("ooo.", "North"): 7,
                    ("ooo.", "South"): 7, ("o.oo", "North"): 2}   # two skip wave 2
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


DESIGNS = {"dropout": DROPOUT_IN_A_GROUP, "late": LATE_ENTRY, "leaver": ONE_LEAVER,
           "pattern": TWO_IN_A_PATTERN, "group": SMALL_GROUP}


@pytest.mark.parametrize("design", list(DESIGNS))
def test_released_report_passes_the_audit(tmp_path, design):
    """Through the command line with its defaults: the JSON records the audit and its
    withheld counts, the terminal says so in one line, and the released counts give
    nothing away (the linear programs of the audit, run again on the released report)."""
    path = _panel_csv(tmp_path / "panel.csv", DESIGNS[design])
    out = tmp_path / "report.json"
    run = run_cli("screen", path, "--id", "household", "--wave", "year", "--value",
                  "satisfaction", "--group", "district", "--audit-only", "--json", out)
    assert run.returncode == 0, run.stderr.decode()
    report = json.loads(out.read_text())
    block = report["disclosure"]
    assert block["audited"] and block["unresolved"] == []
    assert block["counts_withheld"] > 0 or block["removed"]
    assert "disclosure control" in block["reason"]
    terminal = run.stdout.decode()
    lines = [line for line in terminal.splitlines() if "Disclosure audit" in line]
    assert len(lines) == 1 and f"{block['counts_withheld']} further count" in lines[0]
    _, panel = run_screen(str(path), _request(group="district"))
    assert _reaudit(report, panel) == []


def test_the_audit_can_be_turned_off(tmp_path):
    """--no-disclosure-audit: no audit block, the options record says so, and the
    terminal says the counts were not checked across tables."""
    path = _panel_csv(tmp_path / "panel.csv", LATE_ENTRY)
    out = tmp_path / "report.json"
    run = run_cli("screen", path, "--id", "household", "--wave", "year", "--value",
                  "satisfaction", "--group", "district", "--audit-only",
                  "--no-disclosure-audit", "--json", out)
    assert run.returncode == 0, run.stderr.decode()
    report = json.loads(out.read_text())
    assert "disclosure" not in report
    assert report["input"]["options"]["disclosure_audit"] is False
    assert "Disclosure audit: off" in run.stdout.decode()
    # and what it leaves: the two late entrants by subtraction (known truth: 2 units)
    assert report["panel"]["n_units"] - report["wave_profile"][1]["n"] == 2


def test_nothing_small_gets_no_extra_suppression(tmp_path):
    path = _panel_csv(tmp_path / "plain.csv", NOTHING_SMALL)
    report, panel = run_screen(str(path), _request(group="district"))
    assert report["disclosure"]["secondary_suppressions"] == []
    assert report["disclosure"]["removed"] == []
    assert _reaudit(report, panel) == []


@pytest.mark.parametrize("block_units", [1 << 20, 7])
@pytest.mark.parametrize("n_waves", [8, 20, 70])
def test_cells_count_the_response_patterns(n_waves, block_units, monkeypatch):
    """The audit's unknowns are the units of each (group, response pattern), counted
    here by pandas' value_counts of the rows; beyond 62 waves the patterns no longer fit
    an integer bit code (70 waves failed with an overflow), and three units that differ
    from the others only after wave 65 must still be a cell of their own. Counted in
    blocks of 7 units, the cells are the same and in the same order."""
    rng = np.random.default_rng(7)
    observed = rng.random((300, n_waves)) > 0.1
    observed[:, n_waves // 2:] = True
    observed[:3, -2:] = False
    groups = np.array(["north", "south"])[rng.integers(0, 2, 300)]
    whole = da.build_cells(observed, groups, {})
    monkeypatch.setattr(da, "PATTERN_BLOCK_UNITS", block_units)
    cells = da.build_cells(observed, groups, {})
    np.testing.assert_array_equal(cells.observed, whole.observed)
    np.testing.assert_array_equal(cells.truth, whole.truth)
    found = {(cells.group_labels[g], row.tobytes()): int(n) for g, row, n
             in zip(cells.group, cells.observed, cells.truth) if n > 0}
    rows = pd.DataFrame(observed).assign(group=groups)
    expected = {(key[-1], np.array(key[:-1], bool).tobytes()): n
                for key, n in rows.value_counts().items()}
    assert found == expected
    assert cells.truth.sum() == 300


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
    # the least suppression, by hand: N is never withheld, and with n1, n2 and 'both'
    # shown the 4 are pinned, so one of the three must go; withholding any one leaves a
    # free direction (e.g. 'both' free: '..' = N - n1 - n2 + both runs over 0 .. 13)
    assert len(withheld) == 1 and left == []
    assert da.audit(counts, cells, M, ("1", "2")) == []


def _fewest_withheld(counts, cells, min_cell, wave_labels):
    """The exact least-cost secondary suppression, independent of the audit's mending:
    a mixed-integer program (HiGHS) with a 0/1 choice per shown count that may be
    withheld and, for each count the shown counts pin, its own copy of the cells that
    agrees with every count not withheld and puts that count at 0 or at min_cell or
    more (a 0/1 choice of side). The linking of copies to choices is the classic
    cell-suppression model (Fischetti and Salazar-Gonzalez 1999, Mathematical
    Programming 84; 2001, Management Science 47 - from memory). Returns (cost, number
    withheld)."""
    import highspy
    pinned = da.unprotected(da.Bounds(counts, cells),
                            da._targets(counts, cells, min_cell, wave_labels), min_cell)
    free = [i for i, c in enumerate(counts) if c.value is not None and c.nullable]
    fixed = [c for c in counts if c.value is not None and not c.nullable]
    n, inf = len(cells.truth), highspy.kHighsInf
    big = float(cells.truth.sum()) + 1.0          # no cell exceeds all units
    h = da._quiet(highspy.Highs)
    h.setOptionValue("output_flag", False)
    cost = np.array([da.withholding_cost(counts[i]) for i in free])
    width = 1 + n                                 # per pinned count: its side, its cells
    ncol = len(free) + len(pinned) * width
    h.addVars(ncol, np.zeros(ncol), np.r_[np.ones(len(free)),
                                           np.tile(np.r_[1.0, np.full(n, big)], len(pinned))])
    binary = np.r_[np.arange(len(free)), len(free) + width * np.arange(len(pinned))]
    h.changeColsIntegrality(len(binary), binary.astype(np.int32),
                            np.ones(len(binary), dtype=np.uint8))
    h.changeColsCost(len(free), np.arange(len(free), dtype=np.int32), cost)
    for s, target in enumerate(pinned):           # a loop over a few pinned counts
        side = len(free) + s * width

        def row(coef, low, high, extra=()):
            idx = [side + 1 + j for j in np.flatnonzero(coef)] + [j for j, _ in extra]
            val = list(np.asarray(coef)[np.flatnonzero(coef)]) + [v for _, v in extra]
            h.addRow(low, high, len(idx), np.array(idx, np.int32), np.array(val, float))
        for c in fixed:
            row(c.coef, c.value, c.value)
        for k, i in enumerate(free):              # |coef . y - value| <= reach * chosen
            c = counts[i]
            reach = float(np.abs(c.coef).sum()) * big
            row(c.coef, -inf, c.value, [(k, -reach)])
            row(c.coef, c.value, inf, [(k, reach)])
        for limit in cells.missing_limits:
            row(np.asarray(limit), -inf, 0.0)
        row(target.coef, -inf, 0.0, [(side, -float(target.coef.sum()) * big)])  # 0 ...
        row(target.coef, 0.0, inf, [(side, -float(min_cell))])      # ... or >= min_cell
    h.run()
    assert h.getModelStatus() == highspy.HighsModelStatus.kOptimal
    chosen = np.round(np.asarray(h.getSolution().col_value)[:len(free)])
    return float(cost @ chosen), int(chosen.sum())


# The least-cost suppression against the audit's mending, on the crafted panels: the
# ratio of their costs as measured (rounded up at the second decimal; docs/disclosure.md
# lists them); a larger one is a regression of the mending.
MEASURED_GAP = {"dropout": 1.0, "late": 1.0, "leaver": 1.0, "pattern": 1.10, "group": 1.37}


@pytest.mark.parametrize("design", list(DESIGNS))
def test_mending_against_the_least_cost_suppression(tmp_path, design):
    path = _panel_csv(tmp_path / "panel.csv", DESIGNS[design])
    report, panel, cells, counts, _ = _unprotected(path, group="district")
    withheld, left = da.protect(counts, cells, M, panel.wave_labels)
    assert left == []
    ours = sum(da.withholding_cost(c) for c in withheld)
    _, _, _, fresh, _ = _unprotected(path, group="district")
    if not any(c.value is not None and da.small(c.value, M) for c in fresh):
        least, _ = _fewest_withheld(fresh, cells, M, panel.wave_labels)
        # exact optimum (mixed-integer program above); 1e-9: sums of costs in floats
        assert least - 1e-9 <= ours <= least * MEASURED_GAP[design] + 1e-9


def test_whole_numbers_confirm_the_audit_on_a_tiny_panel(tmp_path):
    """An independent check of the linear programs: on a two-wave panel (four cells:
    seen at both waves, the first only, the second only, neither), every whole-number
    table that reproduces the counts the report releases is enumerated; with the audit
    off the three households never seen are pinned at 3, with it no small cell is
    confined to 1 .. min-cell - 1. Known truth: 30 / 12 / 9 / 3 households."""
    rows, unit = [], 0
    for pattern, n in (("oo", 30), ("o.", 12), (".o", 9), ("..", 3)):
        for _ in range(n):    # a loop over a few crafted units
            unit += 1
            rows += [{"household": f"h{unit:02d}", "year": 2020 + w,
                      "satisfaction": (3 + unit % 3) if seen == "o" else None}
                     for w, seen in enumerate(pattern)]
    path = tmp_path / "tiny.csv"
    pd.DataFrame(rows).to_csv(path, index=False)

    def integer_tables(report, panel):
        cells = da.panel_cells(panel, "satisfaction")
        counts, unmodelled = da.released_counts(report, cells, panel.wave_times, M)
        assert unmodelled == [] and len(cells.truth) == 4
        n = int(cells.truth.sum())
        grid = np.stack(np.meshgrid(*[np.arange(n + 1)] * 3, indexing="ij"), -1).reshape(-1, 3)
        grid = np.c_[grid, n - grid.sum(1)]
        grid = grid[grid[:, 3] >= 0]
        for c in counts:       # the shown counts, as an attacker reads them
            if c.value is not None:
                grid = grid[grid @ c.coef == c.value]
        return cells, grid

    for audited in (False, True):
        report, panel = run_screen(str(path), _request(disclosure_audit=audited))
        cells, tables = integer_tables(report, panel)
        assert (tables == cells.truth).all(1).any()   # the truth is one of them
        for i in np.flatnonzero(da.small(cells.truth, M)):
            values = tables[:, i]
            pinned = values.min() > 0 and values.max() < M
            assert pinned == (not audited), (cells.name(i, panel.wave_labels), values.min(),
                                              values.max())


def _demo(tmp_path, *extra):
    run = run_cli("demo", tmp_path / "tenants.csv")
    assert run.returncode == 0, run.stderr.decode()
    out = tmp_path / "report.json"
    args = ("--id", "household", "--wave", "year", "--value", "satisfaction",
            "--missing-codes", "-9,-8", "--weight", "weight", "--group", "district")
    run = run_cli("screen", tmp_path / "tenants.csv", *args, *extra, "--json", out)
    assert run.returncode == 0, run.stderr.decode()
    request = ScreenRequest(id=("household",), wave="year", value=("satisfaction",),
                            missing_codes="-9,-8", weight="weight", group="district",
                            audit_only="--audit-only" in extra)
    _, panel = run_screen(str(tmp_path / "tenants.csv"), request)
    return json.loads(out.read_text()), panel


def test_audit_stops_and_says_so_beyond_the_mending_limit(tmp_path, monkeypatch):
    """When the released counts pin more small counts than MENDING_LIMIT (panels where
    most units have a pattern of their own), the audit stops with its reason instead of
    mending them one by one, and the terminal line says it was not completed."""
    path = _panel_csv(tmp_path / "two.csv", TWO_IN_A_PATTERN)
    report, panel = run_screen(str(path), _request(disclosure_audit=False))
    mended = da.protect_report(copy.deepcopy(report), panel, "satisfaction", M)
    assert mended["counts_withheld"] >= 1     # within the limit, this panel is mended
    monkeypatch.setattr(da, "MENDING_LIMIT", 0)
    stopped = da.protect_report(copy.deepcopy(report), panel, "satisfaction", M)
    assert stopped["audited"] is False
    assert "pin more than 0 counts of 1 to 4 units" in stopped["reason"]
    assert da.disclosure_line({"disclosure": stopped}).startswith(
        "Disclosure audit: not completed, stopped: the released counts pin")


def test_audit_stops_before_any_program_when_patterns_identify_units():
    """300 units with 70 waves and scattered skips: nearly every unit has a pattern of
    its own, so the audit stops before its linear programs (one such program took 84 s
    at 2,000 x 150); a panel whose small patterns hold few units is audited."""
    rng = np.random.default_rng(3)
    scattered = rng.random((300, 70)) > 0.05
    with pytest.raises(da.AuditStopped, match="of 300 units have a response pattern"):
        da.check_cost(da.build_cells(scattered, None, {}), M)
    mostly_complete = np.ones((300, 70), bool)
    mostly_complete[:150, -1] = False
    codes = (np.arange(1, 102)[:, None] >> np.arange(7)) & 1
    mostly_complete[:101, :7] = codes == 0   # 101 patterns of one unit each
    cells = da.build_cells(mostly_complete, None, {})
    assert (small(cells.truth, M)).sum() > da.MENDING_LIMIT
    da.check_cost(cells, M)   # 101 small cells, but a third of the units: no stop


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
