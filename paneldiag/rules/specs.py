"""The specifications each family is judged by: small, nested sets of the structures
practitioners fit, built from parts (``paneldiag.rules.parts``). A family is judged by
the best of its specifications by BIC (``paneldiag.rules.verdicts``).

    occasion noise     error only (one variance, or one per wave: the independence model)
    stable trait       trait + error
    carry-over         stationary carry-over + error; quasi-simplex + error (one, or one
                       per wave with the ends tied)
    trait + carry-over trait + stationary carry-over + error; trait + quasi-simplex + error
    linear growth      intercept and slope on the wave times + error
    quadratic growth   as linear growth, or with a random curvature
    free-shape growth  as linear growth, or with free slope loadings (latent basis), or
                       with loadings on the mean's shape when the mean departs from a
                       quadratic
    growth + carry-over intercept and slope (on the times, or on the mean's shape when it
                       departs from a quadratic) + stationary carry-over + error

Every specification comes with one error variance for all waves and with one per wave
(tied at the ends for the quasi-simplex, whose first and last error variances are not
identified otherwise; Joreskog 1970).
"""

from __future__ import annotations

import numpy as np

from paneldiag.rules import structures as st
from paneldiag.rules.parts import Carry, Error, Growth, QuasiSimplex, Trait

ERROR_WORDS = {"equal": "one error variance", "wave": "an error variance per wave",
               "tied_ends": "an error variance per wave (ends tied)"}


def describe(parts: tuple) -> str:
    """A structure's parts in words, e.g. 'stable trait + quasi-simplex, one error
    variance'."""
    words = []
    for part in parts:
        if isinstance(part, Trait):
            words.append("stable trait")
        elif isinstance(part, Carry):
            words.append("stationary carry-over")
        elif isinstance(part, QuasiSimplex):
            words.append("quasi-simplex")
        elif isinstance(part, Growth):
            words.append("random intercept, slope and curvature" if part.order == 2 else
                         "random intercept and slope, free loadings" if part.free_loadings
                         else "random intercept and slope on the mean's shape"
                         if part.basis_name == "mean" else "random intercept and slope")
    error = next((p for p in parts if isinstance(p, Error)), None)
    text = " + ".join(words) or "no dependence"
    return f"{text}, {ERROR_WORDS[error.kind]}" if error is not None else text


def structure(name: str, parts: tuple) -> st.Structure:
    return st.Structure(name, parts, describe(parts))


def _spec(name: str, parts: tuple, error: str) -> st.Structure:
    return structure(name, parts + (Error(error),))


def family_specs(times: np.ndarray, mean_shape: np.ndarray | None = None
                 ) -> dict[str, list[st.Structure]]:
    """The specifications of every family at these wave times, by family id. Given
    ``mean_shape`` (the mean's shape, 0 at the first wave and 1 at the last, when the
    mean departs from a quadratic), free-shape growth and growth + carry-over also get
    loadings fixed on it."""
    basis = tuple(float(v) for v in st.time_basis(np.asarray(times, dtype=float)))
    lin = Growth(basis=basis)

    def each(name, parts, errors=("equal", "wave")):
        return [_spec(name, parts, e) for e in errors]

    out = {
        "occasion_noise": each("occasion_noise", ()),
        "stable_trait": each("stable_trait", (Trait(),)),
        "autoregressive": each("autoregressive", (Carry(),)),
        "trait_autoregressive": each("trait_autoregressive", (Trait(), Carry())),
        "linear_growth": each("linear_growth", (lin,)),
        "growth_autoregressive": each("growth_autoregressive", (lin, Carry())),
    }
    out["quadratic_growth"] = list(out["linear_growth"])
    out["free_shape_growth"] = list(out["linear_growth"])
    if len(times) >= 4:
        tied = ("equal", "tied_ends")
        out["autoregressive"] += each("autoregressive", (QuasiSimplex(),), tied)
        out["trait_autoregressive"] += each("trait_autoregressive",
                                            (Trait(), QuasiSimplex()), tied)
        out["quadratic_growth"] += each("quadratic_growth", (Growth(basis=basis, order=2),))
        out["free_shape_growth"] += each("free_shape_growth",
                                         (Growth(basis=basis, free_loadings=True),))
    if mean_shape is not None:
        shaped = Growth(basis=tuple(float(v) for v in mean_shape), basis_name="mean")
        out["free_shape_growth"] += each("free_shape_growth", (shaped,))
        out["growth_autoregressive"] += each("growth_autoregressive", (shaped, Carry()))
    return out
