"""The covariance structures of the verdicts: parts, full-information likelihood, fit
indices, identification, the scaled difference tests and the latent scale of ordinal
measures (paneldiag.rules.parts, paneldiag.rules.structures,
paneldiag.diagnostics.polychoric.latent_scale).

Sources: scipy.stats (multivariate_normal.logpdf for the casewise likelihood, ncx2 for
the RMSEA interval, kurtosis), statsmodels MixedLM (a random-intercept model fitted by
ML), simulations from processes of known truth, and Joreskog (1970) and Browne (1984)
for the identification and elliptical results they prove.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from paneldiag.diagnostics.missingness import _groups, em_moments
from paneldiag.diagnostics.polychoric import latent_scale
from paneldiag.panel import Panel
from paneldiag.rules import structures as st
from paneldiag.rules import verdicts
from paneldiag.rules.parts import Carry, Error, Growth, QuasiSimplex, Scale, Trait
from paneldiag.rules.specs import family_specs, structure
from paneldiag.summaries import summarise
from paneldiag.summaries.patterns import PatternMoments


def _patterns(y: np.ndarray):
    panel = Panel(unit_ids=np.arange(len(y)), wave_labels=tuple(map(str, range(y.shape[1]))),
                  wave_times=np.arange(float(y.shape[1])), values={"y": y})
    return summarise(panel, "y", [PatternMoments])[PatternMoments]


def _gls_mean(y, sigma):
    obs = ~np.isnan(y)
    a = np.zeros_like(sigma)
    b = np.zeros(len(sigma))
    for row, o in zip(y, obs):  # a loop over units: the slow reference
        q = np.linalg.inv(sigma[np.ix_(o, o)])
        a[np.ix_(o, o)] += q
        b[o] += q @ row[o]
    return np.linalg.solve(a, b)


def test_full_information_likelihood_is_the_casewise_normal_likelihood():
    """scipy.stats.multivariate_normal.logpdf (reference library), unit by unit on the
    observed waves, at the GLS mean for a given Sigma: equal to the pattern-summary
    discrepancy; its gradient in Sigma agrees with a central difference."""
    rng = np.random.default_rng(5)
    t = 5
    a = rng.normal(size=(t, t))
    truth = a @ a.T / t + np.eye(t)
    y = rng.multivariate_normal(np.arange(t, dtype=float), truth, size=400)
    y[rng.random(y.shape) < 0.2] = np.nan
    y = y[~np.all(np.isnan(y), axis=1)]
    lik = st.PatternLikelihood(_groups(_patterns(y), np.ones(t, dtype=bool)), t)
    sigma = truth + 0.3 * np.eye(t)
    value, grad = lik.value_grad(sigma)
    mu = _gls_mean(y, sigma)
    loglik = sum(stats.multivariate_normal.logpdf(row[~np.isnan(row)], mu[~np.isnan(row)],
                                                  sigma[np.ix_(~np.isnan(row), ~np.isnan(row))])
                 for row in y)
    k_total = np.sum(~np.isnan(y))
    assert value * len(y) == pytest.approx(-2 * loglik - k_total * np.log(2 * np.pi),
                                           rel=1e-10)
    step = np.zeros((t, t))
    step[1, 3] = step[3, 1] = 1e-6
    numeric = (lik.value_grad(sigma + step)[0] - lik.value_grad(sigma - step)[0]) / 2e-6
    assert numeric == pytest.approx(2 * grad[1, 3], rel=1e-5)


def test_saturated_likelihood_is_at_the_em_moments():
    """The EM moments (the saturated ML under MAR) minimise the full-information
    discrepancy: any other covariance gives a larger value (simulation, known truth)."""
    rng = np.random.default_rng(6)
    y = rng.multivariate_normal(np.zeros(4), np.eye(4) + 0.5, size=300)
    y[rng.random(y.shape) < 0.15] = np.nan
    patterns = _patterns(y)
    em = em_moments(patterns)
    lik = st.PatternLikelihood(_groups(patterns, np.ones(4, dtype=bool)), 4)
    best = lik.value_grad(em.covariance)[0]
    for scale in (0.98, 1.02):
        assert lik.value_grad(em.covariance * scale)[0] > best
    assert lik.value_grad(em.covariance + 0.01 * np.eye(4))[0] > best


def test_stable_trait_structure_matches_a_random_intercept_model():
    """statsmodels MixedLM (reference library), random intercept, wave as fixed
    effect, fitted by ML on complete balanced data: its group variance and residual
    variance are the stable trait structure's trait and error variances."""
    sm = pytest.importorskip("statsmodels.formula.api")
    import pandas as pd
    rng = np.random.default_rng(7)
    n, t = 150, 4
    y = rng.normal(0, 1.0, (n, 1)) + rng.normal(0, 0.7, (n, t)) + np.arange(t)
    frame = pd.DataFrame({"y": y.ravel(), "unit": np.repeat(np.arange(n), t),
                          "wave": np.tile(np.arange(t), n)})
    ref = sm.mixedlm("y ~ C(wave)", frame, groups=frame["unit"]).fit(reml=False)
    s = np.cov(y.T, bias=True)
    m = st.Moments(y.mean(axis=0), s, np.arange(float(t)), st.CovarianceLikelihood(s),
                   float(n), float(n))
    fit = m.fit(structure("stable_trait", (Trait(), Error("equal"))))
    assert fit.params["trait_var"] == pytest.approx(float(ref.cov_re.iloc[0, 0]), rel=1e-4)
    assert fit.params["error_var"] == pytest.approx(float(ref.scale), rel=1e-4)


def test_quasi_simplex_implies_the_simulated_covariance_and_is_recovered():
    """Simulation from a quasi-simplex with known coefficients, innovation variances
    and error (Joreskog 1970): the implied covariance equals the sample covariance of
    200,000 units within sampling error, and a fit to 20,000 units recovers the
    coefficients."""
    rng = np.random.default_rng(8)
    beta = np.array([0.9, 1.1, 0.8, 1.2])
    innov = np.array([1.0, 0.3, 0.5, 0.2, 0.6])
    error = 0.4
    t = 5

    def draw(n):
        eta = np.empty((n, t))
        eta[:, 0] = rng.normal(0, np.sqrt(innov[0]), n)
        for w in range(1, t):
            eta[:, w] = beta[w - 1] * eta[:, w - 1] + rng.normal(0, np.sqrt(innov[w]), n)
        return eta + rng.normal(0, np.sqrt(error), (n, t))

    spec = structure("autoregressive", (QuasiSimplex(), Error("equal")))
    theta = np.concatenate([innov, beta, [error]])
    times = np.arange(float(t))
    implied = st.implied(spec, theta, times)
    big = draw(200_000)
    se = np.sqrt((np.outer(np.diag(implied), np.diag(implied)) + implied ** 2) / 200_000)
    assert np.all(np.abs(np.cov(big.T) - implied) < 5 * se)
    y = draw(20_000)
    s = np.cov(y.T, bias=True)
    m = st.Moments(y.mean(axis=0), s, times, st.CovarianceLikelihood(s), 20_000.0, 20_000.0)
    fit = m.fit(spec)
    got = [fit.params[f"coefficient_{w + 1}"] for w in range(1, t)]
    np.testing.assert_allclose(got, beta, atol=0.08)


def test_part_gradients_agree_with_central_differences():
    """Every specification the verdicts fit: analytic gradient of the discrepancy
    against a central difference (the structures' derivatives, checked numerically)."""
    rng = np.random.default_rng(9)
    times = np.array([0.0, 1.0, 2.0, 4.0, 5.0, 6.0])
    a = rng.normal(size=(6, 6))
    s = a @ a.T / 6 + np.eye(6)
    lik = st.CovarianceLikelihood(s)
    mean_shape = np.array([0.0, 0.1, 0.5, 0.8, 0.95, 1.0])
    for specs in family_specs(times, mean_shape).values():
        for spec in specs:
            start = spec.starts(Scale.of(s))[0]
            theta = start * (1 + 0.05 * rng.normal(size=len(start)))
            fn = st._objective(lik, spec, times)
            _, grad = fn(theta)
            numeric = [(fn(theta + h)[0] - fn(theta - h)[0]) / 2e-6
                       for h in np.eye(len(theta)) * 1e-6]
            # tolerance: a central difference with step 1e-6 is good to about 1e-6
            np.testing.assert_allclose(grad, numeric, rtol=1e-4, atol=1e-6,
                                       err_msg=spec.label)


def test_identification_of_the_quasi_simplex_error_variances():
    """Joreskog (1970): with an error variance per wave, the quasi-simplex leaves the
    first and last error variances unidentified; tying them to their neighbours (or one
    error variance for all waves) identifies it from four waves."""
    times = np.arange(6.0)
    scale = Scale.of(np.eye(6) + 0.5)
    assert not structure("x", (QuasiSimplex(), Error("wave"))).identified(scale, times)
    assert structure("x", (QuasiSimplex(), Error("tied_ends"))).identified(scale, times)
    assert structure("x", (QuasiSimplex(), Error("equal"))).identified(scale, times)
    # a trait next to a random intercept: the two cannot be told apart
    lin = Growth(basis=tuple(np.linspace(0, 1, 6)))
    assert not structure("x", (Trait(), lin, Error("equal"))).identified(scale, times)


def test_nesting_of_specifications():
    """Which structure is a special case of which: the relation the part tests and the
    BIC comparison rely on."""
    lin = Growth(basis=(0.0, 0.5, 1.0))
    cases = [((Trait(), Error("equal")), (Trait(), Carry(), Error("wave")), True),
             ((Carry(), Error("equal")), (lin, Carry(), Error("equal")), True),
             ((Trait(), Carry(), Error("equal")), (lin, Carry(), Error("equal")), True),
             ((QuasiSimplex(), Error("equal")), (lin, Carry(), Error("equal")), False),
             ((Error("wave"),), (Trait(), Error("equal")), False),
             ((lin, Error("equal")), (Growth(basis=(0.0, 0.5, 1.0), order=2),
                                      Error("equal")), True)]
    for simple, rich, nested in cases:
        assert verdicts.covers(structure("r", rich), structure("s", simple)) is nested


def test_rmsea_interval_inverts_the_noncentral_chi_square():
    """scipy.stats.ncx2 (reference library): at the interval's noncentralities the
    observed chi-square sits at the 95th and 5th percentiles (Browne and Cudeck 1992)."""
    chi2, df, n = 85.0, 30, 400.0
    point, (low, high) = st.rmsea_interval(chi2, df, n)
    assert point == pytest.approx(np.sqrt((chi2 - df) / (df * (n - 1))))
    for bound, level in ((low, 0.95), (high, 0.05)):
        lam = bound ** 2 * df * (n - 1)
        assert stats.ncx2.cdf(chi2, df, lam) == pytest.approx(level, abs=1e-6)
    assert st.rmsea_interval(10.0, 30, n)[1][0] == 0.0   # chi-square below df


def test_swain_correction_vanishes_with_many_units():
    """Swain's factor tends to 1 as N grows and shrinks the chi-square at small N
    (Herzog and Boomsma 2009, from memory: below 1 for N near the number of
    moments)."""
    assert st.swain_factor(1e7, 10, 40) == pytest.approx(1.0, abs=1e-5)
    assert 0.5 < st.swain_factor(30, 10, 40) < 1.0
    assert st.swain_factor(30, 10, 40) < st.swain_factor(100, 10, 40)


def test_scaled_difference_test_recovers_the_elliptical_kurtosis():
    """Browne (1984): under an elliptical distribution every normal-theory likelihood
    ratio is inflated by 1 + kappa, which is 3 for the multivariate t with 5 df
    (kappa = 2 / (nu - 4)). The scaling from 20 delete-a-group copies of the sample
    covariance averages near 3 on multivariate-t panels and near 1 on normal ones
    (simulation, known truth)."""
    t, n, groups = 5, 2000, 20
    times = np.arange(float(t))
    sigma = 0.5 + 0.5 * 0.6 ** np.abs(times[:, None] - times[None, :])
    simple = structure("autoregressive", (Carry(), Error("equal")))
    rich = structure("trait_autoregressive", (Trait(), Carry(), Error("equal")))
    found = {}
    for kind in ("normal", "t5"):
        rng = np.random.default_rng(21)
        values = []
        for _ in range(12):  # a loop over panels
            z = rng.multivariate_normal(np.zeros(t), sigma, size=n)
            if kind == "t5":
                z = z / np.sqrt(rng.chisquare(5, (n, 1)) / 5) * np.sqrt(3 / 5)
            s = np.cov(z.T, bias=True)
            label = np.arange(n) % groups
            copies = np.array([np.cov(z[label != g].T, bias=True) for g in range(groups)])
            m = st.Moments(z.mean(axis=0), s, times, st.CovarianceLikelihood(s), float(n),
                           float(n), copies=copies)
            values.append(st.scaling(m.fit(simple), m.fit(rich), m))
        found[kind] = np.mean(values)
    assert found["normal"] < 1.5
    assert 2.2 < found["t5"] < 3.8, found


def test_latent_scale_recovers_known_means_and_spreads():
    """Exact margins of a normal variable with known mean and SD per wave, cut at the
    same thresholds at every wave (Mehta, Neale and Flay 2004): the latent means and SDs
    come back, wave 1 standardised; two categories cannot fix the scale."""
    tau = np.array([-1.2, -0.4, 0.3, 1.1])
    mu = np.array([0.0, 0.4, 0.7, 1.2])
    sd = np.array([1.0, 1.3, 1.5, 1.8])
    cdf = stats.norm.cdf((tau[None, :] - mu[:, None]) / sd[:, None])
    cdf = np.column_stack([np.zeros(4), cdf, np.ones(4)])
    got = latent_scale(np.diff(cdf, axis=1) * 1e6)
    # exact margins: the maximum of the likelihood is the truth, found to rounding
    np.testing.assert_allclose(got[0], mu, atol=1e-9)
    np.testing.assert_allclose(got[1], sd, atol=1e-9)
    assert latent_scale(np.array([[30, 70], [40, 60]])) is None


def test_latent_scale_does_not_follow_the_order_of_the_sums():
    """Category counts of a simulated five-point measure at eight waves (weighted, so
    the counts are sums of fractions), summed in two orders: the margins differ in their
    last bits, and the latent means and SDs agree to 1e-12 (an optimiser stopping short
    of the maximum would leave them apart by about 1e-8)."""
    rng = np.random.default_rng(7)
    units, waves = 2000, 8
    score = rng.normal(size=(units, 1)) + rng.normal(size=(units, waves)) + \
        np.linspace(0, 0.8, waves)
    category = np.digitize(score, [-1.5, -0.5, 0.5, 1.5])
    weight = rng.uniform(0.2, 3.0, size=units)
    onehot = (category[:, :, None] == np.arange(5)) * weight[:, None, None]
    forward = np.zeros((waves, 5))
    for row in onehot:     # a loop over units: one order of the sums
        forward += row
    backward = np.zeros((waves, 5))
    for row in onehot[::-1]:
        backward += row
    assert not np.array_equal(forward, backward)
    (mu_f, sd_f), (mu_b, sd_b) = latent_scale(forward), latent_scale(backward)
    np.testing.assert_allclose(mu_f, mu_b, rtol=0, atol=1e-12)
    np.testing.assert_allclose(sd_f, sd_b, rtol=0, atol=1e-12)


def test_mean_terms_are_calibrated_under_a_flat_mean():
    """Simulation with a flat mean (known truth): the Wald statistic of the flat shape
    averages its degrees of freedom, T - 1, and a linear mean makes the flat shape's
    statistic large while the linear one stays small."""
    rng = np.random.default_rng(12)
    t, n = 5, 500
    times = np.arange(float(t))
    cov = np.eye(t) + 0.5
    flat = []
    for _ in range(200):  # a loop over panels
        y = rng.multivariate_normal(np.zeros(t), cov, size=n)
        terms = st.mean_terms(y.mean(axis=0), np.cov(y.T, bias=True), np.full((t, t), n),
                              times)
        flat.append(terms["flat"][0])
    assert np.mean(flat) == pytest.approx(t - 1, rel=0.15)
    y = rng.multivariate_normal(0.3 * times, cov, size=n)
    terms = st.mean_terms(y.mean(axis=0), np.cov(y.T, bias=True), np.full((t, t), n), times)
    assert terms["flat"][0] > 100 and terms["linear"][0] < 20
