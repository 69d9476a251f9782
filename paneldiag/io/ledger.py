"""The ledger: where every input row went."""

from __future__ import annotations

from dataclasses import dataclass, field

# Why a row did not place a value in the panel, in the order they are checked.
DROP_REASONS = (
    "missing_id",
    "missing_wave",
    "wave_outside_bins",
    "duplicate_unit_wave",
    "non_numeric_value",
    "infinite_value",
    "declared_missing_code",
    "missing_value",
    "no_observed_value",
)


@dataclass(frozen=True)
class Ledger:
    """Row accounting for one measure: rows_read == rows_used + sum(dropped)."""

    rows_read: int
    rows_used: int
    dropped_by_reason: dict[str, int] = field(default_factory=dict)
    units: int = 0
    waves: int = 0
    layout: str = "long"
    cells: dict[str, int] | None = None  # wide data: what happened to each wave cell
    # --wave-bins / --wave-round: the rule and the rows it moved, left out or put together
    wave_grouping: dict | None = None

    @property
    def rows_dropped(self) -> int:
        return sum(self.dropped_by_reason.values())

    def balances(self) -> bool:
        return self.rows_read == self.rows_used + self.rows_dropped

    def to_dict(self) -> dict:
        return {
            "rows_read": self.rows_read,
            "rows_used": self.rows_used,
            "rows_dropped": self.rows_dropped,
            "dropped_by_reason": {k: v for k, v in self.dropped_by_reason.items() if v},
            "units": self.units,
            "waves": self.waves,
            "layout": self.layout,
            **({"cells": dict(self.cells)} if self.cells is not None else {}),
            **({"wave_grouping": dict(self.wave_grouping)} if self.wave_grouping else {}),
        }
