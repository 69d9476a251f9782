"""Quasi-simplex reliability (Heise, Wiley-Wiley) and internal consistency of items."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from conftest import run_cli
from paneldiag.diagnostics.reliability import (
    alpha_interval, cronbach_alpha, heise_values, internal_consistency, item_covariance,
    mcdonald_omega, one_factor_ml, quasi_simplex_reliability, triplets, wiley_wiley_values)
from paneldiag.simulate import carry_over
from paneldiag.summaries import Chunk, replicate_groups
from paneldiag.summaries.pairwise import PairwiseMoments


# ----------------------------------------------------------------------------- population truth

def quasi_simplex_covariance(true_var0: float, stabilities, innovations, error_var: float):
    """Exact covariance of a quasi-simplex: tau_1 with variance true_var0,
    tau_{t+1} = b_t tau_t + zeta_t, observed y_t = tau_t + e_t, Var(e_t) = error_var."""
    n_waves = len(stabilities) + 1
    true_var = [true_var0]
    for b, z in zip(stabilities, innovations):
        true_var.append(b * b * true_var[-1] + z)
    cov = np.zeros((n_waves, n_waves))
    for s in range(n_waves):
        for u in range(s, n_waves):
            cov[s, u] = cov[u, s] = true_var[s] * np.prod(stabilities[s:u])
    return cov + error_var * np.eye(n_waves), np.array(true_var)


class ExactMoments:
    """Moments with a fixed covariance: every replicate left out gives the same."""

    def __init__(self, cov, k=5):
        self.cov, self.k = cov, k

    def covariance(self):
        return self.cov

    def correlation(self):
        sd = np.sqrt(np.diag(self.cov))
        return self.cov / np.outer(sd, sd)

    def leave_one_out(self):
        for _ in range(self.k):
            yield self


def test_heise_exact_on_stationary_quasi_simplex():
    # Simulation truth, computed analytically: stationary true variance 1, carry-over
    # b = 0.85 between waves, error variance 2/3, so reliability 0.6 at every wave and
    # stability between waves s and u of 0.85 ** (u - s) (Heise 1969, ASR, eqs. for
    # r12 r23 / r13 and r13 / r23).
    b, rel = 0.85, 0.6
    cov, _ = quasi_simplex_covariance(1.0, [b] * 4, [1 - b * b] * 4, (1 - rel) / rel)
    trip = triplets(5)
    v = heise_values(ExactMoments(cov).correlation(), trip)
    np.testing.assert_allclose(v["reliability"], rel, rtol=1e-12)
    s, t, u = trip.T
    np.testing.assert_allclose(v["stability_first"], b ** (t - s), rtol=1e-12)
    np.testing.assert_allclose(v["stability_second"], b ** (u - t), rtol=1e-12)
    np.testing.assert_allclose(v["stability_outer"], b ** (u - s), rtol=1e-12)


def test_wiley_wiley_exact_with_changing_true_variance():
    # Simulation truth, computed analytically: true variance changes wave by wave,
    # one error variance 0.5 (Wiley and Wiley 1970, ASR): every triplet recovers the
    # error variance, the true variances and each wave's reliability exactly.
    stab, innov, theta = [0.9, 0.7, 1.1, 0.8], [0.3, 0.6, 0.2, 0.5], 0.5
    cov, true_var = quasi_simplex_covariance(1.2, stab, innov, theta)
    trip = triplets(5)
    v = wiley_wiley_values(cov, trip)
    np.testing.assert_allclose(v["error_variance"], theta, rtol=1e-12)
    np.testing.assert_allclose(v["true_variance"], true_var[trip], rtol=1e-12)
    np.testing.assert_allclose(v["reliability"], true_var[trip] / (true_var[trip] + theta),
                               rtol=1e-12)
    true_corr = lambda a, c: np.prod(stab[a:c]) * np.sqrt(true_var[a] / true_var[c])  # noqa: E731
    expect = [true_corr(s, t) for s, t, _ in trip]
    np.testing.assert_allclose(v["stability_first"], expect, rtol=1e-12)


def test_screen_on_exact_moments_has_no_problems_and_zero_width_interval():
    # Simulation truth as above; with identical leave-one-out moments the jackknife
    # standard error is exactly 0.
    cov, _ = quasi_simplex_covariance(1.0, [0.85] * 3, [1 - 0.85 ** 2] * 3, 2 / 3)
    result = quasi_simplex_reliability(ExactMoments(cov), ("1", "2", "3", "4"))
    assert result.summary.estimate == pytest.approx(0.6, abs=1e-12)
    assert result.summary.ci_low == pytest.approx(0.6, abs=1e-12)
    assert result.summary.n_triplets == 4 and result.summary.n_impossible == 0
    assert not any(r.impossible for r in result.heise + result.wiley_wiley)
    out = result.to_dict()
    assert set(out) == {"basis", "n_replicates", "heise", "wiley_wiley", "summary"}
    assert set(out["summary"]) >= {"estimate", "ci_low", "ci_high", "method"}


def test_impossible_values_are_kept_and_explained():
    # Constructed case: r12 r23 = 0.64 > r13 = 0.5, so the Heise reliability is
    # 1.28 (the formula's value, Heise 1969), above 1; it must not be clipped.
    corr = np.array([[1.0, 0.8, 0.5], [0.8, 1.0, 0.8], [0.5, 0.8, 1.0]])
    result = quasi_simplex_reliability(ExactMoments(corr), ("a", "b", "c"))
    row = result.heise[0]
    assert row.reliability == pytest.approx(0.64 / 0.5)
    assert row.impossible and any("above 1" in p for p in row.problems)
    ww = result.wiley_wiley[0]
    assert ww.error_variance == pytest.approx(1 - 1.28)
    assert ww.impossible and any("error variance negative" in p for p in ww.problems)
    # negative outer correlation: undefined, with its reason
    corr[0, 2] = corr[2, 0] = -0.1
    row = quasi_simplex_reliability(ExactMoments(corr), ("a", "b", "c")).heise[0]
    assert row.impossible and "r_su <= 0" in row.problems[0]


def _simulated_summary(rng, n_units, n_waves, rel=0.6, rho=0.85, k=20):
    times = np.arange(n_waves, dtype=float)
    x = carry_over(n_units, times, rho, 1.0, rng) + rng.normal(0, np.sqrt((1 - rel) / rel),
                                                               (n_units, n_waves))
    chunk = Chunk(x, None, replicate_groups(np.arange(n_units), k), times, k)
    return quasi_simplex_reliability(PairwiseMoments.from_chunk(chunk),
                                     tuple(str(t) for t in range(n_waves))).summary


def _coverage(n_reps, seed):
    rng = np.random.default_rng(seed)
    hits = [(s.ci_low <= 0.6 <= s.ci_high) for s in
            (_simulated_summary(rng, 300, 4) for _ in range(n_reps))]
    return float(np.mean(hits))


def test_jackknife_interval_coverage_reduced_grid():
    # Simulation with known truth: quasi-simplex, reliability 0.6, carry-over 0.85,
    # N = 300, T = 4, 200 replicates. Looser band here; the 93-97% band is asserted on
    # 1000 replicates in the slow test below (200 replicates gave 94.5% when written).
    assert 0.90 <= _coverage(200, seed=11) <= 0.99


@pytest.mark.slow
def test_jackknife_interval_coverage_full_grid():
    # Simulation with known truth as above, 1000 replicates (95.1% when written).
    assert 0.93 <= _coverage(1000, seed=11) <= 0.97


def test_pairwise_basis_with_missing_waves():
    # Simulation with known truth: reliability 0.6 and 25% of cells missing completely
    # at random; the pairwise-complete estimate stays near the truth.
    rng = np.random.default_rng(4)
    times = np.arange(5, dtype=float)
    x = carry_over(4000, times, 0.85, 1.0, rng) + rng.normal(0, np.sqrt(2 / 3), (4000, 5))
    x[rng.random(x.shape) < 0.25] = np.nan
    chunk = Chunk(x, None, replicate_groups(np.arange(4000)), times, 20)
    result = quasi_simplex_reliability(PairwiseMoments.from_chunk(chunk), tuple("abcde"))
    assert result.basis == "pairwise_complete"
    assert abs(result.summary.estimate - 0.6) < 4 * result.summary.se + 0.01


# ----------------------------------------------------------------------------- items

def test_cronbach_alpha_matches_pingouin():
    # Reference library: pingouin.cronbach_alpha on pingouin's bundled
    # 'cronbach_alpha' dataset (complete data; Feldt interval, pingouin rounds to 3 dp).
    import pingouin as pg
    data = pg.read_dataset("cronbach_alpha").pivot(index="Subj", columns="Items",
                                                    values="Scores")
    ref_alpha, ref_ci = pg.cronbach_alpha(data=data)
    cov, n = item_covariance(data.to_numpy(float))
    alpha = cronbach_alpha(cov)
    assert alpha == pytest.approx(ref_alpha, rel=1e-12)
    low, high = alpha_interval(alpha, n, data.shape[1])
    assert (round(low, 3), round(high, 3)) == pytest.approx(tuple(ref_ci), abs=1e-9)


def test_omega_exact_on_population_one_factor_covariance():
    # Simulation truth, analytic: Sigma = lambda lambda' + diag(psi) gives back the
    # loadings and omega = (sum lambda)^2 / ((sum lambda)^2 + sum psi) (McDonald 1999).
    lam, psi = np.array([1.0, 0.8, 1.5, 0.6, 1.2]), np.array([0.5, 0.4, 1.0, 0.3, 0.8])
    loadings, unique, heywood = one_factor_ml(np.outer(lam, lam) + np.diag(psi))
    np.testing.assert_allclose(loadings, lam, rtol=1e-5)
    np.testing.assert_allclose(unique, psi, rtol=1e-5)
    assert not heywood
    assert mcdonald_omega(loadings, unique) == pytest.approx(
        lam.sum() ** 2 / (lam.sum() ** 2 + psi.sum()), rel=1e-6)


def test_one_factor_ml_matches_statsmodels():
    # Reference library: statsmodels.multivariate.factor.Factor(method='ml'), which
    # fits on the correlation matrix; ML is scale-invariant, so standardised
    # loadings and uniquenesses agree.
    from statsmodels.multivariate.factor import Factor
    rng = np.random.default_rng(8)
    lam = np.array([0.9, 0.7, 0.5, 0.8])
    x = rng.normal(size=(400, 1)) * lam + rng.normal(size=(400, 4)) * 0.6
    cov = np.cov(x.T)
    loadings, unique, _ = one_factor_ml(cov)
    ref = Factor(corr=np.corrcoef(x.T), n_factor=1, method="ml", nobs=400).fit()
    sd = np.sqrt(np.diag(cov))
    np.testing.assert_allclose(loadings / sd, np.abs(ref.loadings[:, 0]), atol=1e-5)
    np.testing.assert_allclose(unique / sd ** 2, ref.uniqueness, atol=1e-5)


def test_heywood_case_is_flagged():
    # Constructed: an item without unique variance (psi_1 = 0), a boundary solution.
    lam = np.array([1.0, 0.6, 0.5, 0.7])
    cov = np.outer(lam, lam) + np.diag([0.0, 0.5, 0.5, 0.5])
    z = np.random.default_rng(1).normal(size=(3000, 4))
    z -= z.mean(axis=0)
    # rescale so that the sample covariance equals cov exactly
    items = z @ np.linalg.inv(np.linalg.cholesky(np.cov(z.T)).T) @ np.linalg.cholesky(cov).T
    result = internal_consistency(items[:, None, :], ("1",), ("a", "b", "c", "d"))
    assert result.waves[0].heywood
    assert any("Heywood" in p for p in result.waves[0].problems)


def test_negative_alpha_is_reported_not_clipped():
    # Constructed: two items with negative covariance give alpha < 0 (Cronbach 1951
    # formula), reported with its reason.
    cov = np.array([[1.0, -0.5], [-0.5, 1.0]])
    assert cronbach_alpha(cov) == pytest.approx(2 * (1 - 2 / 1.0))
    rng = np.random.default_rng(2)
    items = rng.multivariate_normal([0, 0], cov, 500)[:, None, :]
    row = internal_consistency(items, ("1",), ("a", "b")).waves[0]
    assert row.alpha < 0 and any("alpha negative" in p for p in row.problems)


def _item_file(path, n_units=400, seed=3):
    rng = np.random.default_rng(seed)
    lam = np.array([1.0, 0.8, 0.6])
    frames = []
    for wave in (2019, 2020, 2021):
        f = rng.normal(size=(n_units, 1))
        items = f * lam + rng.normal(size=(n_units, 3)) * 0.7
        frames.append(pd.DataFrame({"tenant": np.arange(n_units), "year": wave,
                                    "q1": items[:, 0], "q2": items[:, 1], "q3": items[:, 2]}))
    frame = pd.concat(frames, ignore_index=True)
    frame.loc[5, "q2"] = np.nan
    frame.loc[7, "q3"] = -9
    frame.to_csv(path, index=False)
    return frame


def _three_item_omega(items: np.ndarray) -> float:
    """Omega of three items from the exactly identified one-factor model."""
    s = np.cov(items.T)
    lam = np.sqrt([s[0, 1] * s[0, 2] / s[1, 2], s[0, 1] * s[1, 2] / s[0, 2],
                   s[0, 2] * s[1, 2] / s[0, 1]])
    psi = np.diag(s) - lam ** 2
    return lam.sum() ** 2 / (lam.sum() ** 2 + psi.sum())


def test_cli_items_report_internal_consistency(tmp_path):
    # Simulation with known loadings (one factor); alpha compared with
    # pingouin.cronbach_alpha on the complete rows of the first wave.
    import pingouin as pg
    frame = _item_file(tmp_path / "items.csv")
    out = tmp_path / "r.json"
    done = run_cli("screen", tmp_path / "items.csv", "--id", "tenant", "--wave", "year",
                   "--items", "calm=q1,q2,q3", "--missing-codes", "-9", "--json", out,
                   "--details")
    assert done.returncode == 0, done.stderr.decode()
    report = json.loads(out.read_text())
    ledger = report["ledger"]
    assert ledger["rows_read"] == ledger["rows_used"] + sum(ledger["dropped_by_reason"].values())
    assert ledger["dropped_by_reason"]["missing_value"] == 1
    assert ledger["dropped_by_reason"]["declared_missing_code"] == 1
    ic = report["reliability"]["internal_consistency"]
    assert ic["items"] == ["q1", "q2", "q3"]
    first = frame[frame.year == 2019][["q1", "q2", "q3"]]
    first = first[(first != -9).all(axis=1)].dropna()
    assert ic["waves"][0]["n"] == len(first)
    assert ic["waves"][0]["alpha"] == pytest.approx(pg.cronbach_alpha(data=first)[0], rel=1e-10)
    # Reference computation: with three items the one-factor model is exactly
    # identified, so its ML solution reproduces the sample covariance and lambda_i^2 =
    # s_ij s_ik / s_jk, psi_i = s_ii - lambda_i^2 (the three-indicator rule; Bollen 1989,
    # Structural Equations with Latent Variables, ch. 7; from memory). Omega is a ratio,
    # so the divisor of the covariance (n or n - 1) does not matter. Tolerance 1e-6: the
    # optimiser's stop in one_factor_ml.
    omega = ic["waves"][0]["omega"]
    assert omega == pytest.approx(_three_item_omega(first.to_numpy()), abs=1e-6)
    # Simulation with known truth: loadings (1, 0.8, 0.6), unique variances 0.49, so
    # omega = 2.4^2 / (2.4^2 + 3 x 0.49) = 0.7967 (McDonald 1999). The estimate lies
    # within 4 SD of the sampling distribution of the three-item omega, its SD taken
    # from 400 simulated samples of the same size from the same process.
    lam, psi = np.array([1.0, 0.8, 0.6]), 0.49
    truth = lam.sum() ** 2 / (lam.sum() ** 2 + 3 * psi)
    rng = np.random.default_rng(11)
    draws = [_three_item_omega(rng.normal(size=(len(first), 1)) * lam
                               + rng.normal(size=(len(first), 3)) * np.sqrt(psi))
             for _ in range(400)]
    assert abs(omega - truth) < 4 * np.std(draws), (omega, truth, np.std(draws))
    assert "Internal consistency of 3 items" in done.stdout.decode()


def test_cli_items_refused_for_wide_data(tmp_path):
    # Design rule (docs/json-report.md): --items is for long data only.
    pd.DataFrame({"id": [1, 2], "a1": [1, 2], "a2": [2, 3]}).to_csv(tmp_path / "w.csv",
                                                                   index=False)
    done = run_cli("screen", tmp_path / "w.csv", "--id", "id", "--wide", "a=a1,a2",
                   "--items", "s=a1,a2")
    assert done.returncode == 2
    assert "--items is for long data" in done.stderr.decode()


# ----------------------------------------------------------------------------- basis under MAR

def _context(x, times):
    from paneldiag.panel import Panel
    from paneldiag.pipeline import MeasureContext, ScreenOptions
    panel = Panel(unit_ids=np.arange(len(x)), wave_labels=tuple(str(t) for t in range(len(times))),
                  wave_times=np.asarray(times, float), values={"y": x})
    return MeasureContext(panel=panel, measure="y", options=ScreenOptions(), ledger=None)


def test_em_basis_under_dropout_that_depends_on_the_last_value():
    # Simulation with known truth: quasi-simplex, reliability 0.6, carry-over 0.85,
    # monotone dropout whose odds fall with the last observed value (missing at
    # random). With missing cells the section uses the EM moments and says so; the
    # pairwise-complete summary is given beside it.
    from paneldiag.diagnostics.reliability import reliability_section
    from paneldiag.simulate import dropout_after
    rng = np.random.default_rng(3)
    times = np.arange(5, dtype=float)
    x = carry_over(6000, times, 0.85, 1.0, rng) + rng.normal(0, np.sqrt(2 / 3), (6000, 5))
    x[dropout_after(x, rng, 0.15, -1.5)] = np.nan
    result = reliability_section(_context(x, times))
    assert result.basis == "em_missing_at_random"
    assert result.alternative_basis == "pairwise_complete"
    assert result.summary.ci_low <= 0.6 <= result.summary.ci_high
    assert "EM" in result.basis_note and "em missing at random" in result.summary.method
    out = result.to_dict()
    assert out["alternative_summary"]["estimate"] == pytest.approx(
        result.alternative_summary.estimate)


def test_complete_data_uses_pairwise_basis():
    # Simulation with known truth as above without missing cells.
    from paneldiag.diagnostics.reliability import reliability_section
    rng = np.random.default_rng(4)
    times = np.arange(4, dtype=float)
    x = carry_over(500, times, 0.85, 1.0, rng) + rng.normal(0, np.sqrt(2 / 3), (500, 4))
    result = reliability_section(_context(x, times))
    assert result.basis == "pairwise_complete"
    assert "alternative_summary" not in result.to_dict()


def test_replicate_pattern_moments_pool_to_pattern_moments():
    # Algebra: the per-group pattern moments merged over groups equal the pooled
    # pattern moments (Chan, Golub and LeVeque 1983 update), and leaving a group out
    # equals summarising the other groups' units.
    from paneldiag.summaries.patterns import PatternMoments
    from paneldiag.summaries.replicate_patterns import ReplicatePatternMoments
    rng = np.random.default_rng(6)
    x = rng.normal(size=(700, 5))
    x[rng.random(x.shape) < 0.3] = np.nan
    groups = replicate_groups(np.arange(700))
    chunk = Chunk(x, None, groups, np.arange(5.0), 20)
    reps = ReplicatePatternMoments.from_chunk(chunk)
    whole = PatternMoments.from_chunk(chunk)
    pooled = reps.pooled()
    assert np.array_equal(pooled.observed, whole.observed)
    np.testing.assert_allclose(pooled.m2, whole.m2, atol=1e-9)
    keep = groups != 3
    other = PatternMoments.from_chunk(Chunk(x[keep], None, groups[keep], np.arange(5.0), 20))
    left = list(reps.leave_one_out())[3]
    np.testing.assert_allclose(left.n, other.n)
    np.testing.assert_allclose(left.mean, other.mean, atol=1e-12)
    half = [ReplicatePatternMoments.from_chunk(Chunk(x[a:b], None, groups[a:b], np.arange(5.0),
                                                     20)) for a, b in ((0, 300), (300, 700))]
    np.testing.assert_allclose(half[0].merge(half[1]).pooled().m2, whole.m2, atol=1e-9)


def test_two_waves_with_items_keep_internal_consistency():
    # Simulation with known loadings (one factor, two waves): no wave triplet exists,
    # so the quasi-simplex summary is null with its reason, while alpha per wave is
    # still reported (checked against pingouin.cronbach_alpha).
    import pingouin as pg
    from paneldiag.diagnostics.reliability import reliability_section
    from paneldiag.panel import Panel
    from paneldiag.pipeline import MeasureContext, ScreenOptions
    rng = np.random.default_rng(5)
    f = rng.normal(size=(300, 2, 1))
    items = f * np.array([1.0, 0.7, 0.9]) + rng.normal(size=(300, 2, 3))
    panel = Panel(unit_ids=np.arange(300), wave_labels=("1", "2"), wave_times=np.array([1.0, 2]),
                  values={"s": items.mean(axis=2)}, items={"s": items},
                  item_columns={"s": ("a", "b", "c")})
    result = reliability_section(MeasureContext(panel=panel, measure="s",
                                                options=ScreenOptions(), ledger=None))
    assert result.summary.n_triplets == 0 and np.isnan(result.summary.estimate)
    assert "fewer than three waves" in result.summary.method
    second = result.internal_consistency.waves[1]
    assert second.alpha == pytest.approx(pg.cronbach_alpha(data=pd.DataFrame(items[:, 1]))[0],
                                         rel=1e-10)


def test_triplets_without_joint_observations_are_left_out_of_the_median():
    # Simulation with known truth (reliability 0.6, carry-over 0.85), planned
    # missingness: the first and last waves are never observed together, so the three
    # triplets (1, t, 5) are undefined; the median uses the seven others.
    rng = np.random.default_rng(1)
    times = np.arange(5.0)
    x = carry_over(3000, times, 0.85, 1.0, rng) + rng.normal(0, np.sqrt(2 / 3), (3000, 5))
    half = rng.random(3000) < 0.5
    x[half, 0], x[~half, 4] = np.nan, np.nan
    chunk = Chunk(x, None, replicate_groups(np.arange(3000)), times, 20)
    result = quasi_simplex_reliability(PairwiseMoments.from_chunk(chunk), tuple("abcde"))
    undefined = [r for r in result.heise if r.waves[0] == "a" and r.waves[2] == "e"]
    assert len(undefined) == 3 and result.summary.n_undefined == 3
    assert all(np.isnan(r.reliability) and not r.impossible and r.problems for r in undefined)
    assert np.isfinite(result.summary.estimate) and "3 undefined" in result.summary.method
    assert result.summary.ci_low <= 0.6 <= result.summary.ci_high
