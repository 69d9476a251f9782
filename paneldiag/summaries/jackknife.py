"""Delete-a-group jackknife over replicate groups."""

from __future__ import annotations

import numpy as np

from paneldiag import distributions as dist


def occupied_groups(units_per_group) -> np.ndarray:
    """The replicate groups that hold at least one unit with an observed value.

    With few units some of the K hashed groups are empty; leaving an empty group out
    changes nothing, so its copy would only shrink the jackknife variance. The
    delete-a-group jackknife runs over the G occupied groups with the factor (G - 1) / G
    (Efron and Tibshirani 1993, An Introduction to the Bootstrap, ch. 11: the
    delete-one jackknife when every group holds one unit)."""
    return np.flatnonzero(np.asarray(units_per_group) > 0)


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


def jackknife_ci_bounded(full, replicates, level: float = 0.95, low: float = 0.0,
                         high: float = 1.0) -> tuple[float, float, str]:
    """(low, high, scale): a jackknife interval for a quantity bounded by ``low`` and
    ``high`` (a share, a reliability, a correlation), formed on the logit scale of
    (x - low) / (high - low) and mapped back, so it never leaves the bounds (for
    ``low = -1, high = 1`` this is Fisher's z: logit((r + 1) / 2) = 2 artanh r). When
    the estimate or a replicate lies on or outside a bound the transform is undefined:
    the plain interval is returned with scale ``"linear"`` (the renderers mark an end
    beyond a bound). The transformed jackknife: Efron and Tibshirani (1993), An
    Introduction to the Bootstrap, Chapman & Hall, sec. 11.5 and ch. 12 (intervals on a
    variance-stabilising scale); the logit for proportions: Agresti (2002), Categorical
    Data Analysis (2nd ed.), Wiley, sec. 1.4."""
    reps = np.asarray(replicates, dtype=float)
    full = float(full)
    inside = np.isfinite(full) and low < full < high and reps.size > 1 and \
        bool(np.all((reps > low) & (reps < high)))
    if not inside:
        lo, hi = jackknife_ci(full, reps, level) if reps.size > 1 else (np.nan, np.nan)
        return float(lo), float(hi), "linear"
    width = high - low

    def logit(x):
        u = (np.asarray(x, dtype=float) - low) / width
        return np.log(u / (1 - u))

    lo, hi = jackknife_ci(logit(full), logit(reps), level)
    back = [low + width / (1 + np.exp(-v)) for v in (lo, hi)]
    return float(back[0]), float(back[1]), "logit"
