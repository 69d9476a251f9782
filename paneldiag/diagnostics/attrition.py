"""Attrition: the entry design, retention by wave counted from each unit's own first
wave, unit types by response history, and whether dropout is selective on the measure
(standardised mean differences and a discrete-time dropout model).

Retention, unit types and the mean differences are functions of the per-pattern
summary ``PatternMoments``. The dropout model needs each unit's value at each wave
(and covariates), so it works on the panel's N x T matrices, vectorised.

Disclosure control: every count below ``min_cell`` is suppressed (null in JSON),
together with any share or mean that would reveal it; in a list of counts that adds
up to a shown total, further cells are suppressed until the suppressed ones together
hold at least ``min_cell`` units (or none at all), so no suppressed count of one or
more units can be recovered by subtraction.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from paneldiag import distributions as dist
from paneldiag.ahead import computed
from paneldiag.disclosure import shown_mask, small
from paneldiag.labels import ENTRY_DESIGNS
from paneldiag.results import Result
from paneldiag.summaries.patterns import PatternMoments, display_order

Z95 = float(dist.norm_ppf(0.975))


# --------------------------------------------------------------- disclosure control

def _count(value: float, shown: bool):
    return int(value) if shown else None


def coverage_counts(patterns: PatternMoments) -> np.ndarray:
    """Units observed at both waves s and t, (T, T)."""
    obs = patterns.observed.astype(float)
    return (obs * patterns.n[:, None]).T @ obs


def coverage_shown(both: np.ndarray, min_cell: int) -> np.ndarray:
    """Which coverage cells may be shown: at least ``min_cell`` units, and the units
    seen at only one wave of the pair (diagonal minus cell) not 1 to min_cell - 1."""
    alone = np.diag(both)[:, None] - both
    return (both >= min_cell) & ~small(alone, min_cell) & ~small(alone.T, min_cell)


def _retention_shown(patterns: PatternMoments, min_cell: int):
    observed = wave_observed(patterns)
    due = units_due(patterns.observed, follow_up_span(patterns.observed, patterns.n))
    base = patterns.n @ due
    still = patterns.n @ (due & patterns.observed)
    # a wave's respondents beside all units would give its non-respondents
    wave_ok = (observed >= min_cell) & ~small(patterns.n.sum() - observed, min_cell)
    ret_ok = wave_ok & (base >= min_cell) & (still >= min_cell) & \
        ~small(base - still, min_cell)
    return observed, base, still, wave_ok, ret_ok


def _type_shown(patterns: PatternMoments, min_cell: int):
    codes = unit_type_codes(patterns.observed)
    n_type = np.bincount(codes, weights=patterns.n, minlength=len(UNIT_TYPES))
    return codes, n_type, shown_mask(n_type, min_cell, additive=True)


def known_patterns(patterns: PatternMoments, min_cell: int = 5, top: int = 10) -> np.ndarray:
    """Which pattern counts the report may reveal, (P,) booleans.

    Candidates: patterns with at least ``min_cell`` units that are either among the
    ``top`` most frequent (listed in the pattern table) or monotone dropout patterns
    (shown as counts by wave of last observation). Every total the report shows is a
    sum over a set of patterns: all units, the respondents at a wave, a coverage cell
    and the two one-wave-only differences next to it, the units due at a wave kept or
    lost there, those kept or lost to the end of their follow-up, the entrants at a
    wave, a unit type, the withheld types together, the leavers after a wave. For each such set the units of its withheld patterns must be none or at
    least ``min_cell`` together; otherwise the smallest revealed pattern of the set
    is withheld too, until no set breaks the rule (each step only withholds more, so
    this ends).
    """
    n, obs = patterns.n, patterns.observed
    p, t = obs.shape
    if p == 0:
        return np.zeros(0, dtype=bool)
    codes, n_type, type_ok = _type_shown(patterns, min_cell)
    order = display_order(patterns)
    rank = np.empty(p, dtype=int)
    rank[order] = np.arange(p)
    big = n >= min_cell
    big_rank = np.cumsum(big[order]) - 1          # rank among the patterns with 5+ units
    top_big = np.zeros(p, dtype=bool)
    top_big[order] = big[order] & (big_rank < top)
    known = big & (top_big | (codes == 1))
    _, _, _, wave_ok, ret_ok = _retention_shown(patterns, min_cell)
    pair_ok = coverage_shown(coverage_counts(patterns), min_cell)
    np.fill_diagonal(pair_ok, False)
    first, last, _, _ = response_history(obs)
    span = follow_up_span(obs, n)
    due = units_due(obs, span)
    entering = entry_counts(obs, n)
    entry_ok = entry_shown(entering, n.sum(), min_cell)
    end_due, end_kept = end_of_follow_up(obs, span)
    end_ok = end_shown(n @ end_due, n @ end_kept, min_cell)
    n_types = len(UNIT_TYPES)
    leave_n = np.bincount(last[last >= 0], weights=n[last >= 0], minlength=t)[:t - 1]
    leave_ok = leave_n >= min_cell
    hidden_types = ~type_ok if (type_ok.any() and not type_ok.all()) else np.zeros(
        n_types, dtype=bool)

    def members(kind, a, b):
        """The patterns of one shown total (kinds: all, wave, both, only, type,
        hidden types, leavers, entrants at a wave, units due at a wave kept or lost,
        units kept or lost to the end of their follow-up)."""
        if kind == "all":
            return np.ones(p, dtype=bool)
        if kind == "entry":
            return first == a
        if kind == "kept":
            return due[:, a] & obs[:, a]
        if kind == "lost":
            return due[:, a] & ~obs[:, a]
        if kind == "end_kept":
            return end_kept
        if kind == "end_lost":
            return end_due & ~end_kept
        if kind == "wave":
            return obs[:, a]
        if kind == "both":
            return obs[:, a] & obs[:, b]
        if kind == "only":
            return obs[:, a] & ~obs[:, b]
        if kind == "type":
            return codes == a
        if kind == "hidden_types":
            return hidden_types[codes]
        return last == a

    while True:
        # the withheld units of every shown total, from a few matrix products
        hid = np.where(known, 0.0, n)
        at_wave = hid @ obs
        pair = (obs * hid[:, None]).T @ obs
        by_type = np.bincount(codes, weights=hid, minlength=n_types)
        by_leave = np.bincount(last[last >= 0], weights=hid[last >= 0], minlength=t)[:t - 1]
        broken = []
        if small(hid.sum(), min_cell):
            broken.append(("all", 0, 0))
        broken += [("wave", a, 0) for a in np.flatnonzero(wave_ok & small(at_wave, min_cell))]
        both_bad = pair_ok & small(pair, min_cell)
        only_bad = pair_ok & small(at_wave[:, None] - pair, min_cell)
        broken += [("both", a, b) for a, b in zip(*np.nonzero(both_bad))]
        broken += [("only", a, b) for a, b in zip(*np.nonzero(only_bad))]
        broken += [("type", k, 0) for k in np.flatnonzero(type_ok & small(by_type, min_cell))]
        if hidden_types.any() and small(by_type[hidden_types].sum(), min_cell):
            broken.append(("hidden_types", 0, 0))
        broken += [("leave", a, 0) for a in np.flatnonzero(leave_ok & small(by_leave,
                                                                              min_cell))]
        by_entry = np.bincount(first[first >= 0], weights=hid[first >= 0], minlength=t)
        broken += [("entry", a, 0) for a in np.flatnonzero(entry_ok[:t] &
                                                            small(by_entry, min_cell))]
        kept, lost = hid @ (due & obs), hid @ (due & ~obs)
        broken += [("kept", a, 0) for a in np.flatnonzero(ret_ok & small(kept, min_cell))]
        broken += [("lost", a, 0) for a in np.flatnonzero(ret_ok & small(lost, min_cell))]
        broken += [(kind, 0, 0) for kind, rows in (("end_kept", end_kept),
                                                   ("end_lost", end_due & ~end_kept))
                   if end_ok and small(hid[rows].sum(), min_cell)]
        picked = False
        for kind, a, b in broken:  # a loop over the totals that would reveal a count
            inside = members(kind, a, b)
            if not small(n[inside & ~known].sum(), min_cell):
                continue    # an earlier pick of this pass already mended it
            pool = np.flatnonzero(inside & known)
            if len(pool):
                # withhold the smallest revealed pattern of the set (ties: display order)
                known[pool[np.lexsort((rank[pool], n[pool]))[0]]] = False
                picked = True
        if not picked:
            break
    return known


# -------------------------------------------------------------------- entry design

# How the design is named from the share of units entering at each wave (our own
# convention, chosen so that the usual designs fall clearly on one side; the shares are
# of the units observed at least once):
SINGLE_COHORT_SHARE = 0.90  # single cohort: the first wave holds at least this share
                            # (a trickle of late first responses does not change that)
MAIN_SAMPLE_SHARE = 0.50    # refreshment samples: the first wave still holds the main
                            # sample, at least half, and later waves add blocks
ENTRY_BLOCK_SHARE = 0.05    # a wave adds a block of new units when this share enters
SPREAD_MIN_WAVES = 3        # cohort-sequential: under half start at the first wave and
                            # blocks enter at this many waves or more
FOLLOW_UP_SHARE = 0.05      # cohort-sequential: the planned follow-up is the longest span
                            # of waves that at least this share of units reaches


def first_observed(observed: np.ndarray) -> np.ndarray:
    """Each row's first observed wave (-1: never observed)."""
    return np.where(observed.any(axis=1), observed.argmax(axis=1), -1)


def entry_counts(observed: np.ndarray, n: np.ndarray) -> np.ndarray:
    """Units first observed at each wave, (T,) (units never observed are in none)."""
    first = first_observed(observed)
    return np.bincount(first[first >= 0], weights=n[first >= 0],
                       minlength=observed.shape[1]).astype(float)


def entry_shown(entering: np.ndarray, total: float, min_cell: int) -> np.ndarray:
    """Which entry counts may be shown: they and the units never observed add up to all
    units, so the never-observed count is a cell of the same additive table."""
    cells = np.r_[entering, total - entering.sum()]
    return shown_mask(cells, min_cell, additive=True)[:len(entering)]


def classify_entry(entering: np.ndarray) -> str:
    """The design's name (a key of ``labels.ENTRY_DESIGNS``) from the entry counts by wave."""
    total = entering.sum()
    if total == 0:
        return "single_cohort"
    share = entering / total
    blocks = int((share >= ENTRY_BLOCK_SHARE).sum())
    if share[0] >= SINGLE_COHORT_SHARE:
        return "single_cohort"
    if share[0] >= MAIN_SAMPLE_SHARE and (share[1:] >= ENTRY_BLOCK_SHARE).any():
        return "refreshment"
    if share[0] < MAIN_SAMPLE_SHARE and blocks >= SPREAD_MIN_WAVES:
        return "cohort_sequential"
    return "mixed_entry"


def follow_up_span(observed: np.ndarray, n: np.ndarray) -> int:
    """Waves each unit is due to be followed from its own first wave.

    All the remaining waves, except in a cohort-sequential design, where each cohort is
    usually followed over a fixed number of waves: there it is the longest span (first
    to last observed wave) that at least ``FOLLOW_UP_SHARE`` of the units reach, so that
    a planned end of follow-up is not read as dropout while dropout within it still is.
    """
    t = observed.shape[1]
    if classify_entry(entry_counts(observed, n)) != "cohort_sequential":
        return t
    first, last, _, _ = response_history(observed)
    seen = first >= 0
    by_span = np.bincount((last - first + 1)[seen], weights=n[seen], minlength=t + 1)
    reach = np.cumsum(by_span[::-1])[::-1]        # units with a span of s waves or more
    long_enough = np.flatnonzero(reach >= FOLLOW_UP_SHARE * n[seen].sum())
    return int(long_enough.max()) if len(long_enough) else t


def follow_up_end(observed: np.ndarray, span: int) -> tuple[np.ndarray, np.ndarray]:
    """Each row's first observed wave and the last wave it is due at (-1: never seen)."""
    first = first_observed(observed)
    end = np.where(first >= 0, np.minimum(first + span - 1, observed.shape[1] - 1), -1)
    return first, end


def units_due(observed: np.ndarray, span: int) -> np.ndarray:
    """(rows, T): the row entered before the wave and is still within its follow-up
    there, so the wave is a chance to keep or lose it."""
    first, end = follow_up_end(observed, span)
    waves = np.arange(observed.shape[1])
    return (first[:, None] >= 0) & (first[:, None] < waves) & (waves <= end[:, None])


def end_of_follow_up(observed: np.ndarray, span: int) -> tuple[np.ndarray, np.ndarray]:
    """Per row: due at a wave after its first (its follow-up is longer than one wave),
    and observed at the last wave it is due at (kept to the end)."""
    first, end = follow_up_end(observed, span)
    due = (first >= 0) & (first < end)
    kept = due & observed[np.arange(len(observed)), np.maximum(end, 0)]
    return due, kept


def retention_to_end(observed: np.ndarray, n: np.ndarray) -> tuple[float, float]:
    """Units due after their own first wave, and of those, kept to the end of their
    follow-up (``end_of_follow_up`` with the design's ``follow_up_span``)."""
    due, kept = end_of_follow_up(observed, follow_up_span(observed, n))
    return float(n @ due), float(n @ kept)


def end_shown(base: float, kept: float, min_cell: int) -> bool:
    """The share kept may be shown: neither it nor the units lost reveal a small count."""
    return bool(base >= min_cell and kept >= min_cell and not small(base - kept, min_cell))


@dataclass(frozen=True)
class WaveCount(Result):
    """Units at one wave (entering there, or last observed there) and their share."""

    wave: str
    n: int | None
    share: float | None


@dataclass(frozen=True)
class EntryDesign(Result):
    """How units enter the panel, and retention counted from each unit's own entry."""

    design: str
    description: str
    first_wave_share: float | None
    entry_waves: tuple[str, ...]
    follow_up_waves: int
    retained_share: float | None
    by_wave: tuple[WaveCount, ...]


def entry_design(patterns: PatternMoments, wave_labels, min_cell: int = 5) -> EntryDesign:
    """The entry design the response histories show, and retention from entry.

    Units enter at their first observed wave. The design is a single cohort when at
    least ``SINGLE_COHORT_SHARE`` of the units start at the first wave; refreshment
    samples when the first wave holds at least ``MAIN_SAMPLE_SHARE`` and some later
    wave adds a block (``ENTRY_BLOCK_SHARE`` or more); cohort-sequential when the first
    wave holds less and blocks enter at ``SPREAD_MIN_WAVES`` waves or more; otherwise
    mixed. ``entry_waves`` lists the waves that add a block. ``retained_share``: of the
    units due at some wave after their first, the share observed at the last wave they
    are due at (the final wave, or in a cohort-sequential design the end of the
    ``follow_up_waves`` planned for each cohort, see ``follow_up_span``). Counts below
    ``min_cell`` are withheld with their shares (secondary suppression as in
    ``shown_mask``, the never-observed units being the table's last cell).

    References
    ----------
    Lynn, P. (ed.) (2009). Methodology of Longitudinal Surveys, ch. 1 (retention; refreshment
    samples). Wiley.
    Schaie, K. W. (1965). A general model for the study of developmental problems.
    Psychological Bulletin, 64(2), 92-107 (cohort-sequential designs).
    """
    obs, n = patterns.observed, patterns.n
    entering = entry_counts(obs, n)
    total = entering.sum()
    show = entry_shown(entering, n.sum(), min_cell)
    seen_twice = (obs.sum(axis=1) > 1) & (n > 0)
    # the design from counts of units: a structure, not an estimate
    design = classify_entry(entering) if seen_twice.any() or total == 0 else "one_wave_each"
    span = follow_up_span(obs, n)
    due, kept = end_of_follow_up(obs, span)
    base, still = float(n @ due), float(n @ kept)
    mass = patterns.mass                 # shares: weighted when there are weights
    entering_mass = entry_counts(obs, mass)
    share = entering_mass / entering_mass.sum() if total > 0 and entering_mass.sum() > 0 \
        else np.zeros_like(entering)
    rows = tuple(WaveCount(str(label), _count(entering[i], show[i]),
                           float(share[i]) if show[i] else None)
                 for i, label in enumerate(wave_labels))
    blocks = tuple(str(wave_labels[i]) for i in range(1, len(entering))
                   if share[i] >= ENTRY_BLOCK_SHARE and show[i])
    return EntryDesign(design, ENTRY_DESIGNS[design][2],
                       float(share[0]) if len(show) and show[0] else None, blocks, span,
                       _ratio(mass @ kept, mass @ due) if end_shown(base, still, min_cell)
                       else None, rows)


def _ratio(part: float, whole: float) -> float:
    return float(part / whole) if whole > 0 else float("nan")


# ------------------------------------------------------------------------ retention

@dataclass(frozen=True)
class RetentionRow(Result):
    wave: str
    n_observed: int | None
    retained_share: float | None
    response_share: float | None
    suppressed: bool


@dataclass(frozen=True)
class Retention(Result):
    rows: tuple[RetentionRow, ...]

    def to_dict(self) -> list[dict]:
        return [row.to_dict() for row in self.rows]


def wave_observed(patterns: PatternMoments) -> np.ndarray:
    """Units observed at each wave, (T,)."""
    return patterns.n @ patterns.observed


def retention(patterns: PatternMoments, wave_labels, min_cell: int = 5) -> Retention:
    """Units observed at each wave, retention counted from each unit's own first
    wave, and the share of all units observed (response).

    A unit counts as observed at a wave when the measure has a value there
    (declared missing codes count as missing). ``retained_share`` at a wave: of the
    units that entered (were first observed) before it and are still due there (see
    ``units_due``), the share observed at it; units entering at the wave itself are
    not counted, and the first wave has none (null). Waves below ``min_cell`` observed
    units, or with 1 to ``min_cell`` - 1 units not observed, are suppressed with their
    shares; a retention share is withheld too when
    the units due, kept or lost would be 1 to ``min_cell`` - 1.

    References
    ----------
    Lynn, P. (ed.) (2009). Methodology of Longitudinal Surveys, ch. 1 (retention and
    response in panel studies). Wiley.
    """
    n_all = patterns.n.sum()
    observed, base, still, wave_ok, ret_ok = _retention_shown(patterns, min_cell)
    if patterns.weighted:   # the shares from the weight sums; the counts stay counts
        mass = patterns.mass
        due = units_due(patterns.observed, follow_up_span(patterns.observed, patterns.n))
        base, still = mass @ due, mass @ (due & patterns.observed)
        share_observed, share_all = mass @ patterns.observed, mass.sum()
    else:
        share_observed, share_all = observed, n_all
    rows = []
    for t, label in enumerate(wave_labels):
        ok, keep_ret = bool(wave_ok[t]), bool(ret_ok[t])
        rows.append(RetentionRow(
            wave=str(label), n_observed=_count(observed[t], ok),
            retained_share=_ratio(still[t], base[t]) if keep_ret else None,
            response_share=_ratio(share_observed[t], share_all) if ok and n_all > 0
            else None,
            suppressed=not ok))
    return Retention(tuple(rows))


# ----------------------------------------------------------------------- unit types

UNIT_TYPES = ("complete", "monotone_dropout", "late_entry", "late_entry_then_dropout",
              "intermittent", "never_observed")


def response_history(observed: np.ndarray):
    """First and last observed wave, observed count and a gap flag per pattern row."""
    t = observed.shape[1]
    k = observed.sum(axis=1)
    first = np.where(k > 0, observed.argmax(axis=1), -1)
    last = np.where(k > 0, t - 1 - observed[:, ::-1].argmax(axis=1), -1)
    gap = (k > 0) & (last - first + 1 > k)
    return first, last, k, gap


def unit_type_codes(observed: np.ndarray) -> np.ndarray:
    """Index into ``UNIT_TYPES`` for each pattern row (see ``unit_types``)."""
    t = observed.shape[1]
    first, last, k, gap = response_history(observed)
    code = np.full(len(observed), 4)                        # intermittent
    code[~gap & (first == 0) & (last == t - 1)] = 0         # complete
    code[~gap & (first == 0) & (last < t - 1)] = 1          # monotone dropout
    code[~gap & (first > 0) & (last == t - 1)] = 2          # late entry, stays
    code[~gap & (first > 0) & (last < t - 1)] = 3           # late entry, then leaves
    code[k == 0] = 5                                        # never observed
    return code


@dataclass(frozen=True)
class TypeRow(Result):
    type: str
    n: int | None
    share: float | None


@dataclass(frozen=True)
class UnitTypes(Result):
    types: tuple[TypeRow, ...]
    dropout_last_wave: tuple[WaveCount, ...]

    def to_dict(self) -> list[dict]:
        rows = [r.to_dict() for r in self.types]
        for row in rows:
            if row["type"] == "monotone_dropout":
                row["last_wave"] = [r.to_dict() for r in self.dropout_last_wave]
        return rows


def unit_types(patterns: PatternMoments, wave_labels, min_cell: int = 5, top: int = 10,
               ) -> UnitTypes:
    """Units by response history; the types are exclusive and add up to all units.

    - complete: observed at every wave;
    - monotone_dropout: observed from the first wave without a gap up to a last
      observed wave before the final wave, never after (``dropout_last_wave``, in
      JSON the row's ``last_wave`` list, gives the wave of last observation);
    - late_entry: first observed after the first wave, then without a gap to the
      final wave; late_entry_then_dropout: the same but leaving before the final wave;
    - intermittent: at least one missing wave between the first and the last
      observed wave (whatever the entry and exit: a return after a gap);
    - never_observed: no observed wave.
    Shares are of all units. Counts below ``min_cell`` are withheld, with secondary
    suppression (see ``shown_mask``).

    References
    ----------
    Little, R. J. A. and Rubin, D. B. (2002). Statistical Analysis with Missing Data,
    2nd ed., sec. 1.3 (monotone and non-monotone patterns). Wiley.
    """
    codes, n_type, show = _type_shown(patterns, min_cell)
    mass = patterns.mass      # shares: weighted when there are weights
    total = mass.sum()
    w_type = np.bincount(codes, weights=mass, minlength=len(UNIT_TYPES))
    types = tuple(TypeRow(name, _count(n_type[i], show[i]),
                          _ratio(w_type[i], total) if show[i] else None)
                  for i, name in enumerate(UNIT_TYPES))
    _, last, _, _ = response_history(patterns.observed)
    t = patterns.n_waves
    drop = codes == 1
    by_wave = np.bincount(last[drop], weights=patterns.n[drop], minlength=t)[:t - 1]
    w_wave = np.bincount(last[drop], weights=mass[drop], minlength=t)[:t - 1]
    # each wave of last observation is one monotone pattern: shown when it is known
    known = known_patterns(patterns, min_cell, top)
    show_w = np.zeros(t - 1, dtype=bool)
    show_w[last[drop & known]] = True
    waves = tuple(WaveCount(str(wave_labels[i]), _count(by_wave[i], show_w[i]),
                              _ratio(w_wave[i], total) if show_w[i] else None)
                  for i in range(t - 1))
    return UnitTypes(types, waves)


# ---------------------------------------------------------------- selective dropout

@dataclass(frozen=True)
class DropoutDifference(Result):
    """Units observed at ``wave``: those who leave after it against those observed
    at the next wave, on the measure at ``wave``."""

    wave: str
    n_continuing: int | None
    n_dropping: int | None
    mean_continuing: float | None
    mean_dropping: float | None
    smd: float | None
    ci_low: float | None
    ci_high: float | None


def _group_moments(patterns: PatternMoments, rows: np.ndarray, t: int):
    """(units, weight sum, mean, centred sum of squares) of a set of patterns at wave t
    (the weight sum is the count when unweighted)."""
    count = float(patterns.n[rows].sum())
    n = patterns.mass[rows]
    total = n.sum()
    if total == 0:
        return count, 0.0, np.nan, np.nan
    mean = n @ patterns.mean[rows, t] / total
    ss = patterns.m2[rows, t, t].sum() + n @ (patterns.mean[rows, t] - mean) ** 2
    return count, float(total), float(mean), float(ss)


def dropout_differences(patterns: PatternMoments, wave_labels, min_cell: int = 5,
                        ) -> tuple[DropoutDifference, ...]:
    """Standardised mean difference at each wave (but the last) between the units
    who drop out after it (last observed there) and those observed again at the
    next wave: Hedges' g = J (mean_dropping - mean_continuing) / s_pooled with
    J = 1 - 3 / (4 (n1 + n2) - 9), and a 95% interval g +- q sqrt(v) with the
    large-sample variance v = (n1 + n2) / (n1 n2) + g^2 / (2 (n1 + n2)) and q the
    0.975 quantile of Student's t on n1 + n2 - 2 df (close to 1.96 for large groups). Negative g: the leavers scored
    lower. Units who skip the next wave but return later are in neither group, nor
    are units whose follow-up ends at the wave by design (``follow_up_span``).
    When either group is below ``min_cell`` units both counts, the small group's
    mean and g are withheld.

    References
    ----------
    Hedges, L. V. (1981). Distribution theory for Glass's estimator of effect size
    and related estimators. Journal of Educational Statistics, 6(2), 107-128.
    Hedges, L. V. and Olkin, I. (1985). Statistical Methods for Meta-Analysis,
    Academic Press, ch. 5 (the large-sample variance of g).
    """
    _, last, _, _ = response_history(patterns.observed)
    _, end = follow_up_end(patterns.observed, follow_up_span(patterns.observed, patterns.n))
    out = []
    for t in range(patterns.n_waves - 1):  # a loop over waves
        stay = patterns.observed[:, t] & patterns.observed[:, t + 1]
        leave = (last == t) & (end > t)   # the planned end of follow-up is no dropout
        c1, n1, m1, ss1 = _group_moments(patterns, stay, t)
        c2, n2, m2, ss2 = _group_moments(patterns, leave, t)
        big1, ok2 = c1 >= min_cell, c2 >= min_cell
        ok1 = big1 and ok2   # the continuing count next to a withheld one would reveal it
        g = lo = hi = None
        if ok1 and ok2 and n1 + n2 > 2 and n1 > 0 and n2 > 0:
            sd = np.sqrt((ss1 + ss2) / (n1 + n2 - 2))
            if sd > 0:
                g = float((1 - 3 / (4 * (n1 + n2) - 9)) * (m2 - m1) / sd)
                q = dist.t_ppf(0.975, n1 + n2 - 2)
                half = q * np.sqrt((n1 + n2) / (n1 * n2) + g * g / (2 * (n1 + n2)))
                lo, hi = g - half, g + half
        out.append(DropoutDifference(
            str(wave_labels[t]), _count(c1, ok1), _count(c2, ok2),
            m1 if big1 else None, m2 if ok2 else None, g, lo, hi))
    return tuple(out)


@dataclass(frozen=True)
class DropoutModel(Result):
    """Discrete-time logit of dropping out after a wave."""

    fitted: bool
    note: str
    n_person_periods: int | None
    n_events: int | None
    n_units: int | None
    waves_in_model: tuple[str, ...]
    odds_ratio_per_sd: float | None
    ci_low: float | None
    ci_high: float | None
    pvalue: float | None
    covariates: tuple[dict, ...]
    iterations: int


def dropout_model(values: np.ndarray, wave_labels, covariates: dict | None = None,
                  min_cell: int = 5, max_iter: int = 50, tol: float = 1e-10,
                  weights: np.ndarray | None = None, replicate: np.ndarray | None = None,
                  ) -> DropoutModel:
    """Discrete-time hazard of dropping out after wave t, as a logit with one
    intercept per wave and the measure at t, standardised within the wave:

        logit P(last observed at t | observed at t) = a_t + b z_t + c' w_t

    Person-periods are the (unit, wave) cells with an observed value before the last
    wave the unit is due at (the final wave, or the end of a cohort's planned
    follow-up, ``follow_up_span``); the event is that the unit is never observed after t (so a unit that
    skips and returns is not an event). Covariates ``w_t`` (value at wave t) are
    standardised over the person-periods; cells with a missing covariate are left
    out. Waves without events (or without non-events) are left out, which is their
    exact maximum-likelihood limit. The fit is Newton-Raphson on the whole cell
    arrays, using the block structure of the wave intercepts (no person-period
    design matrix with wave dummies is built); without covariates, and with values
    on a decimal grid, the person-periods of one wave and value are fitted as one
    binomial cell (the same likelihood, a fraction of the rows). Wald intervals from
    the inverse information. ``odds_ratio_per_sd`` is exp(b).

    With unit ``weights`` every person-period carries its unit's weight: the
    standardisation is weighted and the fit maximises the weighted log-likelihood
    (pseudo-likelihood, Binder 1983, International Statistical Review 51, 279-292).
    The model-based information no longer gives the variance then, so the intervals and
    p-values come from the delete-a-group jackknife over the ``replicate`` groups (each
    refit from the full estimate, with t on K - 1 df; Kott 2001, J. Official
    Statistics 17, 521-526). The counts stay counts of units and person-periods.

    References
    ----------
    Allison, P. D. (1982). Discrete-time methods for the analysis of event histories.
    Sociological Methodology, 13, 61-98.
    Singer, J. D. and Willett, J. B. (1993). It's about time: using discrete-time
    survival analysis to study duration and the timing of events. Journal of
    Educational Statistics, 18(2), 155-195.
    """
    covariates = covariates or {}
    labels = [str(w) for w in wave_labels]
    n_units, t = values.shape
    names = list(covariates)
    extra = [np.asarray(covariates[name], dtype=float) for name in names]
    waves_used, any_risk = np.zeros(t - 1, dtype=bool), np.zeros(n_units, bool)
    # without covariates, person-periods with the same wave and value (and replicate
    # group, when weighted) are one binomial cell: the same likelihood, far fewer rows
    # when the values lie on a grid
    cells = None if extra else _grouped_person_periods(values, weights, replicate,
                                                       waves_used, any_risk)
    if cells is not None:
        xt, y, trials, bounds, row_group, n_pp, n_ev = cells
    else:
        xt, y, bounds, unit_of_row = _person_periods(values, extra, weights, waves_used,
                                                     any_risk)
        n_pp, n_ev = len(y), int(y.sum())
        trials = None if weights is None else weights[unit_of_row]
        row_group = None if weights is None else replicate[unit_of_row]
        del unit_of_row
        if trials is not None:
            y = np.where(y, trials, 0.0)   # weighted events
    n_at_risk = int(any_risk.sum())
    base = dict(n_person_periods=_count(n_pp, n_pp >= min_cell),
                n_events=_count(n_ev, n_ev >= min_cell),
                # against the panel's count it would give the units never at risk
                n_units=_count(n_at_risk, n_at_risk >= min_cell and
                               not small(n_units - n_at_risk, min_cell)),
                waves_in_model=tuple(labels[i] for i in np.flatnonzero(waves_used)))

    def empty(note, iterations=0):
        return DropoutModel(False, note, **base, odds_ratio_per_sd=None, ci_low=None,
                            ci_high=None, pvalue=None, covariates=(), iterations=iterations)

    if n_ev < min_cell or n_pp - n_ev < min_cell:
        return empty(f"fewer than {min_cell} dropouts or continuers at risk: not fitted")
    # the measure is constant when its extremes meet (a full-length std would cost a
    # temporary of every person-period); the covariates are standardised here
    if len(xt[0]) == 0 or xt[0].min() == xt[0].max() or np.any(xt[1:].std(axis=1) == 0):
        return empty("a predictor is constant over the person-periods: not fitted")
    for j in range(1, xt.shape[0]):  # a loop over covariates
        if trials is None:
            xt[j] = (xt[j] - xt[j].mean()) / xt[j].std()
        else:
            centre = np.average(xt[j], weights=trials)
            xt[j] = (xt[j] - centre) / np.sqrt(np.average((xt[j] - centre) ** 2,
                                                          weights=trials))
    bounds = np.asarray(bounds)
    start = None if cells is not None else _subsample_start(y, xt, bounds, max_iter, trials)
    fit = _newton_logit(y, xt, bounds, max_iter, tol, start, trials)
    if fit is None:
        return empty("the dropout model did not converge (separation or a singular "
                     "information matrix)")
    beta, se, iterations, start = fit
    if weights is None:
        zstat = beta / se
        p = 2 * dist.norm_sf(np.abs(zstat))
        lo, hi = np.exp(beta - Z95 * se), np.exp(beta + Z95 * se)
    else:
        lo, hi, p = _jackknife_logit(y, xt, bounds, trials, row_group, beta, start,
                                     max_iter, tol)
    extra = tuple({"name": name, "odds_ratio_per_sd": float(np.exp(beta[j + 1])),
                   "ci_low": float(lo[j + 1]), "ci_high": float(hi[j + 1]),
                   "pvalue": float(p[j + 1])} for j, name in enumerate(names))
    return DropoutModel(True, "fitted", **base, odds_ratio_per_sd=float(np.exp(beta[0])),
                        ci_low=float(lo[0]), ci_high=float(hi[0]), pvalue=float(p[0]),
                        covariates=extra, iterations=iterations)


def _risk_sets(values: np.ndarray, extra: list[np.ndarray], weights: np.ndarray | None):
    """For each wave s before the last with spread and with both events and
    non-events: (s, the units at risk as a mask, their values, whether each is an event,
    the wave's mean and SD of the observed values)."""
    n_units, t = values.shape
    seen = np.isnan(values)
    np.logical_not(seen, out=seen)   # in place: a units x waves mask less at once
    if weights is not None:
        seen &= (weights > 0)[:, None]   # a unit of weight 0 adds nothing to the fit
    # the last wave a unit is observed at (-1: never): the event at t is t == last
    last = np.argmax(seen[:, ::-1], axis=1)
    np.subtract(t - 1, last, out=last)
    last[~seen.any(axis=1)] = -1
    last = last.astype(np.min_scalar_type(-t))   # int8 up to 127 waves: kept through the loop
    # the last wave each unit is due at, when a cohort's follow-up ends before the panel's
    span = follow_up_span(seen, np.ones(n_units))
    due_end = follow_up_end(seen, span)[1] if span < t else None
    del seen
    for s in range(t - 1):  # a loop over waves
        column = np.ascontiguousarray(values[:, s])   # one strided read, then contiguous
        risk = ~np.isnan(column)
        if weights is not None:
            risk &= weights > 0
        observed = column[risk]
        with np.errstate(invalid="ignore", divide="ignore"):
            if weights is None:
                mean = observed.mean() if len(observed) else np.nan
                observed -= mean   # the deviations, in place (observed is a copy)
                sd = np.sqrt(np.dot(observed, observed) / (len(observed) - 1)) \
                    if len(observed) > 1 else np.nan
            else:
                sd = _weighted_sd(observed, weights[risk]) if len(observed) > 1 else np.nan
                mean = np.average(observed, weights=weights[risk])
        if not sd > 0:
            continue   # no spread at this wave: no standardised value
        if due_end is not None:
            risk &= due_end > s   # no longer at risk after its follow-up
        for w in extra:  # a loop over covariates
            risk &= np.isfinite(w[:, s])
        event = last[risk] == s   # a mask, not row numbers: 8 times smaller
        n_events = int(event.sum())
        if not 0 < n_events < len(event):
            continue   # no events or no non-events: left out (the exact ML limit)
        at = column[risk]
        del column, observed   # not held while the caller works on this wave
        yield s, risk, at, event, mean, sd


def _person_periods(values, extra, weights, waves_used, any_risk):
    """Person-period rows wave by wave: predictor j of wave s's rows is
    xt[j, bounds[s]:bounds[s + 1]] (the measure standardised within the wave, then the
    covariates as they are), y whether the row is an event, and each row's unit. Marks
    the waves and units used."""
    seen = ~np.isnan(values[:, :-1])
    n_rows = int(seen.sum())
    del seen
    xt = np.empty((1 + len(extra), n_rows))
    y = np.empty(n_rows, dtype=bool)
    unit_of_row = np.empty(n_rows, dtype=np.int64)
    bounds = [0]
    for s, risk, at, event, mean, sd in _risk_sets(values, extra, weights):
        waves_used[s] = True
        any_risk |= risk
        lo, hi = bounds[-1], bounds[-1] + len(at)
        np.subtract(at, mean, out=xt[0, lo:hi])
        xt[0, lo:hi] /= sd
        for j, w in enumerate(extra):
            xt[j + 1, lo:hi] = w[risk, s]
        y[lo:hi] = event
        unit_of_row[lo:hi] = np.flatnonzero(risk)
        bounds.append(hi)
    end = bounds[-1]
    return xt[:, :end], y[:end], bounds, unit_of_row[:end]


def _grouped_person_periods(values, weights, replicate, waves_used, any_risk):
    """The person-periods as binomial cells of equal wave and value (and replicate
    group, when weighted, so that the jackknife can leave a group out): (xt with the
    cells' standardised values, events per cell, person-periods per cell, bounds, each
    cell's group or None, person-periods, events). Weighted, a cell's events and
    person-periods are weight sums. None when some wave's values are not on a grid of
    at most 65,536 steps of 10^-d (d <= 3; ``summaries.ranks._counting_index``);
    nothing is marked then. A cell's value is standardised by the same arithmetic as
    its rows would be, so the cells give the rows' likelihood."""
    from paneldiag.summaries.ranks import _counting_index
    k = 1 if weights is None else int(replicate.max()) + 1 if len(replicate) else 1
    parts, n_pp, n_ev = [], 0, 0
    for s, risk, at, event, mean, sd in _risk_sets(values, [], weights):
        index = _counting_index(at)
        if index is None:
            waves_used[:], any_risk[:] = False, False
            return None
        waves_used[s] = True
        any_risk |= risk
        n_pp, n_ev = n_pp + len(at), n_ev + int(event.sum())
        w = None if weights is None else weights[risk]
        if weights is not None:
            index = index * k + replicate[risk]   # cells of one value and group
        trials = np.bincount(index, weights=w).astype(float)
        events = np.bincount(index, weights=event if w is None else np.where(event, w, 0.0),
                             minlength=len(trials))
        value = np.empty(len(trials))
        value[index] = at                  # equal positions hold equal values
        kept = np.flatnonzero(np.bincount(index, minlength=len(trials)))
        z = value[kept]
        z -= mean
        z /= sd
        parts.append((z, events[kept], trials[kept], kept % k))
    bounds = [0] + list(np.cumsum([len(z) for z, _, _, _ in parts]))
    join = (lambda i: np.concatenate([part[i] for part in parts])) if parts else \
        (lambda i: np.empty(0))
    group = join(3).astype(np.int64) if weights is not None else None
    return join(0)[None, :], join(1), join(2), bounds, group, n_pp, n_ev


SUBSAMPLE_STEP = 8          # start values from every event and every 32nd non-event ...
SUBSAMPLE_MIN_ROWS = 1 << 20  # ... when there are at least this many person-periods


def _weighted_sd(x: np.ndarray, w: np.ndarray) -> float:
    """Weighted SD, divisor sum(w) - 1 (the screen's weights average 1)."""
    centre = np.average(x, weights=w)
    return float(np.sqrt(np.dot(w, (x - centre) ** 2) / (w.sum() - 1)))


def _jackknife_logit(y, xt, bounds, row_w, row_group, beta, start, max_iter, tol):
    """Odds-ratio intervals (exp scale) and p-values of the slopes from the
    delete-a-group jackknife: each replicate group's rows (person-periods or cells,
    ``y`` their weighted events, ``row_w`` their weights) get weight 0 and the model
    is refitted from the full estimate. NaN when a refit fails."""
    from paneldiag.summaries.jackknife import jackknife_se
    k = int(row_group.max()) + 1 if len(row_group) else 0
    copies = []
    for g in range(k):  # a loop over replicate groups
        out = row_group == g
        w, events_w = np.where(out, 0.0, row_w), np.where(out, 0.0, y)
        # waves left without events or non-events drop out, as in the full fit
        size = np.add.reduceat(w, bounds[:-1])
        events = np.add.reduceat(events_w, bounds[:-1])
        kept = (events > 0) & (events < size)
        rows = np.concatenate([np.arange(a, b) for a, b, keep in
                               zip(bounds[:-1], bounds[1:], kept) if keep] or [[]]
                              ).astype(np.int64)
        sub_bounds = np.r_[0, np.cumsum(np.diff(bounds)[kept])]
        fit = None
        if kept.any():
            fit = _newton_logit(events_w[rows], xt[:, rows], sub_bounds, max_iter, tol,
                                (start[0][kept], start[1]), w[rows])
        if fit is None:
            nan = np.full(len(beta), np.nan)
            return nan, nan, nan
        copies.append(fit[0])
    se = jackknife_se(beta, np.array(copies))
    q = dist.t_ppf(0.975, k - 1)
    p = 2 * dist.t_sf(np.abs(beta / se), k - 1)
    return np.exp(beta - q * se), np.exp(beta + q * se), p


def _subsample_start(y, xt, bounds, max_iter, row_w=None):
    """Start values (intercepts, slopes) for the full fit from a case-control
    subsample, or None (small data, or the subsample fit fails).

    The subsample keeps every event and every ``SUBSAMPLE_STEP``-th non-event of each
    wave. Sampling on the outcome leaves a logit's slopes consistent and shifts each
    intercept by the log of the non-events' sampling fraction (Prentice and Pyke 1979,
    Biometrika 66, 403-411), which is added back. Events are rare, so keeping them all
    gives intercepts far closer to the estimate than a plain subsample would, and the
    full-data Newton-Raphson needs fewer of its costly steps; it still iterates to its
    own stopping rule, so the estimate is the same."""
    if len(y) < SUBSAMPLE_MIN_ROWS:
        return None
    parts, shifts = [], []
    for a, b in zip(bounds[:-1], bounds[1:]):  # a loop over waves
        events = np.flatnonzero(y[a:b] > 0)
        others = np.flatnonzero(y[a:b] == 0)
        kept = others[::SUBSAMPLE_STEP]
        if len(events) == 0 or len(kept) == 0:
            return None   # a wave without events (or non-events): no start values
        parts.append(a + np.sort(np.concatenate([events, kept])))
        shifts.append(np.log(len(kept) / len(others)))
    rows = np.concatenate(parts)
    sub_bounds = np.concatenate([[0], np.cumsum([len(part) for part in parts])])
    fit = _newton_logit(y[rows], xt[:, rows], sub_bounds, max_iter, 1e-6,
                        weights=None if row_w is None else row_w[rows])
    if fit is None:
        return None
    alpha, beta = fit[3]
    return alpha + np.array(shifts), beta


def _newton_logit(y, xt, bounds, max_iter, tol, start=None, weights=None):
    """Logit with one intercept per level and slopes on the predictors (the rows of
    ``xt``, one row per predictor) by Newton-Raphson;
    returns (slopes, their standard errors, iterations, (intercepts, slopes)) or
    None. The rows of level l are the slice bounds[l]:bounds[l + 1]; the information
    matrix is assembled from per-level sums (the intercept block is diagonal), one
    level's slice at a time, in reused buffers. ``start`` gives (intercepts, slopes)
    to start from; by default the intercepts are the levels' log-odds and the slopes
    zero. With ``weights`` (one per row) the weighted log-likelihood is maximised and
    ``y`` holds each row's weighted events: a row is then a person-period of that
    weight, or a binomial cell of that many (or that weight sum of) person-periods."""
    k = xt.shape[0]
    n_levels = len(bounds) - 1
    xt = np.ascontiguousarray(xt)   # one contiguous row per predictor: dot products
    if weights is None:
        size = np.diff(bounds).astype(float)
        events = np.array([np.count_nonzero(y[a:b])
                           for a, b in zip(bounds[:-1], bounds[1:])], dtype=float)
    else:
        size = np.add.reduceat(weights, bounds[:-1]) if n_levels else np.zeros(0)
        events = np.add.reduceat(y, bounds[:-1]) if n_levels else np.zeros(0)
        if not np.all((events > 0) & (events < size)):
            return None
    alpha = np.log(events / (size - events))
    beta = np.zeros(k)
    if start is not None:
        alpha, beta = np.array(start[0], dtype=float), np.array(start[1], dtype=float)
    longest = int(np.diff(bounds).max())
    prob_buf, r_buf, w_buf = np.empty(longest), np.empty(longest), np.empty(longest)
    wx_buf = np.empty(longest)
    info = None
    for iteration in range(1, max_iter + 1):
        g_alpha, h_alpha = np.empty(n_levels), np.empty(n_levels)
        h_ab = np.empty((n_levels, k))
        g_beta, h_beta = np.zeros(k), np.zeros((k, k))
        for level in range(n_levels):  # a loop over levels (waves)
            a, b = bounds[level], bounds[level + 1]
            xs, n = xt[:, a:b], b - a
            prob, r, w, wx = prob_buf[:n], r_buf[:n], w_buf[:n], wx_buf[:n]
            np.multiply(xs[0], -beta[0], out=prob)
            for j in range(1, k):  # a loop over predictors
                prob -= beta[j] * xs[j]
            prob -= alpha[level]
            with np.errstate(over="ignore"):
                np.exp(prob, out=prob)
            prob += 1.0
            np.reciprocal(prob, out=prob)       # 1 / (1 + exp(-eta))
            np.subtract(1.0, prob, out=w)
            w *= prob
            if weights is None:
                np.subtract(y[a:b], prob, out=r)
            else:
                np.multiply(weights[a:b], prob, out=r)
                np.subtract(y[a:b], r, out=r)
                w *= weights[a:b]
            g_alpha[level], h_alpha[level] = r.sum(), w.sum()
            # einsum, not BLAS: a threaded BLAS dot is far slower on long vectors here
            for j in range(k):  # a loop over predictors
                g_beta[j] += np.einsum("i,i->", r, xs[j])
                np.multiply(xs[j], w, out=wx)
                h_ab[level, j] = wx.sum()
                for i in range(j, k):
                    h_beta[i, j] += np.einsum("i,i->", wx, xs[i])
        h_beta = np.tril(h_beta) + np.tril(h_beta, -1).T
        grad = np.r_[g_alpha, g_beta]
        info = np.block([[np.diag(h_alpha), h_ab], [h_ab.T, h_beta]])
        try:
            step = np.linalg.solve(info, grad)
        except np.linalg.LinAlgError:
            return None
        if not np.all(np.isfinite(step)):
            return None
        alpha = alpha + step[:n_levels]
        beta = beta + step[n_levels:]
        if np.max(np.abs(step)) < tol:
            break   # the last step was negligible: the information is at the estimate
    else:
        return None
    try:
        se = np.sqrt(np.diag(np.linalg.inv(info))[n_levels:])
    except np.linalg.LinAlgError:
        return None
    if np.max(np.abs(beta)) > 20 or not np.all(np.isfinite(se)):
        return None
    return beta, se, iteration, (alpha, beta)


@dataclass(frozen=True)
class Selective(Result):
    by_wave: tuple[DropoutDifference, ...]
    model: DropoutModel

    def to_dict(self) -> dict:
        return {"by_wave": [r.to_dict() for r in self.by_wave], "model": self.model.to_dict()}


# -------------------------------------------------------------------------- section

@dataclass(frozen=True)
class Attrition(Result):
    entry: EntryDesign
    retention: Retention
    unit_types: UnitTypes
    selective: Selective


def measure_dropout_model(ctx) -> DropoutModel:
    """The dropout model of the context's measure (work a screen starts ahead)."""
    weights, groups = None, None
    if ctx.panel.weights is not None:
        from paneldiag.summaries import relative_weights, replicate_groups
        weights = relative_weights(ctx.panel.weights)
        groups = replicate_groups(ctx.panel.unit_ids, ctx.options.n_replicates)
        if np.all(weights == 1.0):   # equal weights: the model-based intervals hold
            weights = groups = None
    return dropout_model(ctx.values, ctx.panel.wave_labels, ctx.panel.covariates,
                         min_cell=ctx.options.min_cell, weights=weights, replicate=groups)


def attrition_section(ctx) -> Attrition:
    """The ``attrition`` block of the report for one measure."""
    patterns = ctx.summaries.get(PatternMoments) or PatternMoments.empty(
        ctx.panel.n_waves, ctx.options.n_replicates)
    labels = ctx.panel.wave_labels
    m = ctx.options.min_cell
    model = computed(ctx, measure_dropout_model)
    return Attrition(entry_design(patterns, labels, m), retention(patterns, labels, m),
                     unit_types(patterns, labels, m),
                     Selective(dropout_differences(patterns, labels, m), model))
