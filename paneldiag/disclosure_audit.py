"""The whole-report disclosure audit: can any count of 1 to ``min_cell`` - 1 units be
derived from the counts a report releases, taken together?

Each section withholds its own small counts (``paneldiag.disclosure``), but sections
release counts of overlapping sets of units: the respondents at each wave, the units
seen at two waves, the entrants, the unit types and leavers, the listed response
patterns, the same tables per group beside the whole panel's, shares beside their bases
and degrees of freedom that are unit counts in disguise. A count withheld in one place
may follow by sums and differences from counts shown elsewhere.

The audit writes every released count as a linear function of unknown cells: the
number of units in each group with each response pattern of the measure (and the
declared missing codes' counts per wave, tied to the units missing there). Given the
released values, linear programming bounds each small cell and each withheld count
(scipy.optimize.linprog, HiGHS). A quantity of 1 to min_cell - 1 units whose feasible
interval is narrower than ``min_cell`` (or pinned) is disclosed; a shown count of
1 to min_cell - 1 is disclosed outright. ``protect_report`` then withholds the smallest
further counts that break the derivation (secondary suppression), and records what it
did in the report's ``disclosure`` block. docs/disclosure.md lists the relations
modelled and the ones that are not.

References
----------
Hundepool, A., Domingo-Ferrer, J., Franconi, L., Giessing, S., Schulte Nordholt, E.,
Spicer, K. and de Wolf, P.-P. (2012). Statistical Disclosure Control, Wiley, ch. 4
(linear programming bounds on suppressed cells, secondary suppression) - from memory.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from paneldiag.diagnostics.attrition import (UNIT_TYPES, end_of_follow_up, follow_up_end,
                                             follow_up_span, response_history,
                                             unit_type_codes)
from paneldiag.disclosure import small
from paneldiag.summaries.patterns import distinct_patterns, pattern_keys

ALL_PATTERNS_LIMIT = 512   # cells: up to this many, every possible pattern of every group
                           # is an unknown; beyond it the patterns that occur in the panel
                           # (in every group: as if an attacker knew which patterns never
                           # occur, a stricter audit that keeps the programs small)
PATTERN_BLOCK_UNITS = 1 << 20   # units whose response patterns are sorted at a time
# Small counts the audit mends one by one, each by its own linear programs (the demo's
# measures have 21-41 pinned by the released counts). Beyond this many, the audit stops
# and says so: most units then have a response pattern of their own (panels of many
# occasions), the pattern is as good as an identifier, and mending would take hours
# (300 units x 70 waves: 289 cells pinned, about 15 minutes; 2,000 x 150: a single
# linear program of 1,552 cells and 11,546 counts took 84 s).
MENDING_LIMIT = 100


class AuditStopped(Exception):
    """The audit cannot be completed at a reasonable cost (the reason, for the report)."""


def check_cost(cells: Cells, min_cell: int) -> None:
    """Stop before any linear program when more than MENDING_LIMIT pattern cells are
    small and they hold most units."""
    truth = cells.truth[:cells.n_patterns]
    few = small(truth, min_cell)
    if few.sum() > MENDING_LIMIT and truth[few].sum() > truth.sum() / 2:
        raise AuditStopped(f"{int(truth[few].sum()):,} of {int(truth.sum()):,} units have a "
                           f"response pattern shared by fewer than {min_cell} units")


# Counts the audit never withholds (all units, the row accounting): it withholds others.
FIXED = frozenset({"panel", "ledger"})


@dataclass
class Count:
    """One count the report shows or withholds: where, as a function of the cells."""

    paths: list            # places in the report holding it (one count may show twice)
    coef: np.ndarray       # over the cells
    value: int | None      # the released value; None: withheld
    true: int              # the value from the data
    nullable: bool = True  # may be withheld (renderers show a withheld count)

    @property
    def label(self) -> str:
        return path_text(self.paths[0])


@dataclass
class Finding:
    """A count of 1 to min_cell - 1 units an attacker can derive (or bound tightly)."""

    what: str              # the count (a report path or a cell)
    true: int
    low: int
    high: int
    coef: np.ndarray = field(repr=False)

    def to_dict(self) -> dict:
        return {"count": self.what, "bounds": [self.low, self.high]}


def path_text(path) -> str:
    return ".".join(str(p) for p in path)


# ------------------------------------------------------------------------ the cells

@dataclass
class Cells:
    """The unknowns: units per (group, response pattern), then missing-code counts
    per (code, wave)."""

    observed: np.ndarray    # (C, T) pattern of each pattern cell
    group: np.ndarray       # (C,) group index (0 without groups)
    truth: np.ndarray       # (C + K,) true counts, pattern cells then code cells
    group_labels: list
    code_cells: list        # (code, wave index) of each code cell
    missing_limits: list    # rows of A_ub: code cells at a wave <= units missing there

    @property
    def n_patterns(self) -> int:
        return len(self.observed)

    def name(self, c: int, wave_labels) -> str:
        if c >= self.n_patterns:
            code, t = self.code_cells[c - self.n_patterns]
            return f"missing code {code} at wave {wave_labels[t]}"
        pattern = "".join("o" if o else "." for o in self.observed[c])
        where = f" in group {self.group_labels[self.group[c]]}" if len(self.group_labels) > 1 \
            else ""
        return f"units with response pattern {pattern}{where}"


def build_cells(observed: np.ndarray, groups, codes: dict) -> Cells:
    """The cells of a measure's panel: ``observed`` (units x waves), the units' groups
    (or None) and the measure's declared missing codes {code: counts by wave}."""
    n, t = observed.shape
    if groups is None:
        labels, gidx = [None], np.zeros(n, dtype=np.int64)
    else:
        labels, gidx = np.unique(groups, return_inverse=True)
        labels = labels.tolist()
    if len(labels) << t <= ALL_PATTERNS_LIMIT:
        unit_pattern = pattern_keys(observed)
        pattern_observed = ((np.arange(1 << t)[:, None] >> np.arange(t)) & 1).astype(bool)
        counts = np.bincount(gidx * len(pattern_observed) + unit_pattern,
                             minlength=len(labels) * len(pattern_observed))
    else:   # the patterns seen (keys are bytes beyond 62 waves)
        pattern_observed, by_group = _pattern_counts(observed, gidx, len(labels))
        counts = by_group.T.reshape(-1)
    cell_observed = np.tile(pattern_observed, (len(labels), 1))
    cell_group = np.repeat(np.arange(len(labels)), len(pattern_observed))
    code_cells = [(code, w) for code in codes for w in range(t)]
    code_truth = [int(codes[code][w]) for code, w in code_cells]
    limits = []
    for w in range(t):   # a loop over waves: the coded units at w are missing at w
        row = np.zeros(len(cell_observed) + len(code_cells))
        row[:len(cell_observed)] = -(~cell_observed[:, w]).astype(float)
        for k, (_, cw) in enumerate(code_cells):
            if cw == w:
                row[len(cell_observed) + k] = 1.0
        if code_cells:
            limits.append(row)
    return Cells(cell_observed, cell_group,
                 np.r_[counts, code_truth].astype(float), labels, code_cells, limits)


def _pattern_counts(observed: np.ndarray, gidx: np.ndarray, n_groups: int
                    ) -> tuple[np.ndarray, np.ndarray]:
    """The distinct rows of ``observed`` in key order and their units by group, (P, G):
    a block of units at a time (sorting every unit's key at once took about 0.4 GB at 10M)."""
    rows = [np.zeros((0, observed.shape[1]), dtype=bool)]   # the empty panel's table
    counts = [np.zeros((0, n_groups), dtype=np.int64)]
    for start in range(0, len(observed), PATTERN_BLOCK_UNITS):  # a loop over blocks
        block = observed[start:start + PATTERN_BLOCK_UNITS]
        first, index = distinct_patterns(block)
        rows.append(block[first])
        counts.append(np.bincount(index * n_groups + gidx[start:start + len(block)],
                                  minlength=len(first) * n_groups).reshape(-1, n_groups))
    table = np.concatenate(rows)
    first, index = distinct_patterns(table)
    total = np.zeros((len(first), n_groups), dtype=np.int64)
    np.add.at(total, index, np.concatenate(counts))
    return table[first], total


def panel_cells(panel, measure: str) -> Cells:
    observed = np.isnan(panel.values[measure])
    np.logical_not(observed, out=observed)   # in place: one units x waves mask at a time
    return build_cells(observed, panel.groups, panel.codes.get(measure, {}))


# ------------------------------------------------------- the counts a report releases

def _get(node, path):
    for key in path:
        if isinstance(node, dict):
            if key not in node:
                return None
        elif not isinstance(node, list) or not isinstance(key, int) or key >= len(node):
            return None
        node = node[key]
    return node


def _count_value(node):
    if isinstance(node, bool) or node is None:
        return None
    if isinstance(node, (int, float)) and float(node).is_integer():
        return int(node)
    return None


class _Collector:
    """Gathers the counts of one report, scope by scope (the whole panel, each group)."""

    def __init__(self, report: dict, cells: Cells, wave_times, min_cell: int):
        self.report, self.cells, self.times, self.m = report, cells, wave_times, min_cell
        self.counts: list[Count] = []
        self.unmodelled: list[str] = []

    def add(self, path, coef, value=None, nullable=True, offset=0, derived=False):
        """A count at ``path`` (its value read there unless given) equal to coef . x;
        ``offset`` turns a degree of freedom into the count it stands for."""
        raw = _get(self.report, path) if value is None and not derived else value
        if value is None and not derived:
            if raw is None and _get(self.report, path[:-1]) is None:
                return
            if raw is not None and _count_value(raw) is None:
                return
            value = None if raw is None else _count_value(raw) + offset
        nullable = nullable and not FIXED.intersection(str(p) for p in path)
        true = int(round(float(coef @ self.cells.truth)))
        if value is not None and value != true:
            self.unmodelled.append(path_text(path))  # our relation is not the report's
            return
        self.counts.append(Count([tuple(path)], coef, value, true, nullable))

    def scope(self, prefix: tuple, in_scope: np.ndarray, whole: bool):
        """The counts of one measure report (``prefix``: where it sits) over the pattern
        cells ``in_scope``."""
        rep = _get(self.report, prefix)
        if not isinstance(rep, dict):
            return
        c = self.cells
        obs, t = c.observed, c.observed.shape[1]
        k_codes = len(c.code_cells)
        truth = c.truth[:c.n_patterns]

        def f(mask, weight=None):
            v = np.where(in_scope & mask, 1.0 if weight is None else weight, 0.0)
            return np.r_[v, np.zeros(k_codes)]

        first, last, k, _ = response_history(obs)
        types = unit_type_codes(obs)
        span = follow_up_span(obs[in_scope], truth[in_scope])
        _, end = follow_up_end(obs, span)
        every = np.ones(len(obs), dtype=bool)
        p = prefix
        self.add(p + ("panel", "n_units"), f(every), nullable=False)
        self.add(p + ("n_units",), f(every), nullable=False)
        self.add(p + ("missingness", "patterns", "n_units"), f(every), nullable=False)
        if whole:
            self.add(p + ("ledger", "units"), f(every), nullable=False)
            self.add(p + ("ledger", "rows_used"), f(every, k), nullable=False)
        for w in range(t):   # loops over waves and small tables of the report
            self.add(p + ("wave_profile", w, "n"), f(obs[:, w]))
            self.add(p + ("distribution", "waves", w, "n"), f(obs[:, w]))
            self.add(p + ("attrition", "retention", w, "n_observed"), f(obs[:, w]))
            self.add(p + ("attrition", "entry", "by_wave", w, "n"), f(first == w))
        for i, row in enumerate(_get(rep, ("attrition", "unit_types")) or []):
            code = UNIT_TYPES.index(row["type"])
            self.add(p + ("attrition", "unit_types", i, "n"), f(types == code))
            for j, _ in enumerate(row.get("last_wave") or []):
                self.add(p + ("attrition", "unit_types", i, "last_wave", j, "n"),
                         f((types == code) & (last == j)))
        for w, _ in enumerate(_get(rep, ("attrition", "selective", "by_wave")) or []):
            if w + 1 < t:
                base = p + ("attrition", "selective", "by_wave", w)
                self.add(base + ("n_continuing",), f(obs[:, w] & obs[:, w + 1]))
                self.add(base + ("n_dropping",), f((last == w) & (end > w)))
        self._patterns(p, rep, f, obs)
        for s in range(t):
            for u in range(s, t):
                pair = f(obs[:, s] & obs[:, u])
                self.add(p + ("missingness", "coverage", "n", s, u), pair)
                for method in ("pearson_pairwise", "pearson_em", "spearman", "polychoric"):
                    self.add(p + ("correlation", "methods", method, "n_pairs", s, u), pair)
        self._lags(p, rep, f, obs)
        g = p + ("growth",)
        self.add(g + ("trajectories", "n_units"), f(k >= 2))
        self.add(g + ("trajectories", "n_units_curvature"), f(k >= 4))
        self.add(g + ("slope_reliability", "n_units"), f(k >= 2))
        # J - 1; the terminal prints the slope test with its df, so the audit keeps it
        self.add(g + ("slope_reliability", "df"), f(k >= 2), offset=1, nullable=False)
        # the ICC's F test on (J - 1, N - J) df: J units seen at least once, N observations
        self.add(g + ("icc", "df_between"), f(k >= 1), offset=1)
        self.add(g + ("icc", "df_within"), f(k >= 1, k - 1.0))
        if whole:
            for r, row in enumerate(_get(rep, ("missingness", "codes", "rows")) or []):
                for w, _ in enumerate(row.get("counts") or []):
                    coef = np.zeros(c.n_patterns + k_codes)
                    if (row["code"], w) in c.code_cells:
                        coef[c.n_patterns + c.code_cells.index((row["code"], w))] = 1.0
                        self.add(p + ("missingness", "codes", "rows", r, "counts", w), coef,
                                 nullable=False)

    def _patterns(self, p, rep, f, obs):
        rows = _get(rep, ("missingness", "patterns", "rows")) or []
        listed = np.zeros(len(obs), dtype=bool)
        for i, row in enumerate(rows):
            want = np.array([ch == "o" for ch in row["pattern"]])
            if len(want) != obs.shape[1]:
                continue
            same = (obs == want).all(axis=1)
            listed |= same
            self.add(p + ("missingness", "patterns", "rows", i, "n"), f(same))
        if rows:
            self.add(p + ("missingness", "patterns", "remainder", "n_units"), f(~listed))

    def _lags(self, p, rep, f, obs):
        from paneldiag.diagnostics.dependence import lag_bands
        profile = _get(rep, ("lag_profile",))
        if not isinstance(profile, list):
            return
        _, bands = lag_bands(self.times)
        for i, (_, _, _, pairs) in enumerate(bands[:len(profile)]):
            weight = sum((obs[:, a] & obs[:, b]).astype(float) for a, b in pairs)
            self.add(p + ("lag_profile", i, "n_pairs"), f(weight > 0, weight))


def _group_comparisons(col: _Collector, whole_obs_span: int):
    """The groups' figures beside each other: the lag-1 pairs and the retention base,
    whose share kept gives the count kept back."""
    c = col.cells
    obs, t = c.observed, c.observed.shape[1]
    k_codes = len(c.code_cells)
    end_due, end_kept = end_of_follow_up(obs, whole_obs_span)
    lag1 = sum((obs[:, a] & obs[:, a + 1]).astype(float) for a in range(t - 1))
    for i, comp in enumerate(_get(col.report, ("groups", "comparison")) or []):
        for j, row in enumerate(comp.get("by_group") or []):
            if row.get("group") not in c.group_labels:
                continue
            mine = c.group == c.group_labels.index(row["group"])
            path = ("groups", "comparison", i, "by_group", j)
            if comp.get("figure") == "lag1_correlation":
                col.add(path + ("n",), np.r_[np.where(mine, lag1, 0.0), np.zeros(k_codes)])
            elif comp.get("figure") == "retention":
                base = np.r_[np.where(mine & end_due, 1.0, 0.0), np.zeros(k_codes)]
                kept = np.r_[np.where(mine & end_kept, 1.0, 0.0), np.zeros(k_codes)]
                n = row.get("n")
                col.add(path + ("n",), base, value=n if n else None, derived=True)
                share = row.get("estimate")
                if n and share is not None:
                    col.add(path + ("estimate",), kept, value=int(round(share * n)),
                            derived=True)
            else:
                col.add(path + ("n",), np.r_[mine.astype(float), np.zeros(k_codes)],
                        nullable=False)


def released_counts(report: dict, cells: Cells, wave_times, min_cell: int
                    ) -> tuple[list[Count], list[str]]:
    """Every count of one measure's report as a function of the cells, and the report
    paths whose value our relations do not reproduce (left out of the audit)."""
    col = _Collector(report, cells, wave_times, min_cell)
    every = np.ones(cells.n_patterns, dtype=bool)
    col.scope((), every, whole=True)
    reports = _get(report, ("groups", "reports")) or {}
    for label in reports:
        if label in cells.group_labels:
            col.scope(("groups", "reports", label),
                      cells.group == cells.group_labels.index(label), whole=False)
    if reports:
        truth = cells.truth[:cells.n_patterns]
        _group_comparisons(col, follow_up_span(cells.observed, truth))
    return merge_same(col.counts), col.unmodelled


def merge_same(counts: list[Count]) -> list[Count]:
    """One entry per distinct count: the places showing the same count together
    (withholding it means withholding it everywhere)."""
    out: dict[bytes, Count] = {}
    for one in counts:
        key = one.coef.tobytes()
        if key in out:
            kept = out[key]
            kept.paths += one.paths
            kept.nullable = kept.nullable and one.nullable
            if kept.value is None:
                kept.value = one.value
        else:
            out[key] = Count(list(one.paths), one.coef, one.value, one.true, one.nullable)
    return list(out.values())


# ------------------------------------------------------------------------ the audit

def _quiet(make):
    """``make()`` with the process's standard output closed: HiGHS writes its banner
    from C++ when a solver is made, and the library never prints."""
    import os
    import sys
    sys.stdout.flush()
    saved = os.dup(1)
    try:
        with open(os.devnull, "w") as null:
            os.dup2(null.fileno(), 1)
            return make()
    finally:
        os.dup2(saved, 1)
        os.close(saved)


def _solver():
    """A quiet HiGHS model, solved by the dual simplex unless told otherwise."""
    import highspy
    h = _quiet(highspy.Highs)
    h.setOptionValue("output_flag", False)
    h.setOptionValue("presolve", "off")   # each solve starts from the last basis
    return h, highspy


TOL = 1e-6   # a linear program's value read as a whole number of units


def _run(h, status):
    """Solve from the last basis; when the simplex stops without an answer (it can,
    rarely, after many warm starts), solve again from scratch."""
    h.run()
    if h.getModelStatus() not in (status.kOptimal, status.kInfeasible, status.kUnbounded,
                                  status.kUnboundedOrInfeasible):
        h.clearSolver()
        h.run()
    return h.getModelStatus()


class Bounds:
    """Linear programming bounds on a count, given the released counts: one HiGHS
    model holds a row per count (an equality while the count is shown, free once it
    is withheld) and each bound is a new objective solved from the last basis."""

    def __init__(self, counts: list[Count], cells: Cells):
        from scipy.sparse import csr_matrix
        self.h, highspy = _solver()
        self.from_basis = False
        self.counts, self.inf = counts, highspy.kHighsInf
        self.row = {id(c): i for i, c in enumerate(counts)}
        n = len(cells.truth)
        self.h.addVars(n, np.zeros(n), np.full(n, self.inf))
        rows = [c.coef for c in counts] + list(cells.missing_limits)
        lower = [self._row(c)[0] for c in counts] + [-self.inf] * len(cells.missing_limits)
        upper = [self._row(c)[1] for c in counts] + [0.0] * len(cells.missing_limits)
        if rows:
            a = csr_matrix(np.array(rows))
            self.h.addRows(len(rows), np.array(lower, float), np.array(upper, float), a.nnz,
                           a.indptr.astype(np.int32), a.indices.astype(np.int32), a.data)
        self.n, self.status = n, highspy.HighsModelStatus

    def _row(self, count: Count) -> tuple[float, float]:
        return (-self.inf, self.inf) if count.value is None else (count.value, count.value)

    def refresh(self, count: Count):
        """Take a count's new value (None: withheld) into the model."""
        self.h.changeRowBounds(self.row[id(count)], *self._row(count))

    def solve(self, objective: np.ndarray):
        """The cells at the minimum of objective . x (None: unbounded, which only a
        maximum can be)."""
        self.h.changeColsCost(self.n, np.arange(self.n, dtype=np.int32),
                              np.asarray(objective, float))
        status = _run(self.h, self.status)
        if not self.from_basis:
            # The first solve, from scratch, by the dual simplex (on the 1M x 20
            # benchmark 0.23 s against the primal's 1.3 s); later ones change only the
            # objective, so the last basis stays feasible and the primal simplex takes
            # a few steps from it (about 5 x quicker than the dual on the demo panel).
            self.h.setOptionValue("simplex_strategy", 4)
            self.from_basis = True
        if status in (self.status.kUnbounded, self.status.kUnboundedOrInfeasible):
            return None
        if status != self.status.kOptimal:
            raise RuntimeError("disclosure audit: linear program failed "
                               f"({self.h.modelStatusToString(status)})")
        return np.asarray(self.h.getSolution().col_value)

    def low(self, coef: np.ndarray) -> int:
        return int(np.ceil(coef @ self.solve(coef) - TOL))

    def high(self, coef: np.ndarray) -> float:
        x = self.solve(-coef)
        return np.inf if x is None else float(np.floor(coef @ x + TOL))


@dataclass
class Target:
    """A small count to protect: a cell of 1 to min_cell - 1 units, or a withheld count
    of as many. ``witness``: cells agreeing with every shown count at which it is 0 or
    at least min_cell (its proof of protection)."""

    what: str
    true: int
    coef: np.ndarray = field(repr=False)
    witness: np.ndarray | None = field(default=None, repr=False)
    low: int = 0
    high: float = np.inf


def protected_at(coef: np.ndarray, x: np.ndarray, min_cell: int) -> bool:
    """The protection range: the count may be 0 (no unit need be there) or min_cell
    or more (it need not be small) at the cells x."""
    value = coef @ x
    return value <= TOL or value >= min_cell - TOL


def _targets(counts: list[Count], cells: Cells, min_cell: int, wave_labels) -> list[Target]:
    n_cells = len(cells.truth)
    found = [Target(cells.name(i, wave_labels), int(cells.truth[i]), np.eye(1, n_cells, i)[0])
             for i in np.flatnonzero(small(cells.truth, min_cell))]
    found += [Target(c.label, c.true, c.coef) for c in counts
              if c.value is None and small(c.true, min_cell)]
    reach = np.zeros(n_cells, dtype=bool)   # cells some shown count involves
    for c in counts:
        if c.value is not None:
            reach |= c.coef != 0
    unique = {}
    for t in found:
        if (reach & (t.coef != 0)).any():
            unique.setdefault(t.coef.tobytes(), t)
    return list(unique.values())


def unprotected(bounds: Bounds, targets: list[Target], min_cell: int,
                first: bool = False, limit: int | None = None) -> list[Target]:
    """The targets the shown counts pin inside 1 .. min_cell - 1 (their ``low`` and
    ``high`` set); every other target gets a witness (``first``: stop at the first
    pinned one; AuditStopped when more than ``limit`` are). Every solution of a linear
    program is a feasible point and settles every target it is a witness for, so the
    least and the greatest of the targets' sum settle most of them at once."""
    pending = list(targets)

    def settle(x):
        nonlocal pending
        if x is not None:
            for t in pending:
                if protected_at(t.coef, x, min_cell):
                    t.witness = x
            pending = [t for t in pending if t.witness is None]
    # a target first tries the side its last witness was on (the least: it was 0)
    zero_first = {id(t): t.witness is not None and t.coef @ t.witness <= TOL for t in pending}
    for t in pending:
        t.witness = None
    for sign in (1.0, -1.0):   # at most a few rounds each
        while len(pending) > 1:
            before = len(pending)
            settle(bounds.solve(sign * np.sum([t.coef for t in pending], axis=0)))
            if len(pending) == before:
                break
    weak = []
    for t in list(pending):   # a loop over the few targets left
        ends = {}
        for sign in ((1.0, -1.0) if zero_first[id(t)] else (-1.0, 1.0)):
            if t not in pending:
                break
            ends[sign] = x = bounds.solve(sign * t.coef)
            if x is None:   # no greatest: it may be min_cell or more
                pending.remove(t)
            settle(x)
        if t in pending:
            t.low = int(np.ceil(t.coef @ ends[1.0] - TOL))
            t.high = float(np.floor(t.coef @ ends[-1.0] + TOL))
            pending.remove(t)
            weak.append(t)
            if first:
                break
            if limit is not None and len(weak) > limit:
                raise AuditStopped(f"the released counts pin more than {limit} counts "
                                   f"of 1 to {min_cell - 1} units")
    return weak


def audit(counts: list[Count], cells: Cells, min_cell: int, wave_labels,
          bounds: Bounds | None = None) -> list[Finding]:
    """The counts of 1 to min_cell - 1 units that are shown, or that the shown counts
    pin inside 1 .. min_cell - 1 (outside the protection range)."""
    found = [Finding(c.label, c.value, c.value, c.value, c.coef) for c in counts
             if c.value is not None and small(c.value, min_cell)]
    targets = _targets(counts, cells, min_cell, wave_labels)
    if targets:
        weak = unprotected(bounds or Bounds(counts, cells), targets, min_cell)
        found += [Finding(t.what, t.true, t.low, int(min(t.high, 2 ** 31)), t.coef)
                  for t in weak]
    return found


# -------------------------------------------------------- what a withheld count costs

# What a reader loses when the audit withholds a count, by the place it is shown (its
# report path's keys, list positions and a group's prefix left out; * any one key).
# A count shown in several places costs its dearest place plus 1 for each further
# place (each a figure emptied: on the demo panel this halves the places emptied for
# as many counts withheld). The mending withholds the cheapest set of counts;
# docs/disclosure.md shows this table.
WITHHOLDING_COSTS = (
    ("attrition.entry.by_wave.n", 1, "entrants at one wave; the entry profile keeps "
     "its other waves"),
    ("attrition.unit_types.last_wave.n", 1, "leavers by last wave, a detail of a unit type"),
    ("missingness.patterns.rows.n", 1, "one listed response pattern; the others stay"),
    ("missingness.patterns.remainder.n_units", 1, "units in the unlisted patterns"),
    ("missingness.coverage.n", 1, "units seen at both waves of a pair, with its share"),
    ("correlation.methods.*.n_pairs", 1, "a pair count beside a correlation that stays"),
    ("lag_profile.n_pairs", 1, "pairs in a lag band; its correlation stays"),
    ("growth.*.n_units*", 2, "units behind a growth figure; the figure stays"),
    ("wave_profile.n", 2, "respondents at a wave, with their response share"),
    ("distribution.waves.n", 2, "respondents at a wave, with their floor and ceiling "
     "shares"),
    ("attrition.retention.n_observed", 2, "respondents at a wave, with the retained and "
     "response shares"),
    ("attrition.unit_types.n", 2, "a unit type's count and share"),
    ("attrition.selective.by_wave.*", 3, "takes the wave's dropout comparison (means, "
     "difference, interval)"),
    ("groups.comparison.by_group.*", 3, "takes the group's figure and interval out of "
     "a comparison across groups"),
    ("growth.icc.df_*", 10, "a test's degrees of freedom: takes the intraclass "
     "correlation's F test and p-value"),
)
OTHER_COST = 2   # a count in no place above


def place_cost(path) -> float:
    """The cost of withholding the count at one report path (WITHHOLDING_COSTS)."""
    from fnmatch import fnmatchcase
    keys = list(path[3:] if path[:2] == ("groups", "reports") else path)
    place = ".".join(k for k in keys if isinstance(k, str))
    return next((cost for pattern, cost, _ in WITHHOLDING_COSTS
                 if fnmatchcase(place, pattern)), OTHER_COST)


def withholding_cost(count: Count) -> float:
    return max(place_cost(p) for p in count.paths) + len(count.paths) - 1


# ------------------------------------------------------------ secondary suppression

class Mending:
    """The cheapest counts to withhold for one target, by linear programming: cells x
    that agree with the non-withheld counts up to deviations d, the target at 0 or at
    min_cell or more, least sum of |d| weighted by each count's withholding cost. The
    counts that deviate are the ones to withhold, and x is then the target's witness
    (the L1 deviation heuristic of cell suppression; cf. Fischetti and
    Salazar-Gonzalez 2001, Management Science 47(7) - from memory)."""

    def __init__(self, counts: list[Count], cells: Cells, targets: list[Target],
                 min_cell: int):
        from scipy import sparse
        self.h, highspy = _solver()
        self.inf, self.status, self.m = highspy.kHighsInf, highspy.HighsModelStatus, min_cell
        self.counts, self.targets = counts, targets
        n, k = len(cells.truth), len(counts)
        self.n, self.k = n, k
        self.cost = np.array([withholding_cost(c) for c in counts])
        lower, upper, cost = self._deviation_bounds()
        self.h.addVars(n, np.zeros(n), np.full(n, self.inf))
        self.h.addVars(2 * k, lower, upper)
        self.h.changeColsCost(2 * k, np.arange(n, n + 2 * k, dtype=np.int32), cost)
        coefs = sparse.csr_matrix(np.array([c.coef for c in counts]))
        eye = sparse.identity(k, format="csr")
        rows = [sparse.hstack([coefs, -eye, eye])]
        if cells.missing_limits:
            rows.append(sparse.hstack([sparse.csr_matrix(np.array(cells.missing_limits)),
                                       sparse.csr_matrix((len(cells.missing_limits), 2 * k))]))
        rows.append(sparse.hstack([sparse.csr_matrix(np.array([t.coef for t in targets])),
                                   sparse.csr_matrix((len(targets), 2 * k))]))
        a = sparse.vstack(rows).tocsr()
        n_limits = len(cells.missing_limits)
        row_low = np.r_[[self._row(c)[0] for c in counts], np.full(n_limits, -self.inf),
                        np.full(len(targets), -self.inf)]
        row_high = np.r_[[self._row(c)[1] for c in counts], np.zeros(n_limits),
                         np.full(len(targets), self.inf)]
        self.h.addRows(a.shape[0], row_low, row_high, a.nnz, a.indptr.astype(np.int32),
                       a.indices.astype(np.int32), a.data)
        self.first_target = k + n_limits

    def _row(self, count: Count):
        return (-self.inf, self.inf) if count.value is None else (count.value, count.value)

    def _deviation_bounds(self):
        """A shown count may deviate (at its cost) if the audit may withhold it."""
        may = np.array([c.value is not None and c.nullable for c in self.counts])
        upper = np.where(may, self.inf, 0.0)
        return np.zeros(2 * self.k), np.r_[upper, upper], np.r_[self.cost, self.cost]

    def refresh(self):
        """Take every count's value (None: withheld) into the model."""
        k = self.k
        lower, upper, _ = self._deviation_bounds()
        self.h.changeColsBounds(2 * k, np.arange(self.n, self.n + 2 * k, dtype=np.int32),
                                lower, upper)
        bounds = np.array([self._row(c) for c in self.counts], float)
        self.h.changeRowsBounds(k, np.arange(k, dtype=np.int32), bounds[:, 0], bounds[:, 1])

    def cheapest(self, target: Target):
        """(cost, counts to withhold, witness) for the cheaper side of the protection
        range (the target at 0, or at min_cell or more); None when neither side can be
        reached by withholding counts."""
        row = self.first_target + next(i for i, t in enumerate(self.targets) if t is target)
        best = None
        for side in ((0.0, 0.0), (float(self.m), self.inf)):
            self.h.changeRowBounds(row, *side)
            if _run(self.h, self.status) != self.status.kOptimal:
                continue   # this side cannot be reached
            values = np.asarray(self.h.getSolution().col_value)
            deviation = values[self.n:self.n + self.k] - values[self.n + self.k:]
            chosen = np.flatnonzero(np.abs(deviation) > TOL)
            option = (float(self.cost[chosen].sum()), chosen.tolist(), values[:self.n])
            if best is None or option[0] < best[0]:
                best = option
        self.h.changeRowBounds(row, -self.inf, self.inf)
        return best


def protect(counts: list[Count], cells: Cells, min_cell: int, wave_labels) -> tuple[
        list[Count], list[Finding]]:
    """Secondary suppression: withhold the least costly counts so that every small count
    is in its protection range (it may be 0, or it may be min_cell or more).

    A shown small count is withheld itself. Each target the shown counts pin is mended
    on its own by the cheapest withholding for it (``Mending``), sharing what earlier
    targets withheld; then each count the mending withheld is shown again, dearest
    first, when every target keeps a witness without it (so no withheld count is
    superfluous). Returns the counts withheld and the findings left."""
    withheld, left = [], []
    for c in counts:
        if c.value is not None and small(c.value, min_cell):
            if c.nullable:
                c.value = None
                withheld.append(c)
            else:
                left.append(Finding(c.label, c.value, c.value, c.value, c.coef))
    targets = _targets(counts, cells, min_cell, wave_labels)
    bounds = Bounds(counts, cells)
    weak = unprotected(bounds, targets, min_cell, limit=MENDING_LIMIT) if targets else []
    if not weak:
        return withheld, left
    mending = Mending(counts, cells, weak, min_cell)
    added, reason = [], {}
    for target in weak:   # a loop over the few pinned targets
        if not unprotected(bounds, [target], min_cell, first=True):
            continue   # mended by an earlier target's withholding
        best = mending.cheapest(target)
        if best is None:
            left.append(Finding(target.what, target.true, target.low,
                                int(min(target.high, 2 ** 31)), target.coef))
            continue
        _, chosen, target.witness = best
        for i in chosen:
            counts[i].value = None
            bounds.refresh(counts[i])
            added.append(counts[i])
            reason[id(counts[i])] = target
        mending.refresh()
    for c in sorted(added, key=lambda c: (-withholding_cost(c), c.label)):
        c.value = c.true   # shown again if every target keeps a witness
        bounds.refresh(c)
        broken = [t for t in targets if t.witness is None
                  or abs(c.coef @ t.witness - c.true) > TOL]
        cause = [t for t in broken if t is reason[id(c)]]   # the likeliest to fail: first
        if any(unprotected(bounds, group, min_cell, first=True)
               for group in (cause, [t for t in broken if t not in cause]) if group):
            c.value = None
            bounds.refresh(c)
    withheld += [c for c in added if c.value is None]
    return withheld, left


@dataclass
class Protection:
    """What the audit did to one measure's report."""

    checked: int = 0                     # counts in the audit
    counts_withheld: int = 0             # distinct counts withheld by the audit
    withheld: list = field(default_factory=list)     # their report paths
    unresolved: list = field(default_factory=list)   # findings it could not mend
    unmodelled: list = field(default_factory=list)   # counts outside the relations
    coarsened: list = field(default_factory=list)    # parts removed whole

    def to_dict(self, min_cell: int) -> dict:
        return {"audited": True, "min_cell": min_cell, "counts_audited": self.checked,
                "counts_withheld": self.counts_withheld, "reason": (
                    "disclosure control: without them, the other counts would pin a count "
                    f"of 1 to {min_cell - 1} units between 1 and {min_cell - 1}"),
                "secondary_suppressions": self.withheld, "removed": self.coarsened,
                "unresolved": self.unresolved, "not_modelled": self.unmodelled}


# --------------------------------------------------------------- the report, mended

# A withheld count takes its figures derived from it along (a share of a shown base
# gives the count back).
SIBLINGS = {"n": ("share", "floor_share", "ceiling_share"), "n_observed": ("response_share", "retained_share"),
            "n_continuing": ("mean_continuing", "smd", "ci_low", "ci_high"),
            "n_dropping": ("mean_dropping", "smd", "ci_low", "ci_high"),
            "df_between": ("df_within", "f", "pvalue"), "df_within": ("df_between", "f", "pvalue")}


def _withhold(report: dict, path: tuple):
    parent = _get(report, path[:-1])
    key = path[-1]
    if isinstance(parent, list):             # a matrix cell: both halves, and its share
        parent[key] = None
        grand = _get(report, path[:-3])
        row, col = path[-2], path[-1]
        matrix = _get(report, path[:-2])
        matrix[col][row] = None
        if isinstance(grand, dict) and isinstance(grand.get("share"), list):
            grand["share"][row][col] = grand["share"][col][row] = None
        return
    parent[key] = None
    if path[-2:-1] and isinstance(path[-2], int) and path[:2] == ("groups", "comparison"):
        for k in ("estimate", "ci_low", "ci_high", "se"):
            parent[k] = None
    for k in SIBLINGS.get(key, ()):
        if k in parent:
            parent[k] = None


def protect_report(report: dict, panel, measure: str, min_cell: int) -> dict:
    """Audit one measure's report (and its group reports), withhold what must be
    withheld, and return its ``disclosure`` block."""
    cells = panel_cells(panel, measure)
    counts, coarsened = [], []
    try:
        check_cost(cells, min_cell)
        counts, unmodelled = released_counts(report, cells, panel.wave_times, min_cell)
        withheld, left = protect(counts, cells, min_cell, panel.wave_labels)
        if left and (report.get("groups") or {}).get("reports"):
            # the groups' tables cannot be mended count by count: they go (coarsening)
            coarsened = ["groups.reports", "groups.comparison"]
            report["groups"]["reports"], report["groups"]["comparison"] = {}, []
            counts, unmodelled = released_counts(report, cells, panel.wave_times, min_cell)
            withheld, left = protect(counts, cells, min_cell, panel.wave_labels)
    except AuditStopped as stop:
        return {"audited": False, "min_cell": min_cell, "counts_audited": len(counts),
                "removed": coarsened, "reason": (
                    f"stopped: {stop}, as in panels of many occasions; each table still "
                    "withholds its own small counts, but check the counts by pair of waves "
                    "and by lag before release")}
    done = Protection(checked=len(counts), counts_withheld=len(withheld),
                      unmodelled=unmodelled, coarsened=coarsened)
    for one in withheld:
        for path in one.paths:
            _withhold(report, path)
            done.withheld.append(path_text(path))
    done.unresolved = [f.to_dict() for f in left]
    return done.to_dict(min_cell)


def disclosure_line(report: dict) -> str | None:
    """The audit in one sentence, for the terminal and the appendix."""
    blocks = [r.get("disclosure") for r in (report.get("measures") or {"": report}).values()]
    blocks = [b for b in blocks if b]
    if not blocks:
        if (report.get("input") or {}).get("options", {}).get("disclosure_audit") is False:
            return ("Disclosure audit: off (--no-disclosure-audit); each table withholds its "
                    "own small counts, but counts were not checked across tables.")
        return None
    m = blocks[0]["min_cell"]
    stopped = [b for b in blocks if not b.get("audited", True)]
    if stopped:
        return (f"Disclosure audit: not completed, {stopped[0]['reason']} (the JSON "
                "report's disclosure block).")
    extra = sum(b.get("counts_withheld", 0) for b in blocks)
    left = sum(len(b["unresolved"]) for b in blocks)
    dropped = any(b.get("removed") for b in blocks)
    line = ("Disclosure audit: all the counts of this report were checked together (sums, "
            "differences, groups beside the whole); ")
    line += (f"{extra} further count{'s were' if extra != 1 else ' was'} withheld so that "
             f"none gives away a count of fewer than {m} units (disclosure control)" if extra
             else f"none gives away a count of fewer than {m} units, so nothing more was "
             "withheld")
    if dropped:
        line += ", and the groups' own tables were removed"
    if left:
        line += (f"; {left} small count{'s' if left != 1 else ''} could still be bounded "
                 "(listed in the JSON report's disclosure block)")
    return line + "."
