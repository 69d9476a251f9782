"""Degenerate panels: the conditions under which figures of the screen cannot be
computed, found once, so every empty (null) figure they cause has its reason stated.

A wave without spread, two waves that are perfectly correlated, a wave with too few
respondents, no more units than waves, two waves only, one value throughout, or units
seen once each: the screen still runs, and this section says which areas it leaves
empty and why. The terminal and the appendix print these notes.

References: a singular or not positive definite covariance leaves the normal-theory
likelihood and its tests undefined (Wothke 1993, Nonpositive definite matrices in
structural modeling, in Bollen and Long (eds.), Testing Structural Equation Models, Sage;
from memory); reliability apart from stability needs three waves (Heise 1969, American
Sociological Review 34, 93-101).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from paneldiag.io.waves import number_text
from paneldiag.results import Result

# the areas whose figures need the waves' variances and covariances
COVARIANCE_AREAS = ("wave_profile", "distribution", "missingness", "correlation",
                    "lag_profile", "markov", "stationarity", "decay_fit", "reliability",
                    "growth", "verdict_basis", "families", "measurement", "power")
# perfectly correlated waves or too few units leave the covariance singular: the fits'
# tests and indices need its inverse and log-determinant
SINGULAR_AREAS = ("missingness", "markov", "stationarity", "reliability", "growth",
                  "verdict_basis", "families", "measurement", "power")
TRIPLET_AREAS = ("reliability", "growth", "verdict_basis", "families", "measurement",
                 "markov", "stationarity", "lag_profile", "power")
EXACT = 1e-9   # |r| within this of 1 is a perfect correlation (rounding of centred sums)


@dataclass(frozen=True)
class Finding(Result):
    kind: str
    waves: tuple[str, ...]
    note: str
    affects: tuple[str, ...]


@dataclass(frozen=True)
class Degeneracy(Result):
    findings: tuple[Finding, ...]

    def to_dict(self) -> list[dict]:  # the JSON key holds the list of findings
        return [f.to_dict() for f in self.findings]


def degeneracy(n_units: int, labels, wave_n: np.ndarray, wave_m2: np.ndarray,
               wave_min: np.ndarray, wave_max: np.ndarray, units_seen_twice: int,
               correlation: np.ndarray | None, min_cell: int) -> Degeneracy | None:
    """The degenerate conditions of one measure, or None when there is none."""
    labels = [str(w) for w in labels]
    t = len(labels)
    n = np.asarray(wave_n, dtype=float)
    found: list[Finding] = []
    observed = n > 0
    if observed.any() and np.all(wave_min[observed] == wave_max[observed]) and \
            len(set(np.asarray(wave_min)[observed].tolist())) == 1:
        value = number_text(float(np.asarray(wave_min)[observed][0]))
        found.append(Finding(
            "one_value", tuple(labels),
            f"every observed value is {value} (one response category): the measure does not "
            "vary, so spreads, correlations, reliability, growth and the family verdicts are "
            "not defined", COVARIANCE_AREAS))
    else:
        flat = [w for w in range(t) if n[w] >= 2 and wave_m2[w] == 0]
        for w in flat:
            found.append(Finding(
                "constant_wave", (labels[w],),
                f"wave {labels[w]} has no spread (every observed value is "
                f"{number_text(float(wave_min[w]))}): its skewness, its correlations with "
                "other waves, the reliability of triplets with it and the fits that need "
                "its variance are not defined", COVARIANCE_AREAS))
    few = [w for w in range(t) if n[w] < 2]
    for w in few:
        found.append(Finding(
            "too_few_respondents", (labels[w],),
            f"wave {labels[w]} has too few respondents for a spread or a correlation "
            f"(fewer than {max(min_cell, 2)}, not shown)", ("attrition",) + COVARIANCE_AREAS))
    if correlation is not None:
        r = np.asarray(correlation, dtype=float)
        s_idx, t_idx = np.triu_indices(t, 1)
        perfect = np.isfinite(r[s_idx, t_idx]) & (np.abs(r[s_idx, t_idx]) >= 1 - EXACT)
        for s, u in zip(s_idx[perfect], t_idx[perfect]):
            sign = "" if r[s, u] > 0 else "-"
            found.append(Finding(
                "perfect_correlation", (labels[s], labels[u]),
                f"waves {labels[s]} and {labels[u]} are perfectly correlated (r = {sign}1): "
                "the covariance of the waves is singular, so the fits' chi-square, p-value, "
                "RMSEA, SRMR, CFI and BIC are not defined", SINGULAR_AREAS))
    if n_units <= t:
        units = f"{n_units} units" if n_units >= min_cell else f"fewer than {min_cell} units"
        found.append(Finding(
            "fewer_units_than_waves", (),
            f"{units} for {t} waves: the covariance of the waves has rank below "
            f"{t}, so it is singular and the fits' tests and indices are not defined; "
            "intervals from the replicate groups are very wide", SINGULAR_AREAS))
    if t == 2:
        found.append(Finding(
            "two_waves", tuple(labels),
            "two waves only: no triplet of waves, so reliability cannot be told apart from "
            "stability, no curvature or residual autocorrelation can be estimated, and "
            "carry-over cannot be told apart from a stable trait", TRIPLET_AREAS))
    if units_seen_twice == 0:
        found.append(Finding(
            "seen_once", (),
            "every unit is observed at one wave at most: no pair of waves has units in "
            "common, so retention, dependence, reliability, growth and the verdicts cannot "
            "be estimated", ("attrition",) + COVARIANCE_AREAS))
    if n_units < min_cell:
        found.append(Finding(
            "below_min_cell", (),
            f"fewer units than the smallest count shown ({min_cell}): counts, shares and "
            "the figures of so few units are withheld (disclosure control, --min-cell)",
            ("attrition", "missingness") + COVARIANCE_AREAS))
    return Degeneracy(tuple(found)) if found else None


def degenerate_section(ctx) -> Degeneracy | None:
    """The ``degenerate`` block of the report for one measure (absent when none)."""
    from paneldiag.summaries.moments import WaveMoments
    from paneldiag.summaries.pairwise import PairwiseMoments
    from paneldiag.summaries.patterns import PatternMoments
    moments = ctx.summary(WaveMoments)
    patterns = ctx.summaries.get(PatternMoments)
    twice = int(np.asarray(patterns.n)[np.asarray(patterns.observed).sum(axis=1) >= 2].sum()) \
        if patterns is not None else ctx.panel.n_units
    pairwise = ctx.summaries.get(PairwiseMoments)
    with np.errstate(invalid="ignore", divide="ignore"):
        correlation = pairwise.correlation() if pairwise is not None else None
    return degeneracy(ctx.panel.n_units, ctx.panel.wave_labels, moments.n, moments.m2,
                      moments.minimum, moments.maximum, twice, correlation,
                      ctx.options.min_cell)
