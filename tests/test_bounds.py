"""Impossible values and intervals of bounded figures: flagged where they appear, never
shown as ordinary figures; intervals of shares on the logit scale."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from conftest import run_cli
from paneldiag.diagnostics import growth
from paneldiag.panel import Panel
from paneldiag.render import bounds
from paneldiag.render.appendix import build
from paneldiag.render.document import to_markdown
from paneldiag.summaries import summarise
from paneldiag.summaries.jackknife import jackknife_ci, jackknife_ci_bounded
from paneldiag.summaries.trajectories import TrajectorySummary


@pytest.fixture(scope="module")
def shapes(tmp_path_factory):
    """Three measures of our own making (simulations with known truth), screened once:
    ``fast``: correlations that fall faster with distance than a lag-1 simplex allows
    (r = 0.7, 0.35, 0.2, 0.15 at lags 1-4: the median Heise triplet is 1.225);
    ``skewed``: lognormal scores (skewness about 4 and more at every wave);
    ``tails``: a trait plus Student t(3) noise, and one unit 40 units off at the
    third wave."""
    tmp = tmp_path_factory.mktemp("shapes")
    rng = np.random.default_rng(5)
    n, t = 400, 5
    r = np.array([1, 0.7, 0.35, 0.2, 0.15])
    fast = rng.multivariate_normal(np.zeros(t), r[np.abs(np.subtract.outer(
        np.arange(t), np.arange(t)))], n)
    trait = rng.normal(size=(n, 1))
    skewed = np.exp(0.6 * trait + 0.6 * rng.normal(size=(n, t)))
    tails = trait + rng.standard_t(3, size=(n, t))
    tails[7, 2] = 40.0
    unit, wave = np.meshgrid(np.arange(n), np.arange(t), indexing="ij")
    path = tmp / "shapes.csv"
    pd.DataFrame({"unit": unit.ravel(), "wave": wave.ravel() + 2020, "fast": fast.ravel(),
                  "skewed": skewed.ravel(), "tails": tails.ravel()}).to_csv(path, index=False)
    done = run_cli("screen", path, "--id", "unit", "--wave", "wave", "--value", "fast",
                   "--value", "skewed", "--value", "tails", "--json", tmp / "r.json")
    assert done.returncode == 0, done.stderr.decode()
    blocks = done.stdout.decode().split("▸ ═══ ")
    text = {b.split("\n", 1)[0]: b for b in blocks[1:]}
    report = json.loads((tmp / "r.json").read_text())
    return text, report, to_markdown(build(report, {})[0])   # the appendix, without figures


def test_heise_above_one_is_flagged_with_its_reason(shapes):
    """Simulation with known truth: the population Heise value of every triplet is
    r_st r_tu / r_su: 1.4 (three triplets), 1.225 (four), 0.93 (two), 0.82 (one), so the
    population median is 1.225."""
    text, report, appendix = shapes
    summary = report["measures"]["fast"]["reliability"]["summary"]
    assert summary["estimate"] > 1 and summary["interval_scale"] == "linear"
    shown = f"{summary['estimate']:.2f}"
    assert (f"Heise test-retest reliability (median of triplets) {shown}, impossible "
            "(above 1: the simplex assumption fails") in text["fast"]
    assert f"(median of triplets) {shown} [" not in text["fast"]   # never a plain figure
    assert f"was {shown}, an impossible value (above 1: the simplex assumption fails" \
        in appendix


def test_a_negative_slope_reliability_is_flagged(shapes):
    text, report, _ = shapes
    rel = report["measures"]["tails"]["growth"]["slope_reliability"]
    assert rel["estimate"] < 0 and rel["impossible"]
    shown = f"{rel['estimate']:.2f}"
    assert f"slope reliability of per-unit lines {shown}, impossible (below 0" in text["tails"]
    assert f"slope reliability of per-unit lines {shown} [" not in text["tails"]


def test_distribution_caveats_name_their_waves_in_the_key_figures(shapes):
    """Lognormal scores (skewness well above 2 at every wave) and t(3) scores with one
    unit 40 off at the third wave (2022): the caveats name the waves and what they do
    to the verdicts; the normal-looking ``fast`` measure gets none."""
    text, report, appendix = shapes
    skewed = report["measures"]["skewed"]["distribution"]
    assert skewed["skewed"] == ["2020", "2021", "2022", "2023", "2024"]
    assert "distribution caveat: Strong skew at wave(s) 2020, 2021, 2022 and 2 more" \
        in text["skewed"]
    assert "kurtosis scaling of the tests does not correct it" in text["skewed"]
    tails = report["measures"]["tails"]["distribution"]
    assert "2022" in tails["outlying"] and "2022" in tails["heavy_tailed"]
    assert "distribution caveat: Heavy tails at wave(s)" in text["tails"]
    assert "the tests and BIC are scaled for kurtosis" in text["tails"]
    assert "distribution caveat: An outlying unit at wave(s)" in text["tails"]
    assert "SDs from the wave mean at 2022" in text["tails"]
    assert "distribution caveat" not in text["fast"]
    assert "An outlying unit at wave(s)" in appendix and "Strong skew at wave(s)" in appendix


def test_an_icc_interval_that_would_cross_one_stays_inside():
    """Simulation with known truth (20 units, 3 waves, ICC 1 / 1.04 = 0.96): the plain
    jackknife interval of the ICC crosses 1; the logit-scale one stays inside 0-1 and
    is what the report shows."""
    rng = np.random.default_rng(3)
    y = rng.normal(0, 1, (20, 1)) + rng.normal(0, 0.2, (20, 3))
    panel = Panel(unit_ids=np.arange(20), wave_labels=("1", "2", "3"),
                  wave_times=np.arange(3.0), values={"y": y})
    summary = summarise(panel, "y", [TrajectorySummary])[TrajectorySummary]
    pooled, parts, design = growth.prepare(summary)
    point = growth._icc_point(pooled, design)["icc"]
    reps = [growth._icc_point(p, design)["icc"] for p in parts]
    assert jackknife_ci(point, reps)[1] > 1          # the linear interval crosses 1
    icc = growth.intraclass_correlation(summary)
    assert icc.interval_scale == "logit" and 0 < icc.ci_low < icc.estimate < icc.ci_high < 1


def test_the_logit_interval_maps_back_inside_the_bounds():
    """Against the hand computation: logit(p) +- t_{K-1} se on the logit scale
    (t quantile from scipy.stats.t.ppf, reference library)."""
    from scipy import stats
    reps = np.array([0.90, 0.95, 0.97, 0.99, 0.92, 0.96])
    lo, hi, scale = jackknife_ci_bounded(0.95, reps)
    z = np.log(reps / (1 - reps))
    se = np.sqrt(5 / 6 * ((z - z.mean()) ** 2).sum())
    centre = np.log(0.95 / 0.05)
    q = stats.t.ppf(0.975, 5)
    assert scale == "logit"
    assert lo == pytest.approx(1 / (1 + np.exp(-(centre - q * se))))
    assert hi == pytest.approx(1 / (1 + np.exp(-(centre + q * se))))
    # correlations: the (-1, 1) range is Fisher's z
    lo, hi, _ = jackknife_ci_bounded(0.5, np.array([0.4, 0.6, 0.5, 0.55]), low=-1, high=1)
    zr = np.arctanh([0.4, 0.6, 0.5, 0.55])
    se = np.sqrt(3 / 4 * ((zr - zr.mean()) ** 2).sum())
    assert hi == pytest.approx(np.tanh(np.arctanh(0.5) + stats.t.ppf(0.975, 3) * se))
    # a replicate on the bound: the plain interval, marked linear
    assert jackknife_ci_bounded(0.9, np.array([1.0, 0.8, 0.9]))[2] == "linear"


@pytest.mark.parametrize("est, lo, hi, expected, words", [
    (1.04, 0.98, 1.10, "impossible", "1.04, impossible (above 1"),
    (-0.12, -0.3, 0.1, "impossible", "-0.12, impossible (below 0"),
    (0.0, 0.0, 1.0, "uninformative", "0.00, not estimable here (interval 0 to 1)"),
    (0.49, 0.49, 0.49, "degenerate", "0.49, at the boundary (an interval of zero width)"),
    (0.0, 0.0, 0.12, "at_bound", "0.00 at the boundary [0.00, 0.12]"),
    (0.79, 0.42, 1.16, "truncated", "0.79 [0.42, 1.16] (interval cut at the bound)"),
    (0.47, 0.42, 0.51, "ok", "0.47 [0.42, 0.51]"),
])
def test_each_kind_of_bounded_value_reads_as_what_it_is(est, lo, hi, expected, words):
    """The cases of issue 13 (values of our own making)."""
    assert bounds.status(est, lo, hi) == expected
    assert bounds.text(est, lo, hi).startswith(words)


def test_the_demo_share_at_its_boundary_reads_as_not_estimable(tmp_path):
    """A stable share whose interval spans 0 to 1 is not shown as an ordinary figure."""
    report = {"families": [{"family": "trait_autoregressive", "verdict": "plausible",
                            "bic_difference": 0, "bic_weight": 1.0}],
              "verdict_basis": {"statistics": {"stable_share": {
                  "estimate": 0.0, "ci_low": 0.0, "ci_high": 1.0}}}}
    from paneldiag.render.text_verdicts import verdicts_block
    text = "\n".join(verdicts_block(report, False))
    assert "stable share (trait + carry-over fit) 0.00, not estimable here" in text
    assert "0.00 [0.00, 1.00]" not in text


def test_evidence_sentences_do_not_cite_an_uninformative_interval_as_a_figure():
    """The verdicts' cited estimates (values of our own making): a share clipped to
    [0, 1] and a zero-width interval read as such; the stored statistic is unchanged."""
    from paneldiag.rules.thresholds import default_thresholds
    from paneldiag.rules.verdicts import Citations
    led = Citations(default_thresholds())
    assert led.estimate("stable_share", 0.0, 0.0, 1.0) == \
        "0.000, not estimable here (95% CI spans 0 to 1)"
    assert led.estimate("slope_share", 0.0, 0.0, 0.0) == \
        "0.000, at the boundary (an interval of zero width)"
    assert led.estimate("carry_rho", 0.71, 0.64, 0.78) == "0.710 [95% CI 0.640, 0.780]"
    assert led.stats["stable_share"] == {"estimate": 0.0, "ci_low": 0.0, "ci_high": 1.0}
