"""Disclosure control: which counts and shares may be shown. Every output (JSON,
terminal, appendix) asks these functions, so one place decides.

A count of 1 to ``min_cell`` - 1 units is never shown, nor one that gives such a count
by subtraction from a total that is shown, nor a share that gives either back (zero
identifies no unit and may show). Common practice in statistical disclosure control
(Hundepool et al. 2012, Statistical Disclosure Control, Wiley, ch. 5).
"""

from __future__ import annotations

import numpy as np


def small(count, min_cell: int):
    """Counts of 1 to min_cell - 1 (a zero identifies no unit); arrays too."""
    return (count > 0) & (count < min_cell)


def shown_mask(counts, min_cell: int, additive: bool = False) -> np.ndarray:
    """True where a count may be shown.

    A count below ``min_cell`` is never shown (primary suppression). With
    ``additive`` (the counts add up to a total that is shown), the smallest shown
    counts are suppressed too until the suppressed cells hold ``min_cell`` units or
    more together (secondary suppression), so none can be recovered by subtraction.
    When the suppressed cells are all zero nothing more is withheld: a zero that can
    be recovered identifies no unit.
    """
    counts = np.asarray(counts, dtype=float)
    show = counts >= min_cell
    if additive and (~show).any():
        for i in np.argsort(counts, kind="stable"):  # a loop over cells of a small table
            hidden = counts[~show].sum()
            if hidden == 0 or hidden >= min_cell or show.sum() == 0:
                break
            if show[i]:
                show[i] = False
    return show


def count_shown(count, min_cell: int, total=None) -> bool:
    """A count of units may be shown: at least ``min_cell``, and, beside a shown
    ``total`` it is part of, leaving a remainder that is not 1 to min_cell - 1."""
    if count is None:
        return False
    if count < min_cell:
        return False
    return total is None or not small(total - count, min_cell)


def share_shown(share, base, min_cell: int) -> bool:
    """A share of ``base`` units may be shown: the count it stands for is not 1 to
    min_cell - 1 (the units outside it are left to the count of the base)."""
    if share is None or base is None:
        return False
    return not small(round(share * base), min_cell)
