"""The terminal's disclosure control follows the appendix's: no share or count in the
terminal output (default and --details) reveals 1 to min-cell - 1 units, directly or by
subtraction from the panel's unit count. Screened through the CLI on a panel of our own
making with rare unit types, a single score at the bottom of the scale and tiny groups
(fixtures/entry/make_panels.py, rare_types.csv); the true counts come from plain pandas
on the same file."""

from __future__ import annotations

import re

import numpy as np
import pandas as pd
import pytest

from paneldiag.disclosure import count_shown, share_shown, shown_mask
from conftest import FIXTURES, run_cli

RARE = FIXTURES / "entry" / "rare_types.csv"
ARGS = ("--id", "household", "--wave", "wave", "--value", "score", "--group", "district")
# Lines that carry no count or share of units: the ledger accounts for rows of the input
# file (every row, by design), power rows give hypothetical sample sizes, the mean-shape
# line gives shares of the change in the wave means.
NOT_UNITS = re.compile(r"rows read|rows used|units for 0\.9|share of change|power ")


def _truth():
    frame = pd.read_csv(RARE)
    wide = frame.pivot(index="household", columns="wave", values="score")
    return len(wide), wide.notna().sum().to_list()


def _small(k, m):
    return 0 < k < m


def _share_leaks(value: str, bases, m) -> bool:
    """A printed percentage reveals a small count (or a small remainder) of a base when
    every count consistent with its rounding is such a count."""
    digits = len(value.split(".")[1]) if "." in value else 0
    p, half = float(value) / 100, 0.5 * 10 ** -digits / 100
    for base in bases:
        counts = [c for c in range(base + 1) if abs(c / base - p) <= half + 1e-12]
        if counts and (all(_small(c, m) for c in counts)
                       or all(_small(base - c, m) for c in counts)):
            return True
    return False


def _leaks(text: str, n_units: int, wave_n: list[int], m: int) -> list[str]:
    found = []
    for line in text.splitlines():
        if NOT_UNITS.search(line):
            continue
        for match in re.finditer(r"(?<![<\d.])(\d+(?:\.\d+)?)%", line):
            if _share_leaks(match.group(1), [n_units, *wave_n], m):
                found.append(f"share {match.group(0)}: {line.strip()}")
        counts = [g for g in re.findall(r"(?<![<\d.,])(\d[\d,]*)\s+(?:units|unit-waves|"
                                        r"dropouts)\b", line)]
        if re.match(r"\s+[o.]+\s+\d", line):             # a response-pattern row
            counts.append(line.split()[1])
        if re.match(r"\s+\d+\s+\S+\s+-?\d+\.\d+", line):  # a wave-profile row
            counts.append(line.split()[1])
        for raw in counts:
            if not re.fullmatch(r"\d[\d,]*", raw):
                continue
            k = int(raw.replace(",", ""))
            if _small(k, m) or _small(n_units - k, m):
                found.append(f"count {raw}: {line.strip()}")
    return found


@pytest.mark.parametrize("min_cell, details", [(5, True), (10, False)])
def test_no_terminal_figure_reveals_fewer_than_min_cell_units(min_cell, details):
    n_units, wave_n = _truth()
    # the fixture holds what must be hidden: one late entrant, one return after a gap,
    # two leavers, one household never observed, one score at the floor of one wave
    assert n_units == 546 and any(_small(n_units - k, 5) for k in wave_n)
    done = run_cli("screen", RARE, *ARGS, "--min-cell", min_cell,
                   *(["--details"] if details else []))
    assert done.returncode == 0, done.stderr.decode()
    text = done.stdout.decode()
    # disclosure control (common practice): no count or share of 1 to min-cell - 1
    # units, nor one recoverable by subtraction from a shown total
    assert _leaks(text, n_units, wave_n, min_cell) == []
    # groups of 4 and 1 household are never named, nor is the next smallest when needed
    assert "Saltmarsh" not in text and "Fenby" not in text
    if details:
        assert "under %d units or withheld" % min_cell in text


def test_the_scan_finds_what_the_old_terminal_showed():
    """The scan can fail: the lines the terminal printed before it followed the
    appendix's rules (one household at the floor of 545, one unit of 59)."""
    old = ("    3  544  49.976  6.966  30.000  77.000    0.03        0.2%     0.0%   40\n"
           "  unit types: complete 98.3% · intermittent 1.7%\n")
    assert len(_leaks(old, 546, [544], 5)) == 2
    assert _leaks("  unit types: intermittent 1.7%\n", 59, [], 5)


def test_one_rule_decides_counts_and_shares():
    # source: the disclosure rules of docs/design.md, by hand (minimum cell size with
    # secondary suppression: common practice in statistical disclosure control)
    assert not count_shown(4, 5) and count_shown(5, 5)
    assert not count_shown(544, 5, total=546) and count_shown(541, 5, total=546)
    assert count_shown(546, 5, total=546)                 # a remainder of 0 identifies no one
    assert not share_shown(0.002, 545, 5) and share_shown(0.0, 545, 5)
    assert shown_mask([541, 2, 1], 5, additive=True).tolist() == [False, False, False]
    assert shown_mask(np.array([500, 40, 3, 3]), 5, additive=True).tolist() == [
        True, True, False, False]
