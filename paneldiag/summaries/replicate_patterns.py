"""Pattern moments kept separately for each replicate group.

``PatternMoments`` pools all units; the delete-a-group jackknife of a statistic that
needs the pattern moments themselves (the EM mean and covariance under missing at
random) needs each group's own. This summary keeps the moments of every cell
(response pattern, replicate group) in one table (``PatternCells``), built in the
same single pass as ``PatternMoments`` (one sort of the units by pattern and group
serves both) and merged across chunks as one table, so the moments with group g left
out pool the other groups' cells (no pass over units).
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property

import numpy as np

from paneldiag.summaries.jackknife import occupied_groups
from paneldiag.summaries.patterns import PatternCells, PatternMoments, shared_pattern_cells


@dataclass(frozen=True)
class ReplicatePatternMoments:
    cells: PatternCells  # moments per (pattern, replicate group)

    shared_pass = staticmethod(shared_pattern_cells)

    @classmethod
    def from_shared(cls, cells: PatternCells) -> "ReplicatePatternMoments":
        return cls(cells)

    @classmethod
    def from_chunk(cls, chunk) -> "ReplicatePatternMoments":
        return cls.from_shared(shared_pattern_cells(chunk))

    @property
    def n_replicates(self) -> int:
        return self.cells.n_replicates

    @cached_property
    def groups(self) -> tuple[PatternMoments, ...]:
        """One ``PatternMoments`` per replicate group."""
        return tuple(self.cells.in_group(g) for g in range(self.n_replicates))

    def merge(self, other: "ReplicatePatternMoments") -> "ReplicatePatternMoments":
        return ReplicatePatternMoments(self.cells.merge(other.cells))

    def pooled(self, drop_group: int | None = None) -> PatternMoments:
        """The pattern moments of all groups (optionally leaving one out)."""
        return self.cells.patterns(drop_group)

    def leave_one_out(self):
        """The pooled moments with each group left out in turn, each pooling the
        other groups' cells; groups without an observed value are skipped."""
        cells = self.cells
        seen = np.bincount(cells.group, weights=cells.n * cells.observed.any(axis=1),
                           minlength=self.n_replicates)
        for g in occupied_groups(seen):  # a loop over replicate groups
            yield self.cells.patterns(drop_group=g)
