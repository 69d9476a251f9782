"""Pattern moments kept separately for each replicate group.

``PatternMoments`` pools all units; the delete-a-group jackknife of a statistic that
needs the pattern moments themselves (the EM mean and covariance under missing at
random) needs each group's own. This summary keeps one ``PatternMoments`` per
replicate group, built in the same single pass and merged group by group, so the
moments with group g left out are the merge of the other groups (no pass over units).
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from paneldiag.summaries.patterns import PatternMoments


@dataclass(frozen=True)
class ReplicatePatternMoments:
    groups: tuple[PatternMoments, ...]  # one per replicate group

    @classmethod
    def from_chunk(cls, chunk) -> "ReplicatePatternMoments":
        k = chunk.n_replicates
        order = np.argsort(chunk.replicate, kind="stable")
        bounds = np.searchsorted(chunk.replicate[order], np.arange(k + 1))
        parts = []
        for g in range(k):  # a loop over replicate groups
            rows = order[bounds[g]:bounds[g + 1]]
            part = replace(chunk, values=chunk.values[rows], replicate=chunk.replicate[rows],
                           weights=None if chunk.weights is None else chunk.weights[rows])
            parts.append(PatternMoments.from_chunk(part))
        return cls(tuple(parts))

    def merge(self, other: "ReplicatePatternMoments") -> "ReplicatePatternMoments":
        return ReplicatePatternMoments(tuple(a.merge(b) for a, b in zip(self.groups,
                                                                        other.groups)))

    def pooled(self, drop_group: int | None = None) -> PatternMoments:
        """The pattern moments of all groups (optionally leaving one out)."""
        keep = [p for g, p in enumerate(self.groups) if g != drop_group]
        total = keep[0]
        for part in keep[1:]:
            total = total.merge(part)
        return total

    def leave_one_out(self):
        """The pooled moments with each group left out in turn, from running merges
        from the front and from the back (about 3K merges rather than K^2)."""
        k = len(self.groups)
        if k < 3:
            for g in range(k):
                yield self.pooled(drop_group=g)
            return
        front = [self.groups[0]]               # front[g]: groups 0..g merged
        for part in self.groups[1:-1]:
            front.append(front[-1].merge(part))
        back = [self.groups[-1]]               # back[j]: groups k-1-j..k-1 merged
        for part in self.groups[-2:0:-1]:
            back.append(back[-1].merge(part))
        yield back[k - 2]
        for g in range(1, k - 1):
            yield front[g - 1].merge(back[k - 2 - g])
        yield front[k - 2]
