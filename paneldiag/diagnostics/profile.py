"""Wave profile: the distribution of the measure at each wave."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from paneldiag.results import Result, plain
from paneldiag.summaries.moments import WaveMoments


@dataclass(frozen=True)
class WaveRow(Result):
    wave: str
    n: int
    mean: float
    sd: float
    min: float
    max: float
    skewness: float
    floor_share: float
    ceiling_share: float
    distinct: int
    weighted_mean: float | None = None
    weighted_sd: float | None = None


@dataclass(frozen=True)
class WaveProfile(Result):
    rows: tuple[WaveRow, ...]
    floor: float
    ceiling: float

    def to_dict(self) -> list[dict]:  # the JSON key holds the list of rows
        rows = [row.to_dict() for row in self.rows]
        for row in rows:
            if row["weighted_mean"] is None and row["weighted_sd"] is None:
                del row["weighted_mean"], row["weighted_sd"]
        return plain(rows)


def wave_profile(moments: WaveMoments, wave_labels: tuple[str, ...]) -> WaveProfile:
    """Per-wave n, mean, SD (n - 1 divisor), extremes, skewness, floor and ceiling shares.

    Skewness is the moment coefficient g1 = m3 / m2^(3/2) with population moments
    (Joanes and Gill 1998, J. Royal Statistical Society D, eq. for g1; scipy.stats.skew's
    default). The floor and ceiling are the lowest and highest values observed at any
    wave, so shares are comparable across waves (floor and ceiling effects in the sense
    of Terwee et al. 2007, J. Clinical Epidemiology). The weighted SD uses the divisor
    sum(w), an estimate of the population SD under sampling weights.
    """
    n = moments.n
    floor = float(np.min(moments.minimum))
    ceiling = float(np.max(moments.maximum))
    with np.errstate(invalid="ignore", divide="ignore"):
        sd = np.where(n > 1, np.sqrt(moments.m2 / (n - 1)), np.nan)  # none below 2
        skew = np.where(moments.m2 > 0, (moments.m3 / n) / (moments.m2 / n) ** 1.5, np.nan)
        floor_share = np.where(moments.minimum == floor, moments.n_at_min, 0) / n
        ceiling_share = np.where(moments.maximum == ceiling, moments.n_at_max, 0) / n
        wsd = None if moments.weight_sum is None else np.sqrt(moments.weighted_m2 / moments.weight_sum)
    rows = []
    for t, label in enumerate(wave_labels):
        has = n[t] > 0
        rows.append(WaveRow(
            wave=label, n=int(n[t]), mean=float(moments.mean[t]) if has else np.nan,
            sd=float(sd[t]), min=float(moments.minimum[t]) if has else np.nan,
            max=float(moments.maximum[t]) if has else np.nan, skewness=float(skew[t]),
            floor_share=float(floor_share[t]), ceiling_share=float(ceiling_share[t]),
            distinct=int(len(moments.distinct[t])),
            weighted_mean=None if wsd is None else float(moments.weighted_mean[t]),
            weighted_sd=None if wsd is None else float(wsd[t]),
        ))
    return WaveProfile(rows=tuple(rows), floor=floor, ceiling=ceiling)
