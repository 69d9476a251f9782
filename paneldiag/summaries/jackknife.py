"""Delete-a-group jackknife over replicate groups."""

from __future__ import annotations

import numpy as np

from paneldiag import distributions as dist



def jackknife_se(full, replicates) -> np.ndarray:
    """Standard error from K leave-one-group-out estimates (Quenouille 1956;
    delete-a-group form as in Kott 2001, J. Official Statistics):
    se^2 = (K - 1) / K * sum_g (theta_(g) - mean theta_(.))^2.

    ``replicates`` has the K estimates along the first axis; ``full`` is unused in
    the variance itself but fixes the shape. NaN where any replicate is NaN.
    """
    reps = np.asarray(replicates, dtype=float)
    k = reps.shape[0]
    if k < 2:
        return np.full(np.shape(full), np.nan)
    centre = reps.mean(axis=0)
    return np.sqrt((k - 1) / k * ((reps - centre) ** 2).sum(axis=0))


def jackknife_ci(full, replicates, level: float = 0.95):
    """(low, high): full estimate +- t_{K-1} quantile times the jackknife SE."""
    reps = np.asarray(replicates, dtype=float)
    se = jackknife_se(full, reps)
    q = dist.t_ppf(0.5 + level / 2, reps.shape[0] - 1)
    full = np.asarray(full, dtype=float)
    return full - q * se, full + q * se
