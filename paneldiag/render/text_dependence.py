"""Terminal block for temporal dependence: lag profile, decay fit, Markov summary, tests."""

from __future__ import annotations

from paneldiag.render.intake import time_unit
from paneldiag.render import bounds
from paneldiag.render.text import heading, number

SHAPES = {"flat": "flat (no decay with distance: carry-over not identified)",
          "decay_to_zero": "decays towards zero (carry-over, no stable floor)",
          "decay_to_floor": "decays to a floor (stable part plus carry-over)",
          "not_fitted": "not fitted"}


def _bounded(est: dict | None) -> str:
    """A parameter of the lag-profile fit (each lies in 0-1), flagged at a bound."""
    if not est:
        return "–"
    return bounds.text(est["estimate"], est.get("ci_low"), est.get("ci_high")) or "–"


def _p(value) -> str:
    if value is None:
        return "–"
    return "<0.001" if value < 0.001 else f"{value:.3f}"


def _distance(row: dict) -> str:
    if row["basis"] == "time":
        return f"{row['time_distance']:g}"
    return str(row["lag"])


def dependence_block(report: dict, color: bool) -> list[str]:
    corr = report["correlation"]
    scale = corr["scale"] if not corr.get("categories") else \
        f"{corr['scale']}, {len(corr['categories'])} categories"
    lines = [heading(f"Dependence between waves · {corr['primary'].replace('_', ' ')} "
                     f"correlations ({scale})", color)]
    rows = report.get("lag_profile") or []
    basis = "time" if any(r["basis"] == "time" for r in rows) else "lag"
    shown = [r for r in rows if r["basis"] == basis]
    if shown:
        label = f"time distance ({time_unit(report)}s)" if basis == "time" else "lag"
        parts = [f"{_distance(r)}: {number(r['mean_r'], 2)}" for r in shown]
        if len(parts) > 10:   # long panels: the first lags and the longest one
            parts = parts[:8] + ["…", parts[-1]]
        lines.append(f"  mean r by {label}: " + " · ".join(parts))
        first, last = shown[0], shown[-1]
        lines.append(f"    95% intervals (jackknife): {_distance(first)}: "
                     f"[{number(first['ci_low'], 2)}, {number(first['ci_high'], 2)}], "
                     f"{_distance(last)}: [{number(last['ci_low'], 2)}, {number(last['ci_high'], 2)}]")
    fit = report.get("decay_fit")
    if fit:
        lines.append(f"  lag-profile fit r(d) = a + b·rho^d over {fit['points']} distances: "
                     f"{SHAPES.get(fit['shape'], fit['shape'])}")
        if fit["shape"] == "flat":
            lines.append(f"    lag-profile level {_bounded(fit['a'])}")
        elif fit["shape"] != "not_fitted":
            per = time_unit(report) if fit["distance"] == "time" else "wave"
            lines.append(f"    lag-profile floor a {_bounded(fit['a'])}; lag-profile carry-over "
                         f"rho per {per} {_bounded(fit['rho'])}; lag-profile lag-0 a+b "
                         f"{_bounded(fit['intercept'])}; lag-profile stable share "
                         f"{_bounded(fit['stable_share'])}")
        if fit.get("flat_vs_full"):
            lines.append(f"    against flat p {_p(fit['flat_vs_full']['p_value'])}; "
                         f"against pure decay p {_p(fit['pure_decay_vs_full']['p_value'])}")
    markov = report.get("markov")
    if markov and markov["rows"]:
        parts = [f"{r['lag']}: {number(r['mean_partial_r'], 2)} "
                 f"[{number(r['ci_low'], 2)}, {number(r['ci_high'], 2)}]"
                 for r in markov["rows"][:3]]
        lines.append(f"  partial r beyond lag 1, given the waves between "
                     f"({markov['basis'].replace('_', ' ')}), by lag: " + " · ".join(parts))
    st = report.get("stationarity")
    if st:
        eq, bands, var = st["equal_correlations"], st["lag_bands"], st["equal_variances"]
        lines.append(f"  equal correlations at all lags p {_p(eq['p_value'])} · equal within "
                     f"lag bands p {_p(bands['p_value'])} · equal variances p "
                     f"{_p(var['p_value'])}")
    return lines
