"""By-group screens: the per-measure screen run on each group's units, and a comparison
of key figures across groups with tests of equality.

Each group's report comes from the same sections as the whole panel's, run on
``Panel.subset_units(mask)``; nothing is computed twice in a different way. Groups with
fewer units than the minimum cell size are not reported at all (disclosure control);
only how many were left out is said.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np

from paneldiag import distributions as dist
from paneldiag.diagnostics.attrition import end_of_follow_up, follow_up_span
from paneldiag.diagnostics.crosslag import lag_correlations
from paneldiag.results import Result, plain
from paneldiag.summaries.pairwise import PairwiseMoments

LEVEL = 0.95


@dataclass(frozen=True)
class EqualityTest(Result):
    statistic: float
    df: int
    pvalue: float
    method: str


def homogeneity_test(estimates, se) -> EqualityTest:
    """Chi-square test that independent estimates share one value (Cochran 1954,
    Biometrics 10:101-129): Q = sum w_g (theta_g - theta_w)^2 with w_g = 1 / se_g^2 and
    theta_w the inverse-variance weighted mean; Q ~ chi-square(G - 1) under equality.
    For Fisher-z correlations with se = 1 / sqrt(n - 3) this is the classical test of
    equal correlations in independent samples (Hedges and Olkin 1985, Statistical
    Methods for Meta-Analysis, ch. 11; Snedecor and Cochran 1989, sec. 10.7). Groups
    with an undefined or zero SE are left out.
    """
    est, se = np.asarray(estimates, dtype=float), np.asarray(se, dtype=float)
    keep = np.isfinite(est) & np.isfinite(se) & (se > 0)
    if keep.sum() < 2:
        return EqualityTest(np.nan, 0, np.nan, "Cochran's Q")
    w = 1.0 / se[keep] ** 2
    centre = np.dot(w, est[keep]) / w.sum()
    q = float(np.dot(w, (est[keep] - centre) ** 2))
    df = int(keep.sum() - 1)
    return EqualityTest(q, df, float(dist.chi2_sf(q, df)), "Cochran's Q")


def fisher_z_equality(r, n) -> EqualityTest:
    """Chi-square test of equal correlations in independent samples: Cochran's Q on
    z = atanh(r) with se = 1 / sqrt(n - 3) (Fisher 1921; Hedges and Olkin 1985)."""
    r, n = np.asarray(r, dtype=float), np.asarray(n, dtype=float)
    with np.errstate(invalid="ignore", divide="ignore"):
        se = np.where(n > 3, 1.0 / np.sqrt(n - 3), np.nan)
    out = homogeneity_test(np.arctanh(r), se)
    return EqualityTest(out.statistic, out.df, out.pvalue, "Fisher z chi-square")


def proportions_equality(successes, totals) -> EqualityTest:
    """Pearson's chi-square test of equal proportions across independent groups (a
    2 x G contingency table, no continuity correction; Pearson 1900, Philosophical
    Magazine 50:157-175; scipy.stats.chi2_contingency)."""
    s, n = np.asarray(successes, dtype=float), np.asarray(totals, dtype=float)
    keep = n > 0
    if keep.sum() < 2:
        return EqualityTest(np.nan, 0, np.nan, "Pearson chi-square")
    table = np.vstack([s[keep], n[keep] - s[keep]])
    if (table.sum(axis=1) == 0).any():
        return EqualityTest(np.nan, int(keep.sum() - 1), np.nan, "Pearson chi-square")
    from scipy.stats import chi2_contingency  # loaded only for group comparisons
    chi2, p, df, _ = chi2_contingency(table, correction=False)
    return EqualityTest(float(chi2), int(df), float(p), "Pearson chi-square")


def wilson_interval(successes: int, total: int, level: float = LEVEL) -> tuple[float, float]:
    """Wilson score interval for a binomial proportion (Wilson 1927, J. American
    Statistical Association 22:209-212); it stays inside [0, 1]."""
    q = dist.norm_ppf(0.5 + level / 2)
    p = successes / total
    centre = (p + q * q / (2 * total)) / (1 + q * q / total)
    half = q / (1 + q * q / total) * np.sqrt(p * (1 - p) / total + q * q / (4 * total ** 2))
    return float(centre - half), float(centre + half)


@dataclass(frozen=True)
class GroupValue(Result):
    group: str
    estimate: float
    ci_low: float
    ci_high: float
    se: float
    n: int


@dataclass(frozen=True)
class Comparison(Result):
    figure: str
    label: str
    tested_on: str
    by_group: tuple[GroupValue, ...]
    test: EqualityTest


@dataclass(frozen=True)
class GroupScreen(Result):
    column: str
    n_groups: int
    n_reported: int
    n_suppressed: int
    min_cell: int
    comparison: tuple[Comparison, ...]
    reports: dict
    note: str


def reportable_groups(groups: np.ndarray, values: np.ndarray, labels: list[str],
                      min_cell: int) -> list[str]:
    """The groups that can be shown under disclosure control.

    Primary suppression: groups with fewer than ``min_cell`` units. Secondary
    suppression (common practice in statistical disclosure control, e.g. Hundepool et
    al. 2012, Statistical Disclosure Control, ch. 4): while the units of all hidden
    groups together, their respondents at some wave, or those kept to the end of their
    follow-up (counted from each unit's own first wave), number between 1 and
    min_cell - 1 (so the whole panel's count minus the shown groups' would reveal a
    small count), the smallest shown group is hidden too.
    """
    seen = ~np.isnan(values)
    kept = end_of_follow_up(seen, follow_up_span(seen, np.ones(len(seen))))[1]
    sizes = {label: int((groups == label).sum()) for label in labels}
    shown = [label for label in labels if sizes[label] >= min_cell]

    def leaks() -> bool:
        hidden = ~np.isin(groups, shown)
        counts = [int(hidden.sum()), int(kept[hidden].sum()), *seen[hidden].sum(axis=0)]
        return any(0 < c < min_cell for c in counts)

    while shown and len(shown) < len(labels) and leaks():
        shown.remove(min(shown, key=lambda g: (sizes[g], g)))
    return shown


def _retention(values: np.ndarray, span: int):
    """Units due after their own first wave, and of those, kept to the end of their
    follow-up (``attrition.end_of_follow_up``, with the whole panel's follow-up span)."""
    due, kept = end_of_follow_up(~np.isnan(values), span)
    return int(due.sum()), int(kept.sum())


def _estimate_from(section, path: tuple[str, ...]):
    """(estimate, ci_low, ci_high, se) from a report section at ``path``, or None.

    The value there is a number or a dict with ``estimate`` (or ``value``) and an
    ``se`` or a CI; an SE missing is derived from a symmetric normal CI,
    (high - low) / (2 z_0.975).
    """
    if isinstance(section.get(path[0]), dict) and section[path[0]].get("identified") is False:
        return None  # the diagnostic says this figure is not identified here
    node = section
    for key in path:
        if not isinstance(node, dict) or key not in node:
            return None
        node = node[key]
    if isinstance(node, (int, float)) and not isinstance(node, bool):
        return None  # a bare number carries no uncertainty to test with
    if not isinstance(node, dict):
        return None
    est = node.get("estimate", node.get("value"))
    lo, hi, se = node.get("ci_low"), node.get("ci_high"), node.get("se")
    if est is None:
        return None
    if se is None and lo is not None and hi is not None:
        se = (hi - lo) / (2 * dist.norm_ppf(0.5 + LEVEL / 2))
    return (est, lo, hi, se)


# Figures read from each group's own report: (figure, label, path candidates).
REPORTED_FIGURES: tuple[tuple[str, str, tuple[tuple[str, ...], ...]], ...] = (
    ("stable_share", "lag-profile stable share a/(a+b)",
     (("decay_fit", "stable_share"),)),
    ("carry_over", "lag-profile carry-over rho",
     (("decay_fit", "carry_over"), ("decay_fit", "rho"))),
    ("reliability", "Heise test-retest reliability (median of triplets)",
     (("reliability", "summary"),)),
)


def group_screen(ctx, run_group: Callable) -> GroupScreen | None:
    """Screen each group of ``ctx.panel.groups`` and compare key figures.

    ``run_group(panel)`` returns (report_sections, summaries) for a subset panel: it is
    the per-measure screen itself, so a group's report holds the same sections as the
    whole panel's. Compared across groups: the lag-1 autocorrelation (Fisher z average,
    jackknife SE; Cochran's Q on the z scale), retention from each unit's own first wave
    to the end of its follow-up (Pearson chi-square of the 2 x G table; Wilson intervals), and, where the
    diagnostics report them with an uncertainty, the stable share, the carry-over and the
    reliability (Cochran's Q with the reported SEs, or SEs read off symmetric CIs). Tests assume independent
    groups, which holds for a unit-level grouping column. With weights each group's
    figures are weighted (its own screen rescales them); the retention test counts units.
    """
    panel, measure, min_cell = ctx.panel, ctx.measure, ctx.options.min_cell
    if panel.groups is None:
        return None
    labels = sorted(set(panel.groups.tolist()))
    shown = reportable_groups(panel.groups, panel.values[measure], labels, min_cell)
    seen = ~np.isnan(panel.values[measure])
    span = follow_up_span(seen, np.ones(len(seen)))
    reports, lag1, retention, reported = {}, [], [], {f: [] for f, _, _ in REPORTED_FIGURES}
    suppressed = len(labels) - len(shown)
    for label in shown:
        mask = panel.groups == label
        sub = panel.subset_units(mask)
        sections, summaries = run_group(sub)
        reports[label] = {"n_units": int(mask.sum()), **sections}
        if PairwiseMoments in summaries:   # not in an audit-only screen
            lag = lag_correlations(summaries[PairwiseMoments], panel.wave_times, 1, min_cell)
            lag1.append(GroupValue(label, lag.r, lag.ci_low, lag.ci_high, lag.z_se,
                                   lag.n_pairs))
        base, kept = _retention(sub.values[measure], span)
        disclose = min(kept, base - kept) >= min_cell
        share = kept / base if base and disclose else np.nan
        se = np.sqrt(share * (1 - share) / base) if base and disclose else np.nan
        lo, hi = wilson_interval(kept, base) if base and disclose else (np.nan, np.nan)
        retention.append((GroupValue(label, share, lo, hi, se,
                                     base if base >= min_cell else 0), kept, base, disclose))
        for figure, _, paths in REPORTED_FIGURES:
            found = next((v for v in (_estimate_from(sections, p) for p in paths) if v), None)
            if found:
                reported[figure].append(GroupValue(label, *found, n=int(mask.sum())))
    comparison = []
    if lag1:
        z = [np.arctanh(v.estimate) if v.estimate is not None and np.isfinite(v.estimate)
             else np.nan for v in lag1]
        comparison.append(Comparison(
            "lag1_correlation", "mean r one wave apart (pairwise)", "Fisher z, jackknife SE",
            tuple(lag1), homogeneity_test(z, [v.se for v in lag1])))
    if retention:
        ok = [(k, b) for _, k, b, d in retention if d]
        test = proportions_equality([k for k, _ in ok], [b for _, b in ok])
        comparison.append(Comparison(
            "retention", "retained to the end of follow-up (from each unit's first wave)",
            "counts", tuple(v for v, *_ in retention), test))
    for figure, label, _ in REPORTED_FIGURES:
        values = reported[figure]
        if len(values) >= 2:
            comparison.append(Comparison(
                figure, label, "reported SE", tuple(values),
                homogeneity_test([v.estimate for v in values], [v.se for v in values])))
    note = (f"Groups with fewer than {min_cell} units are not reported (disclosure control), "
            "nor, where needed, the next smallest groups, so that no count below "
            f"{min_cell} follows by subtraction from the whole panel's; {suppressed} of "
            f"{len(labels)} group(s) left out." if suppressed else
            f"Every group has at least {min_cell} units.")
    return GroupScreen(column=ctx.options.group_column or "group", n_groups=len(labels),
                       n_reported=len(reports), n_suppressed=suppressed, min_cell=min_cell,
                       comparison=tuple(comparison), reports=plain(reports), note=note)
