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
    free-shape growth  as linear growth, or with free slope loadings (latent basis)
    growth + carry-over intercept and slope + stationary carry-over + error

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
                         else "random intercept and slope")
    error = next((p for p in parts if isinstance(p, Error)), None)
    text = " + ".join(words) or "no dependence"
    return f"{text}, {ERROR_WORDS[error.kind]}" if error is not None else text


def structure(name: str, parts: tuple) -> st.Structure:
    return st.Structure(name, parts, describe(parts))


def _spec(name: str, words: str, parts: tuple, error: str) -> st.Structure:
    return structure(name, parts + (Error(error),))


def family_specs(times: np.ndarray) -> dict[str, list[st.Structure]]:
    """The specifications of every family at these wave times, by family id."""
    basis = tuple(float(v) for v in st.time_basis(np.asarray(times, dtype=float)))
    t = len(times)
    both = ("equal", "wave")
    lin = Growth(basis=basis)
    out = {
        "occasion_noise": [_spec("occasion_noise", "no dependence", (), e) for e in both],
        "stable_trait": [_spec("stable_trait", "stable trait", (Trait(),), e) for e in both],
        "autoregressive": [_spec("autoregressive", "stationary carry-over", (Carry(),), e)
                           for e in both],
        "trait_autoregressive": [_spec("trait_autoregressive",
                                       "stable trait + stationary carry-over",
                                       (Trait(), Carry()), e) for e in both],
        "linear_growth": [_spec("linear_growth", "random intercept and slope", (lin,), e)
                          for e in both],
        "growth_autoregressive": [_spec("growth_autoregressive",
                                        "random intercept and slope + stationary carry-over",
                                        (lin, Carry()), e) for e in both],
    }
    if t >= 4:
        out["autoregressive"] += [
            _spec("autoregressive", "quasi-simplex", (QuasiSimplex(),), e)
            for e in ("equal", "tied_ends")]
        out["trait_autoregressive"] += [
            _spec("trait_autoregressive", "stable trait + quasi-simplex",
                  (Trait(), QuasiSimplex()), e) for e in ("equal", "tied_ends")]
        quad = Growth(basis=basis, order=2)
        free = Growth(basis=basis, free_loadings=True)
        out["quadratic_growth"] = out["linear_growth"] + [
            _spec("quadratic_growth", "random intercept, slope and curvature", (quad,), e)
            for e in both]
        out["free_shape_growth"] = out["linear_growth"] + [
            _spec("free_shape_growth", "random intercept and slope, free loadings", (free,), e)
            for e in both]
    else:
        out["quadratic_growth"] = list(out["linear_growth"])
        out["free_shape_growth"] = list(out["linear_growth"])
    return out
