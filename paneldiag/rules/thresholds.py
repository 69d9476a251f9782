"""The thresholds table of the verdicts: defaults from ``thresholds.toml``, overridable.

An override file is TOML with plain ``name = value`` lines (or ``[name] value = ...``
tables as in the defaults). Unknown names and values of the wrong kind or outside
their range are refused with an ``InputProblem`` naming the file and the key.
"""

from __future__ import annotations

import tomllib
from dataclasses import dataclass
from importlib import resources
from types import MappingProxyType

from paneldiag.errors import InputProblem

# Allowed range of each threshold: (low, high, integer?)
RANGES = {
    "alpha": (1e-12, 0.5, False),
    "min_correlation": (0.0, 0.99, False),
    "min_stable_share": (0.0, 0.99, False),
    "min_carry_share": (0.0, 0.99, False),
    "min_rho": (0.0, 0.99, False),
    "min_slope_share": (0.0, 0.99, False),
    "min_mean_change_sd": (0.0, 10.0, False),
    "min_shape_sd": (0.0, 10.0, False),
    "max_rmsea": (0.0, 1.0, False),
    "max_srmr": (0.0, 1.0, False),
    "min_cfi": (0.0, 1.0, False),
    "gross_rmsea": (0.0, 1.0, False),
    "bic_margin": (0.0, 1000.0, False),
    "bic_positive": (0.0, 1000.0, False),
    "bic_decisive": (0.0, 10000.0, False),
    "min_power": (0.0, 1.0, False),
    "reliability_negligible": (0.0, 1.0, False),
    "reliability_substantial": (0.0, 1.0, False),
    "flat_loglik": (0.0, 1000.0, False),
    "flat_coefficient": (0.0, 10.0, False),
    "min_waves_separate": (3, 100, True),
    "max_waves_per_wave": (3, 100000, True),
    "min_units": (2, 10 ** 9, True),
    "min_retention": (0.0, 1.0, False),
    "max_dropout_smd": (0.0, 10.0, False),
    "min_categories": (2, 1000, True),
    "max_spacing_ratio": (1.0, 100.0, False),
    "max_flat_decline": (0.0, 1.0, False),
    "max_abs_skew": (0.0, 100.0, False),
    "max_excess_kurtosis": (0.0, 1000.0, False),
    "outlier_alpha": (1e-12, 0.5, False),
}


@dataclass(frozen=True)
class Threshold:
    name: str
    value: float
    reason: str
    source: str


@dataclass(frozen=True)
class Thresholds:
    """The table: ``t["alpha"]`` gives the value; ``t.table`` every row with its reason."""

    table: MappingProxyType
    origin: str = "default"

    def __getitem__(self, name: str) -> float:
        return self.table[name].value

    def values(self) -> dict:
        return {name: row.value for name, row in self.table.items()}

    def overridden(self) -> list[str]:
        return [n for n, row in self.table.items() if row.source.startswith("override")]


def _read_toml(text: str, where: str) -> dict:
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as problem:
        raise InputProblem(f"not a valid TOML rules file: {problem}", file=where) from None


def _check(name, value, where: str):
    if name not in RANGES:
        known = ", ".join(sorted(RANGES))
        raise InputProblem(f"unknown threshold '{name}' (known: {known})", file=where,
                           column=name)
    low, high, integer = RANGES[name]
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise InputProblem(f"threshold '{name}' must be a number, got {value!r}", file=where,
                           column=name)
    if integer and float(value) != int(value):
        raise InputProblem(f"threshold '{name}' must be a whole number, got {value!r}",
                           file=where, column=name)
    if not low <= value <= high:
        raise InputProblem(f"threshold '{name}' must lie in [{low:g}, {high:g}], got {value!r}",
                           file=where, column=name)
    return int(value) if integer else float(value)


def default_thresholds() -> Thresholds:
    text = resources.files("paneldiag.rules").joinpath("thresholds.toml").read_text("utf-8")
    data = _read_toml(text, "thresholds.toml")
    rows = {}
    for name, row in data.items():
        rows[name] = Threshold(name, _check(name, row["value"], "thresholds.toml"),
                               row["reason"], row["source"])
    missing = set(RANGES) - set(rows)
    if missing:  # a packaging bug, not a user problem
        raise RuntimeError(f"thresholds.toml lacks {sorted(missing)}")
    return Thresholds(MappingProxyType(rows))


def load_thresholds(path: str) -> Thresholds:
    """The defaults with the values of the TOML file at ``path`` put in their place."""
    try:
        with open(path, "rb") as handle:
            text = handle.read().decode("utf-8")
    except OSError as problem:
        raise InputProblem(f"cannot read the rules file: {problem.strerror}", file=path) from None
    except UnicodeDecodeError:
        raise InputProblem("the rules file is not UTF-8 text", file=path) from None
    data = _read_toml(text, path)
    base = default_thresholds()
    rows = dict(base.table)
    for name, value in data.items():
        if isinstance(value, dict):
            extra = set(value) - {"value", "reason", "source"}
            if "value" not in value or extra:
                raise InputProblem(f"table [{name}] needs 'value' (and at most 'reason', "
                                   "'source')", file=path, column=name)
            value = value["value"]
        checked = _check(name, value, path)
        rows[name] = Threshold(name, checked, base.table[name].reason if name in base.table
                               else "", f"override from {path}")
    if rows["reliability_substantial"].value > rows["reliability_negligible"].value:
        raise InputProblem("reliability_substantial must not exceed reliability_negligible",
                           file=path, column="reliability_substantial")
    return Thresholds(MappingProxyType(rows), origin=path)
