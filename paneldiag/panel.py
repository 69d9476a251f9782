"""The Panel: units x waves matrices of each measure, with wave labels and times."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np


@dataclass(frozen=True)
class Panel:
    """What every diagnostic receives; built and checked by ``paneldiag.io.validate``.

    ``values[measure]`` is an (n_units, n_waves) float64 matrix with NaN for a
    missing value. ``codes[measure]`` maps each declared missing code (as text,
    e.g. ``"-9"`` or ``".a"``) to its count per wave. Weights and groups are one
    entry per unit; covariates are (n_units, n_waves) matrices.
    """

    unit_ids: np.ndarray
    wave_labels: tuple[str, ...]
    wave_times: np.ndarray
    values: dict[str, np.ndarray]
    codes: dict[str, dict[str, np.ndarray]] = field(default_factory=dict)
    code_labels: dict[str, dict[str, str]] = field(default_factory=dict)
    weights: np.ndarray | None = None
    groups: np.ndarray | None = None
    covariates: dict[str, np.ndarray] = field(default_factory=dict)
    # A scale measure's items: ``items[measure]`` is (n_units, n_waves, n_items) and
    # ``item_columns[measure]`` names the item columns; values[measure] is their mean.
    items: dict[str, np.ndarray] = field(default_factory=dict)
    item_columns: dict[str, tuple[str, ...]] = field(default_factory=dict)
    # The unit of wave_times (year, quarter, month, week, day; None when unknown) and how
    # the waves were read (``io.waves.WaveReading.describe``).
    time_unit: str | None = None
    wave_reading: dict = field(default_factory=dict)

    @property
    def n_units(self) -> int:
        return len(self.unit_ids)

    @property
    def n_waves(self) -> int:
        return len(self.wave_labels)

    @property
    def measures(self) -> list[str]:
        return list(self.values)

    def subset_units(self, mask: np.ndarray) -> "Panel":
        """The same panel restricted to some units (used for by-group screens)."""
        return Panel(
            unit_ids=self.unit_ids[mask], wave_labels=self.wave_labels,
            wave_times=self.wave_times,
            values={k: v[mask] for k, v in self.values.items()},
            codes=self.codes, code_labels=self.code_labels,
            weights=None if self.weights is None else self.weights[mask],
            groups=None if self.groups is None else self.groups[mask],
            covariates={k: v[mask] for k, v in self.covariates.items()},
            items={k: v[mask] for k, v in self.items.items()},
            item_columns=self.item_columns, time_unit=self.time_unit,
            wave_reading=self.wave_reading,
        )
