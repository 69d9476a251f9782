"""The two per-pattern summaries built from one table of (pattern, replicate group)
cells: against brute-force numpy moments of the same units, across chunkings, and
against each other."""

from __future__ import annotations

import numpy as np
import pytest

from paneldiag.panel import Panel
from paneldiag.summaries import Chunk, replicate_groups, summarise
from paneldiag.summaries.patterns import MATRIX_CELL_UNITS, PatternCells, PatternMoments
from paneldiag.summaries.replicate_patterns import ReplicatePatternMoments


def _panel_values(rng, n=3000, t=6, k=5):
    """Correlated waves with a large complete pattern (cells above the matrix-product
    size), monotone dropout and scattered skips (many small cells)."""
    cov = 0.5 + 0.5 * np.eye(t)
    x = rng.multivariate_normal(np.linspace(10.0, 15.0, t), cov * 4.0, n)
    leave = rng.integers(1, t + 1, n)
    x[np.arange(t) >= np.where(rng.random(n) < 0.3, leave, t)[:, None]] = np.nan
    x[rng.random(x.shape) < 0.05] = np.nan
    groups = rng.integers(0, k, n)
    return x, groups


def _chunk(x, groups, k):
    return Chunk(values=x, weights=None, replicate=groups,
                 times=np.arange(x.shape[1], dtype=float), n_replicates=k)


def _brute(x, rows, cols):
    """Reference: numpy mean and np.cov(bias=True) * n of the observed waves."""
    block = x[np.ix_(rows, cols)]
    mean = block.mean(axis=0)
    m2 = np.cov(block.T, bias=True).reshape(cols.sum(), cols.sum()) * rows.sum()
    return mean, m2


def test_cells_equal_brute_force_moments_per_pattern_and_group():
    # reference: numpy moments of the units of each (pattern, group), by brute force;
    # both the matrix-product cells and the small cells are present
    rng = np.random.default_rng(11)
    x, groups = _panel_values(rng)
    cells = PatternCells.from_chunk(_chunk(x, groups, 5))
    assert cells.n.max() >= MATRIX_CELL_UNITS > cells.n.min()
    seen = ~np.isnan(x)
    assert cells.n.sum() == len(x)
    t = x.shape[1]
    upper = np.triu_indices(t)
    for c in range(cells.n_cells):
        rows = np.all(seen == cells.observed[c], axis=1) & (groups == cells.group[c])
        cols = cells.observed[c]
        assert cells.n[c] == rows.sum()
        if not cols.any():
            continue
        mean, m2 = _brute(x, rows, cols)
        np.testing.assert_allclose(cells.mean[c, cols], mean, rtol=1e-13)
        assert np.all(cells.mean[c, ~cols] == 0)
        full = np.zeros((t, t))
        full[np.ix_(cols, cols)] = m2
        np.testing.assert_allclose(cells.m2[c], full[upper], rtol=1e-10, atol=1e-9)


def test_patterns_and_groups_equal_brute_force():
    # reference: numpy moments per pattern (all units, and the units of one group)
    rng = np.random.default_rng(12)
    x, _ = _panel_values(rng, n=2000)
    k = 5
    summaries = summarise(Panel(unit_ids=np.arange(len(x)), wave_labels=tuple("abcdef"),
                                wave_times=np.arange(6.0), values={"y": x}),
                          "y", [PatternMoments, ReplicatePatternMoments], chunk_units=700,
                          n_replicates=k)
    patterns, reps = summaries[PatternMoments], summaries[ReplicatePatternMoments]
    seen = ~np.isnan(x)
    own = replicate_groups(np.arange(len(x)), k)   # the groups summarise gives the units
    for summary, units in [(patterns, np.ones(len(x), bool))] + \
            [(reps.groups[g], own == g) for g in range(k)]:
        assert summary.n.sum() == units.sum()
        for p in range(summary.n_patterns):
            rows = np.all(seen == summary.observed[p], axis=1) & units
            cols = summary.observed[p]
            assert summary.n[p] == rows.sum()
            if rows.sum() > 1 and cols.any():
                mean, m2 = _brute(x, rows, cols)
                np.testing.assert_allclose(summary.mean[p, cols], mean, rtol=1e-12)
                np.testing.assert_allclose(summary.m2[p][np.ix_(cols, cols)], m2,
                                           rtol=1e-9, atol=1e-8)
    # replicate counts per pattern: brute-force counts of units per (pattern, group)
    for p in range(patterns.n_patterns):
        rows = np.all(seen == patterns.observed[p], axis=1)
        np.testing.assert_array_equal(patterns.replicate_n[p], np.bincount(own[rows],
                                                                           minlength=k))


@pytest.mark.parametrize("chunk_units", [1, 333, 5000])
def test_chunkings_agree(chunk_units):
    # simulation with known truth: the same units in one chunk or many give the same
    # moments (exact pooling), up to rounding
    rng = np.random.default_rng(13)
    x, _ = _panel_values(rng, n=1500)
    panel = Panel(unit_ids=np.arange(len(x)), wave_labels=tuple("abcdef"),
                  wave_times=np.arange(6.0), values={"y": x})
    kinds = [PatternMoments, ReplicatePatternMoments]
    one = summarise(panel, "y", kinds, chunk_units=len(x), n_replicates=4)
    many = summarise(panel, "y", kinds, chunk_units=chunk_units, n_replicates=4)
    for a, b in [(one[PatternMoments], many[PatternMoments]),
                 (one[ReplicatePatternMoments].pooled(), many[ReplicatePatternMoments].pooled()),
                 (one[PatternMoments], one[ReplicatePatternMoments].pooled())]:
        np.testing.assert_array_equal(a.observed, b.observed)
        np.testing.assert_array_equal(a.n, b.n)
        np.testing.assert_array_equal(a.replicate_n, b.replicate_n)
        np.testing.assert_allclose(a.mean, b.mean, rtol=1e-13, atol=1e-13)
        np.testing.assert_allclose(a.m2, b.m2, rtol=1e-11, atol=1e-9)


def test_shared_pass_gives_the_same_summaries_as_separate_passes():
    # the combined pass sorts once for both kinds; building each kind alone must give
    # identical values (same computation)
    rng = np.random.default_rng(14)
    x, _ = _panel_values(rng, n=1200)
    panel = Panel(unit_ids=np.arange(len(x)), wave_labels=tuple("abcdef"),
                  wave_times=np.arange(6.0), values={"y": x})
    both = summarise(panel, "y", [PatternMoments, ReplicatePatternMoments], chunk_units=500)
    alone = summarise(panel, "y", [PatternMoments], chunk_units=500)[PatternMoments]
    reps = summarise(panel, "y", [ReplicatePatternMoments], chunk_units=500)
    np.testing.assert_array_equal(both[PatternMoments].m2, alone.m2)
    np.testing.assert_array_equal(both[PatternMoments].mean, alone.mean)
    np.testing.assert_array_equal(both[ReplicatePatternMoments].cells.m2,
                                  reps[ReplicatePatternMoments].cells.m2)


def test_leave_one_out_equals_the_other_groups_units():
    # reference: the pattern moments of the other groups' units summarised directly
    rng = np.random.default_rng(15)
    x, groups = _panel_values(rng, n=2500)
    k = 5
    groups[groups == 2] = 1   # group 2 has no units: it gets no copy (tests/test_jackknife.py)
    reps = ReplicatePatternMoments.from_chunk(_chunk(x, groups, k))
    left = list(reps.leave_one_out())
    occupied = [0, 1, 3, 4]
    assert len(left) == len(occupied)
    for i, g in enumerate(occupied):
        keep = groups != g
        other = PatternMoments.from_chunk(_chunk(x[keep], groups[keep], k))
        np.testing.assert_array_equal(left[i].observed, other.observed)
        np.testing.assert_array_equal(left[i].n, other.n)
        np.testing.assert_array_equal(left[i].replicate_n, other.replicate_n)
        np.testing.assert_allclose(left[i].mean, other.mean, rtol=1e-13, atol=1e-13)
        np.testing.assert_allclose(left[i].m2, other.m2, rtol=1e-11, atol=1e-9)
        assert np.all(left[i].replicate_n[:, g] == 0)


def test_many_waves_cells_use_byte_keys():
    # more than 62 waves: pattern keys are packed bytes and the cell key numbers the
    # patterns; reference: counts per (pattern, group) by brute force with numpy
    rng = np.random.default_rng(16)
    x = rng.normal(size=(300, 70))
    x[rng.random(x.shape) < 0.01] = np.nan
    groups = rng.integers(0, 3, 300)
    reps = ReplicatePatternMoments.from_chunk(_chunk(x[:150], groups[:150], 3)).merge(
        ReplicatePatternMoments.from_chunk(_chunk(x[150:], groups[150:], 3)))
    seen = ~np.isnan(x)
    expected = {}
    for row, g in zip(map(tuple, seen), groups):
        expected[(row, g)] = expected.get((row, g), 0) + 1
    cells = reps.cells
    got = {(tuple(o), g): n for o, g, n in zip(cells.observed, cells.group, cells.n)}
    assert got == expected
    pooled = reps.pooled()
    assert pooled.n.sum() == 300
    assert pooled.n_patterns == len({tuple(r) for r in seen})


def test_summaries_merged_a_few_chunks_at_a_time_equal_the_serial_merge():
    # reference: every chunk summarised alone and merged in chunk order, one by one;
    # summarise holds only CHUNKS_AT_ONCE chunks' summaries, in the same order
    import paneldiag.summaries as summaries
    rng = np.random.default_rng(17)
    x, _ = _panel_values(rng, n=1300)
    ids = np.arange(len(x))
    panel = Panel(unit_ids=ids, wave_labels=tuple("abcdef"), wave_times=np.arange(6.0),
                  values={"y": x})
    size = 100   # 13 chunks, more than CHUNKS_AT_ONCE
    assert len(x) / size > summaries.CHUNKS_AT_ONCE
    got = summarise(panel, "y", [PatternMoments], chunk_units=size, n_replicates=4)
    groups = replicate_groups(ids, 4)
    serial = None
    for start in range(0, len(x), size):
        part = PatternMoments.from_chunk(_chunk(x[start:start + size],
                                                groups[start:start + size], 4))
        serial = part if serial is None else serial.merge(part)
    for name in ("observed", "n", "mean", "m2", "replicate_n"):
        np.testing.assert_array_equal(getattr(got[PatternMoments], name),
                                      getattr(serial, name))


@pytest.mark.parametrize("ids", [np.arange(-5, 40, dtype=np.int64),
                                 np.array([f"p{i}" for i in range(45)], dtype=object)])
def test_replicate_groups_hashed_in_blocks_equal_one_hash(ids, monkeypatch):
    # reference: pandas' hash of every id's text at once, modulo the groups
    import pandas as pd

    import paneldiag.summaries as summaries
    whole = pd.util.hash_array(np.array([str(i) for i in ids], dtype=object),
                               categorize=False) % np.uint64(7)
    monkeypatch.setattr(summaries, "HASHED_AT_ONCE", 4)
    np.testing.assert_array_equal(replicate_groups(ids.copy(), 7), whole.astype(np.int64))
