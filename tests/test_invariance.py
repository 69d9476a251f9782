"""Invariances of the screen: what must not change the report, and what must change it
exactly as the algebra says. Properties of the methods themselves, checked on panels
simulated from processes with known truth (paneldiag.simulate), drawn by hypothesis.

Which figures are invariant to what:
- row order of a long file, the order of wide columns given with their labels, and the
  chunk size: every figure (the panel is the same; summing in other chunks only moves
  the last bits);
- relabelling units, and the number of replicate groups: point estimates, tests that
  do not use the replicate groups, and verdicts. A unit's replicate group comes from a
  hash of its id, so the delete-a-group jackknife figures (standard errors, interval
  ends, and the Wald tests built on jackknife covariances) change with the labels. The
  panels here are continuous: an ordinal measure's part tests are scaled by the
  replicate groups, so its verdicts may move with the labels too;
- a positive affine change of the measure (a * y + b): every figure without a unit
  (correlations, reliabilities, tests, BIC differences, verdicts); means move to
  a * mean + b and SDs to a * SD;
- shifting every wave time by a constant: everything but the wave labels and times.

Tolerance: 1e-10 relative wherever a figure is compared. The screens compared sum the
same values in another order (or scaled by a), which moves a figure by a few units in
the 16th digit, times the condition of the computation (the fits of the verdicts stop
at a relative change of 1e-13); 1e-10 leaves room for that and nothing more. Figures that
are zero in exact arithmetic (a difference of equal correlations, a skewness of symmetric
data) come out as rounding noise of either sign, so a figure is also accepted within
1e-10 of the largest magnitude of its own kind in the report, or of 1; and a p-value
above 0.999 within 1e-6, as its statistic is near 0 where rounding moves p the most;
and the correlation-decay fit's figures within 1e-6, as the minimum over rho it finds is
located only to about the square root of the rounding in its sums of squares, 1e-8
(``_within``).
"""

from __future__ import annotations

import os
import re
from dataclasses import replace

import numpy as np
import pandas as pd
from hypothesis import HealthCheck, Phase, example, given, settings
from hypothesis import strategies as st

from conftest import search_steps

import paneldiag
from paneldiag.simulate import family_values

SCALE = float(os.environ.get("PANELDIAG_FUZZ_SCALE", "1"))
RELATIVE = 1e-10     # see the module docstring
DECAY_FIT = 1e-6     # the correlation-decay fit's figures (``_within``)

# figures that come from the replicate groups (delete-a-group jackknife)
REPLICATE_FIGURES = re.compile(
    r"(ci_low|ci_high|\.se$|_se$|_se\[\d+\]$|\.evidence\[|\.n_replicates$|interval_scale$"
    r"|^\.next_models\[\d+\]\.why$"   # quotes the evidence, jackknife intervals and all
    r"|^\.reliability\.(alternative_)?summary\.method$"   # the interval's scale: the groups decide
    r"|^\.growth\.mean_shape\..*\.(chi_square|pvalue|df)$"
    r"|^\.growth\.variance_trend\.(t|pvalue|df)$|^\.growth\.residual_autocorrelation\.(z|pvalue)$"
    r"|^\.stationarity\.(lag_bands|equal_variances)\.note$"   # joint or Bonferroni: by groups
    r"|^\.stationarity\.(bands\[\d+\]|lag_bands|equal_variances)\.(statistic|p_value|df)"
    r"(\[\d+\])?$)")
OCCUPIED_GROUPS = re.compile(r"over \d+ replicate groups")
# figures cited as printed, to three decimals (the verdicts' statistics, the measurement
# line, the families' scores): at a rounding edge the last shown digit may turn
CITED_FIGURES = re.compile(r"^\.verdict_basis\.statistics\.|^\.measurement\.(estimate|ci_low|"
                           r"ci_high)$|^\.families\[\d+\]\.score$")
NUMBER = re.compile(r"-?\d[\d,]*(?:\.(\d+))?")


def same_text(want: str, got: str) -> bool:
    """The same words, and numbers that differ by at most one unit in their last shown
    decimal (a text quotes the fits' figures, whose last digit may turn: CITED_FIGURES)."""
    want, got = OCCUPIED_GROUPS.sub("", want), OCCUPIED_GROUPS.sub("", got)
    if NUMBER.sub("#", want) != NUMBER.sub("#", got):
        return False
    for a, b in zip(NUMBER.finditer(want), NUMBER.finditer(got)):
        unit = 10.0 ** -len(a.group(1) or "")
        if abs(float(a.group().replace(",", "")) - float(b.group().replace(",", ""))) > \
                unit * (1 + 1e-9):
            return False
    return True
# the other optima of a flat likelihood (weak identification): where a multi-start search
# stopped, shown to 4 decimals, so a last digit may differ between equivalent runs
FLAT_OPTIMA = re.compile(r"\.weak_identification\.(rho|deviance|.*\[\d+\]$)")


def REPLICATE_DEPENDENT(path: str) -> bool:
    return bool(REPLICATE_FIGURES.search(path) or FLAT_OPTIMA.search(path))


# figures in the measure's unit (or its square), which an affine change moves
UNIT_FIGURES = re.compile(
    r"(\.mean_continuing$|\.mean_dropping$|^\.missingness\.em\.(means|covariance|loglik)"
    r"|_variance|\.variances\[|_mean_square$|\.wave_means\[|\.mean_change_per_time$"
    r"|^\.growth\.mean_shape\.(components\[\d+\]|any_change)\.(estimate|se)$"
    r"|^\.growth\.slope_reliability\.pooled_slope$"
    r"|^\.growth\.trajectories\.(mean|sd)_(intercept|slope|curvature)"
    r"|\.parameters\.|^\.wave_profile\[\d+\]\.(mean|sd|min|max)$)")


def fuzz_settings(examples: int):
    return settings(max_examples=max(1, int(examples * SCALE)), deadline=None,
                    derandomize=True, database=None, print_blob=True,
                    suppress_health_check=list(HealthCheck),
                    # each case is several whole screens: a failure is reported as
                    # found, not shrunk (shrinking would take many minutes)
                    phases=[Phase.explicit, Phase.reuse, Phase.generate])


def flat(value, path: str = "", out: dict | None = None) -> dict:
    """Every leaf of a JSON report by its path (.key[index]...)."""
    out = {} if out is None else out
    if isinstance(value, dict):
        for key, item in value.items():
            flat(item, f"{path}.{key}", out)
    elif isinstance(value, list):
        for i, item in enumerate(value):
            flat(item, f"{path}[{i}]", out)
    else:
        out[path] = value
    return out


def _kind(path: str) -> str:
    return re.sub(r"\[\d+\]", "[]", path)


P_NEAR_ONE, P_NEAR_ONE_TOLERANCE = 0.999, 1e-6


def _within(x, y, scale: float, path: str = "") -> bool:
    # a p-value near 1 comes from a statistic near 0, where p's slope is unbounded (for
    # F or chi-square on 1 df, 1 - p grows as the statistic's square root): rounding
    # noise of 1e-16 in the statistic moves p by up to 1e-8
    if re.search(r"p_?value$", path) and min(x, y) > P_NEAR_ONE:
        return abs(x - y) <= P_NEAR_ONE_TOLERANCE
    # the correlation-decay fit minimises its sum of squares over rho: a minimum is
    # located only to about the square root of the rounding in the values (1e-8)
    tolerance = DECAY_FIT if path.startswith(".decay_fit.") else RELATIVE
    # the specification table shows its fits to 4 significant decimals, from optimiser end
    # points that agree to about 1e-6: a last shown digit may turn either way
    if path.startswith(".verdict_basis.specifications."):
        return abs(x - y) <= 1.5e-4 * max(abs(x), abs(y), 1.0)
    # figures cited to three decimals: one unit of the last shown digit, at a rounding
    # edge (the fits' end points along a weakly identified direction agree to about 1e-6
    # relative, the rest to 1e-10)
    if CITED_FIGURES.search(path):
        return abs(x - y) <= 1e-3 * (1 + 1e-9)
    # units for a power of 0.9: N times a ratio of noncentralities (each a fit's minimum
    # found to a change of 1e-7 in chi-square), rounded up to three significant figures;
    # at a ratio's rounding edge the last shown figure may turn
    if path.endswith(".units_for_power_90"):
        return abs(x - y) <= 10 ** max(len(str(int(max(x, y)))) - 3, 0)
    # relative, and absolute below 1: a figure that is a difference of O(1) figures
    # (the simulated measures are O(1)) carries their absolute rounding, 1e-16
    return abs(x - y) <= tolerance * max(abs(x), abs(y), scale, 1.0)


def _withheld_in(path: str, other: dict) -> bool:
    """Whether a parent of ``path`` is a null leaf of the other report: a figure shown or
    withheld by its replicate interval (a share not estimable when the interval spans its
    range), which the replicate groups decide."""
    return any(other.get(path[:m.start()], 0) is None
               for m in re.finditer(r"[.\[]", path) if m.start() > 0)


def assert_same(a: dict, b: dict, skip=None, expected=None, withheld_ok=False) -> int:
    """Every figure of report ``a`` equals ``b``'s (to RELATIVE), but the input record
    and the paths for which ``skip(path)`` is true; ``expected(path, value)`` maps a figure of ``a`` to
    what ``b`` must show (default: the same). Returns the number of figures compared."""
    fa, fb = flat(a), flat(b)
    left_out = (lambda p: p.startswith(".input") or bool(skip and skip(p)))
    # the structures' parameters are an optimiser's end point: along a flat direction
    # (random curvature, factor loadings) it follows the order of the sums, which the
    # unit order sets; their fit statistics are compared
    left_out = (lambda p, base=left_out: base(p) or ".parameters." in p or search_steps(p))
    if withheld_ok:
        left_out = (lambda p, base=left_out: base(p) or _withheld_in(p, fa)
                    or _withheld_in(p, fb) or fa.get(p, 0) is None or fb.get(p, 0) is None)
    keep = [p for p in fa if not left_out(p)]
    assert set(keep) == {p for p in fb if not left_out(p)}
    scales: dict[str, float] = {}
    for p in keep:
        for v in (fa[p], fb[p]):
            if isinstance(v, float):
                scales[_kind(p)] = max(scales.get(_kind(p), 0.0), abs(v))
    for p in keep:
        want = expected(p, fa[p]) if expected else fa[p]
        got = fb[p]
        counted = isinstance(want, int) and p.endswith(".units_for_power_90")
        if (isinstance(want, float) or counted) and isinstance(got, (float, int)) \
                and not isinstance(got, bool):
            assert _within(want, got, scales.get(_kind(p), 0.0), p), (p, want, got)
        elif isinstance(want, str) and isinstance(got, str):
            # the jackknife runs over the occupied replicate groups, whose number follows
            # the ids' hash: a text naming it may differ, nothing else in it
            assert same_text(want, got), (p, want, got)
        else:
            assert want == got, (p, want, got)
    return len(keep)


@st.composite
def simulated(draw, max_units: int = 160):
    """A continuous panel from one of the simulator's families, complete or with
    dropout (completely at random, or dependent on the measure), as a wide DataFrame
    with household ids."""
    family = draw(st.sampled_from(["stable_trait", "autoregressive", "trait_autoregressive",
                                   "linear_growth", "occasion_noise"]))
    n = draw(st.integers(40, max_units))
    t = draw(st.integers(3, 7))
    missing = draw(st.sampled_from(["none", "mcar", "dependent"]))
    seed = draw(st.integers(0, 2**32 - 1))
    values = family_values(family, n, t, 0.8, missing, np.random.default_rng(seed), "none")
    frame = pd.DataFrame(values, columns=[f"y{w + 1}" for w in range(values.shape[1])])
    frame.insert(0, "household", [f"H{i:04d}" for i in range(n)])
    return frame


def report_of(frame: pd.DataFrame, **options) -> dict:
    waves = [c for c in frame.columns if c != "household"]
    return paneldiag.screen(frame, id="household", wide={"satisfaction": waves},
                            ordinal=False, **options).to_dict()


def long_of(frame: pd.DataFrame) -> pd.DataFrame:
    long = frame.melt(id_vars="household", var_name="year", value_name="satisfaction")
    return long.assign(year=long["year"].str[1:].astype(int) + 2010).dropna()


def long_report(long: pd.DataFrame, **options) -> dict:
    return paneldiag.screen(long, id="household", wave="year", value="satisfaction",
                            ordinal=False, **options).to_dict()


@fuzz_settings(3)
@given(frame=simulated(), seed=st.integers(0, 2**32 - 1))
def test_row_order_changes_nothing(frame, seed):
    long = long_of(frame)
    shuffled = long.sample(frac=1.0, random_state=np.random.RandomState(seed % 2**32))
    assert assert_same(long_report(long), long_report(shuffled)) > 100


@fuzz_settings(3)
@given(frame=simulated(), seed=st.integers(0, 2**32 - 1))
def test_relabelling_units_keeps_point_estimates_and_verdicts(frame, seed):
    rng = np.random.default_rng(seed)
    relabelled = frame.assign(household=[f"tenant-{k}" for k in rng.permutation(len(frame))])
    a, b = report_of(frame), report_of(relabelled)
    assert assert_same(a, b, skip=REPLICATE_DEPENDENT, withheld_ok=True) > 100
    assert [f["verdict"] for f in a["families"]] == [f["verdict"] for f in b["families"]]


@fuzz_settings(3)
@given(frame=simulated(), seed=st.integers(0, 2**32 - 1))
def test_wide_column_order_with_labels_changes_nothing(frame, seed):
    waves = [c for c in frame.columns if c != "household"]
    order = list(np.random.default_rng(seed).permutation(len(waves)))
    given_order = [waves[i] for i in order]
    a = paneldiag.screen(frame, id="household", wide={"satisfaction": waves},
                         wave_labels=[w[1:] for w in waves], ordinal=False).to_dict()
    b = paneldiag.screen(frame, id="household", wide={"satisfaction": given_order},
                         wave_labels=[w[1:] for w in given_order], ordinal=False).to_dict()
    assert assert_same(a, b) > 100


def panel_of(family: str, n: int, t: int, missing: str, seed: int) -> pd.DataFrame:
    """A panel as ``simulated`` draws it, for the examples found by earlier runs."""
    values = family_values(family, n, t, 0.8, missing, np.random.default_rng(seed), "none")
    frame = pd.DataFrame(values, columns=[f"y{w + 1}" for w in range(t)])
    return frame.assign(household=[f"H{i:04d}" for i in range(n)])


@fuzz_settings(3)
@given(frame=simulated(), chunk=st.integers(1, 60))
# found: the trait + quasi-simplex fit stopped where the last bits of the sums put it
# (chi-square 5.21 or 4.62 by chunk size), and growth + carry-over ended anywhere on the
# face where carry-over is no carry-over (rho 0 with b 0.09, or b 0 with rho 0.41)
@example(frame=panel_of("occasion_noise", 117, 5, "none", 1322117304), chunk=3)
@example(frame=panel_of("occasion_noise", 117, 5, "none", 1322117304), chunk=20)
def test_chunk_size_changes_nothing(frame, chunk):
    # the figures agree to rounding, not bit for bit: the summaries of each chunk are
    # summed (or merged by Chan, Golub and LeVeque's update) in another order
    a = report_of(frame)
    b = report_of(frame, chunk_units=chunk)
    assert a["input"] == b["input"]     # the chunk size is not an option of the result
    assert assert_same(a, b) > 100


@fuzz_settings(2)
@given(frame=simulated(), groups=st.sampled_from([5, 11, 40]))
def test_replicate_group_count_keeps_point_estimates(frame, groups):
    from paneldiag.io.validate import build_panel
    from paneldiag.pipeline import ScreenOptions, screen
    from paneldiag.request import ScreenRequest, frame_table
    waves = [c for c in frame.columns if c != "household"]
    request = ScreenRequest(id=("household",), wide=(f"y={','.join(waves)}",), ordinal=False)
    spec = request.layout()
    panel, ledgers = build_panel(frame_table(frame, spec.columns()), spec)
    options = ScreenOptions(scale="continuous")
    a = screen(panel, ledgers, {}, options)
    b = screen(panel, ledgers, {}, replace(options, n_replicates=groups))
    count = f" {options.n_replicates} replicate groups"

    def expected(path, value):   # the words that name the count follow it
        return value.replace(count, f" {groups} replicate groups") \
            if isinstance(value, str) else value
    assert assert_same(a, b, skip=REPLICATE_DEPENDENT, expected=expected,
                       withheld_ok=True) > 100


def _affine(scale: float, shift: float):
    """What a figure of the report on y shows on scale * y + shift."""
    def expected(path: str, value):
        if not isinstance(value, float):
            return value
        if re.search(r"^\.wave_profile\[\d+\]\.(mean|min|max)$", path):
            return scale * value + shift
        if path.endswith(".sd"):
            return scale * value
        return value
    return expected


MOVED = re.compile(r"^\.wave_profile\[\d+\]\.(mean|sd|min|max)$")


@fuzz_settings(4)
@given(frame=simulated(), log_scale=st.floats(-60, 60), shift=st.floats(-1e4, 1e4))
# found: the fits' optimiser took sizes and a ridge in the unit of the measure, so the
# verdicts changed with it (a measure in millionths, or millions, of the unit here)
@example(frame=pd.DataFrame(family_values("trait_autoregressive", 300, 5, 0.8, "mcar",
                                          np.random.default_rng(4), "none"),
                            columns=[f"y{w + 1}" for w in range(5)])
         .assign(household=[f"H{i:04d}" for i in range(300)]),
         log_scale=6.0, shift=0.0)
@example(frame=pd.DataFrame(family_values("trait_autoregressive", 300, 5, 0.8, "mcar",
                                          np.random.default_rng(4), "none"),
                            columns=[f"y{w + 1}" for w in range(5)])
         .assign(household=[f"H{i:04d}" for i in range(300)]),
         log_scale=-6.0, shift=0.0)
# found: the delta method through a nearly singular growth factor lost its cancellations
# to rounding (the slopes' share interval ended at 1.0 or at 0.39 by the measure's unit)
@example(frame=panel_of("autoregressive", 116, 7, "dependent", 3727568734),
         log_scale=float(np.log10(0.05006082436335134)), shift=-6254.95)
def test_affine_change_of_the_measure(frame, log_scale, shift):
    # the shift in units of the new scale (a shift of 1e4 on values of 1e-60 would leave
    # nothing of them in double precision)
    scale = 10.0 ** log_scale
    shift = shift * scale
    waves = [c for c in frame.columns if c != "household"]
    changed = frame.copy()
    changed[waves] = scale * frame[waves] + shift
    a, b = report_of(frame), report_of(changed)
    # unit-free figures unchanged; means and SDs of the waves moved exactly as they must
    in_units = (lambda p: bool(UNIT_FIGURES.search(p)) and not MOVED.search(p)
                or bool(FLAT_OPTIMA.search(p)))
    assert assert_same(a, b, skip=in_units, expected=_affine(scale, shift)) > 100
    assert [f["verdict"] for f in a["families"]] == [f["verdict"] for f in b["families"]]
    assert [f["bic_difference"] for f in a["families"]] == \
        [f["bic_difference"] for f in b["families"]]


def _shifted_labels(shift: int):
    def expected(path: str, value):
        if re.search(r"^\.panel\.times\[\d+\]$|\.time_centre$", path):   # times
            return value + shift
        if isinstance(value, str) and re.fullmatch(r"\d{4}", value):
            return str(int(value) + shift)
        return value
    return expected


@fuzz_settings(3)
@given(frame=simulated(), shift=st.integers(-200, 180))
def test_shifting_wave_times_changes_only_labels(frame, shift):
    # the years stay within 1800-2200, the whole numbers read as years: the time unit
    # named in the report is a label too
    long = long_of(frame)
    a = long_report(long)
    b = long_report(long.assign(year=long["year"] + shift))
    texts = re.compile(r"(\.evidence\[|\.caveats\[|\.why$|\.note$|\.advice$|\.description$"
                       r"|\.legend$|\.pattern$|\.notes\[|\.problems\[)")
    assert assert_same(a, b, skip=texts.search, expected=_shifted_labels(shift)) > 100
