"""The delete-a-group jackknife on panels with fewer units than replicate groups: empty
groups are left out, so with one unit a group the jackknife is the delete-one jackknife."""

from __future__ import annotations

import numpy as np

from paneldiag.summaries import N_REPLICATES, Chunk
from paneldiag.summaries.contingency import PairwiseTables
from paneldiag.summaries.jackknife import jackknife_se
from paneldiag.summaries.pairwise import PairwiseMoments
from paneldiag.summaries.replicate_patterns import ReplicatePatternMoments
from paneldiag.summaries.trajectories import TrajectorySummary

N_UNITS = 8   # fewer units than the 20 replicate groups: 12 groups stay empty


def _one_unit_a_group(values: np.ndarray) -> Chunk:
    return Chunk(values=values, weights=None, replicate=np.arange(len(values)),
                 times=np.arange(values.shape[1], dtype=float), n_replicates=N_REPLICATES)


def _delete_one_se(estimates: np.ndarray) -> float:
    """The delete-one jackknife by its definition, se^2 = (n - 1) / n * sum (t_i - t_.)^2
    (Efron and Tibshirani 1993, An Introduction to the Bootstrap, ch. 11, eq. 11.5;
    from memory)."""
    n = len(estimates)
    return float(np.sqrt((n - 1) / n * ((estimates - estimates.mean()) ** 2).sum()))


def test_pairwise_correlation_jackknife_equals_delete_one_by_hand():
    rng = np.random.default_rng(3)
    x = rng.normal(size=(N_UNITS, 3))
    x[:, 1] += x[:, 0]
    moments = PairwiseMoments.from_chunk(_one_unit_a_group(x.copy()))
    reps = np.array([part.correlation()[0, 1] for part in moments.leave_one_out()])
    assert len(reps) == N_UNITS  # one copy per occupied group, none for the empty ones
    by_hand = np.array([np.corrcoef(np.delete(x, i, axis=0)[:, :2].T)[0, 1]
                        for i in range(N_UNITS)])
    np.testing.assert_allclose(np.sort(reps), np.sort(by_hand), rtol=1e-12)  # exact algebra
    full = np.corrcoef(x[:, :2].T)[0, 1]
    # source: the delete-one jackknife's definition (Efron and Tibshirani 1993, ch. 11,
    # from memory); tolerance: rounding of centred sums only
    np.testing.assert_allclose(jackknife_se(full, reps), _delete_one_se(by_hand), rtol=1e-10)


def test_trajectory_mean_slope_jackknife_equals_delete_one_by_hand():
    rng = np.random.default_rng(4)
    times = np.arange(4, dtype=float)
    x = 2.0 + rng.normal(0.5, 0.3, (N_UNITS, 1)) * times + rng.normal(0, 0.2, (N_UNITS, 4))
    summary = TrajectorySummary.from_chunk(_one_unit_a_group(x.copy()))
    reps = np.array([part.lin_mean[0, 0, 1] for part in summary.leave_one_out()])
    slopes = np.polyfit(times, x.T, 1)[0]   # each unit's least-squares slope (numpy)
    by_hand = np.array([np.delete(slopes, i).mean() for i in range(N_UNITS)])
    np.testing.assert_allclose(np.sort(reps), np.sort(by_hand), rtol=1e-10)  # rounding
    # source: the delete-one jackknife's definition (Efron and Tibshirani 1993, ch. 11,
    # from memory); for a mean it is the standard error s / sqrt(n) (exact algebra)
    np.testing.assert_allclose(jackknife_se(slopes.mean(), reps), _delete_one_se(by_hand),
                               rtol=1e-10)
    np.testing.assert_allclose(jackknife_se(slopes.mean(), reps),
                               slopes.std(ddof=1) / np.sqrt(N_UNITS), rtol=1e-10)


def test_tables_and_pattern_copies_skip_empty_groups():
    rng = np.random.default_rng(5)
    x = rng.integers(1, 5, (N_UNITS, 3)).astype(float)
    x[0, 2] = np.nan
    chunk = _one_unit_a_group(x)
    tables = PairwiseTables.from_chunk(chunk).leave_one_out()
    assert tables.shape[0] == N_UNITS
    assert sorted(np.einsum("kttii->k", tables[:, :1, :1]).tolist()) == [N_UNITS - 1] * N_UNITS
    copies = list(ReplicatePatternMoments.from_chunk(chunk).leave_one_out())
    assert len(copies) == N_UNITS
    assert [int(c.n.sum()) for c in copies] == [N_UNITS - 1] * N_UNITS


def test_a_group_of_units_never_observed_is_skipped_too():
    x = np.random.default_rng(6).normal(size=(N_UNITS, 3))
    x[-1] = np.nan          # the last unit (its own group) has no observed value
    moments = PairwiseMoments.from_chunk(_one_unit_a_group(x))
    assert len(list(moments.leave_one_out())) == N_UNITS - 1
