"""Validation: the raw table becomes a Panel, and every row is entered in a ledger.

This is the one place that decides what a row means. Everything downstream trusts
the Panel it receives. The work is vectorised: ids and waves are factorised and
values scattered into the units x waves matrix by integer indexing.
"""

from __future__ import annotations

import os
import re
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from paneldiag.errors import InputProblem
from paneldiag.io.ledger import Ledger
from paneldiag.io.readers import RawTable, column_not_found
from paneldiag.io.waves import (MAX_WAVES, WaveGrouping, WaveReading, check_shared_waves,
                                number_text, read_waves, too_many_waves)
from paneldiag.panel import Panel

DUPLICATE_POLICIES = ("error", "first", "last", "mean")
ID_SEPARATOR = "/"  # a unit id made of several columns is shown as siteA/17
BAD_VALUE_POLICIES = ("error", "drop")

# Per-cell outcome codes, used while classifying values.
OBSERVED, MISSING, CODED, NON_NUMERIC, INFINITE = 0, 1, 2, 3, 4
_CELL_REASON = {MISSING: "missing_value", CODED: "declared_missing_code",
                NON_NUMERIC: "non_numeric_value", INFINITE: "infinite_value"}


@dataclass(frozen=True)
class MissingCodes:
    """Values that stand for a reason of missingness (refused, don't know, ...)."""

    values: tuple[float, ...] = ()
    negative: bool = False

    @classmethod
    def parse(cls, text: str | None) -> "MissingCodes":
        """Parse '-9,-8,-1', 'negative', or both ('negative,99')."""
        if not text:
            return cls()
        values, negative = [], False
        for item in (part.strip() for part in text.split(",")):
            if not item:
                continue
            if item.lower() in ("negative", "<0"):
                negative = True
                continue
            try:
                values.append(float(item))
            except ValueError:
                raise InputProblem(f"--missing-codes: '{item}' is neither a number nor "
                                   "'negative'") from None
        return cls(tuple(values), negative)

    def describe(self) -> str:
        parts = [number_text(v) for v in self.values] + (["negative"] if self.negative else [])
        return ",".join(parts)


@dataclass(frozen=True)
class LayoutSpec:
    """How the file is laid out and what the user asked for."""

    id: str | tuple[str, ...] | None = None  # several columns: the id is their combination
    wave: str | None = None
    values: tuple[str, ...] = ()
    wide: tuple[tuple[str, tuple[str, ...]], ...] = ()
    wave_labels: tuple[str, ...] | None = None
    wave_times: tuple[float, ...] | None = None
    wave_order: str = "natural"
    weight: str | None = None
    group: str | None = None
    covariates: tuple[str, ...] = ()
    missing_codes: MissingCodes = field(default_factory=MissingCodes)
    duplicates: str = "error"
    bad_values: str = "error"
    items: tuple[tuple[str, tuple[str, ...]], ...] = ()  # long data: scale NAME = item columns
    date_format: str | None = None     # day-first, month-first or a strftime pattern
    wave_grouping: WaveGrouping = field(default_factory=WaveGrouping)
    max_waves: int = MAX_WAVES
    memory_limit: int | None = None    # bytes; None: MEMORY_SHARE of the machine's memory

    @property
    def layout(self) -> str:
        return "wide" if self.wide else "long"

    @property
    def id_columns(self) -> tuple[str, ...]:
        if not self.id:
            return ()
        return (self.id,) if isinstance(self.id, str) else tuple(self.id)

    def columns(self) -> list[str]:
        """The file columns this layout needs, in a stable order without repeats."""
        names = [*self.id_columns, self.wave, *self.values]
        for _, cols in (*self.wide, *self.items):
            names.extend(cols)
        names += [self.weight, self.group, *self.covariates]
        return list(dict.fromkeys(n for n in names if n))

    def measure_names(self) -> list[str]:
        if self.wide:
            return [name for name, _ in self.wide]
        return list(self.values) + [name for name, _ in self.items]


def build_panel(raw: RawTable, spec: LayoutSpec) -> tuple[Panel, dict[str, Ledger]]:
    """Check the raw table against the layout and build the Panel and its ledgers."""
    check_spec(spec)
    absent = [c for c in spec.columns() if c not in raw.frame.columns]
    if absent:  # the CLI's reader already checks; this guards direct library calls
        raise column_not_found(absent[0], list(map(str, raw.frame.columns)), raw.source,
                               row=1 if raw.first_row_number == 2 else None)
    panel, ledgers = (_build_wide if spec.layout == "wide" else _build_long)(raw, spec)
    for measure, values in panel.values.items():
        _check_magnitude(raw, measure, values)
    return panel, ledgers


# Squares and cross-products of the values must stay finite and above the smallest
# normal double (about 1e-308): values beyond 1e150, or all within 1e-150 of zero, would
# overflow or vanish in the moments.
LARGEST_VALUE, SMALLEST_SPREAD = 1e150, 1e-150


def _check_magnitude(raw: RawTable, measure: str, values: np.ndarray) -> None:
    observed = np.abs(values[np.isfinite(values)])
    if not len(observed):
        return
    largest = float(observed.max())
    if largest > LARGEST_VALUE:
        raise InputProblem(f"values of '{measure}' reach {largest:.3g}: their squares overflow "
                           f"double precision; rescale the measure (e.g. divide it by "
                           f"1e{int(np.log10(largest)) - 2}) and screen it again",
                           file=raw.source, column=measure)
    if 0 < largest < SMALLEST_SPREAD:
        raise InputProblem(f"values of '{measure}' are all within {largest:.3g} of zero: their "
                           f"squares vanish in double precision; rescale the measure (e.g. "
                           f"multiply it by 1e{-int(np.log10(largest)) - 2}) and screen it again",
                           file=raw.source, column=measure)


def check_spec(spec: LayoutSpec) -> None:
    if spec.duplicates not in DUPLICATE_POLICIES:
        raise InputProblem(f"--duplicates must be one of {', '.join(DUPLICATE_POLICIES)}")
    if spec.layout == "long":
        if not spec.id_columns or not spec.wave:
            raise InputProblem("long data needs --id and --wave (or give --wide columns)")
        if not spec.values and not spec.items:
            raise InputProblem("name at least one measure with --value")
    elif spec.items:
        raise InputProblem("--items is for long data (a row per unit and wave); for wide data "
                           "reshape to long first")
    elif spec.values or spec.wave:
        raise InputProblem("use either --wave/--value (long data) or --wide (wide data), not both")
    names = spec.measure_names()
    if len(set(names)) != len(names):
        raise InputProblem("a measure is named twice")
    if len(set(spec.id_columns)) != len(spec.id_columns):
        raise InputProblem("--id names a column twice")


# ----------------------------------------------------------------------------- long

def _build_long(raw: RawTable, spec: LayoutSpec, fixed: "FixedWaves | None" = None
                ) -> tuple[Panel | None, dict[str, Ledger]]:
    """The panel of a long table. ``fixed`` (a streamed read) gives the waves of the whole
    file; the table is then a block of whole units, whole-file checks are left to the
    caller, and a block without usable rows gives no panel, only its ledger counts."""
    frame = raw.frame
    n_rows = len(frame)
    id_missing = _ids_missing(frame, spec)
    wave_missing = _missing_mask(frame[spec.wave]) & ~id_missing
    for mask, column, what in ((id_missing, _first_missing_id(frame, spec, id_missing),
                                "unit id"), (wave_missing, spec.wave, "wave")):
        if mask.any() and spec.bad_values == "error":
            raise InputProblem(f"missing {what} in {int(mask.sum())} row(s); fix them or pass "
                               "--drop-bad-rows to drop and count them",
                               file=raw.source, row=raw.row_number(np.flatnonzero(mask)[0]),
                               column=column)
    if id_missing.any() or wave_missing.any():
        valid_rows = np.flatnonzero(~id_missing & ~wave_missing)
    else:
        valid_rows = np.arange(n_rows)
    if len(valid_rows) == 0:
        if fixed is not None:
            return None, fixed.empty_ledgers(spec, n_rows, id_missing, wave_missing, 0)
        raise InputProblem("no row has both a unit id and a wave", file=raw.source)
    wave_index, reading, label_index = (_parse_waves(raw, spec, valid_rows) if fixed is None
                                        else fixed.parse(raw, spec, valid_rows))
    outside = wave_index < 0 if spec.wave_grouping.active else np.zeros(0, dtype=bool)
    if outside.any():  # rows beyond the --wave-bins edges
        valid_rows, wave_index, label_index = (a[~outside] for a in
                                               (valid_rows, wave_index, label_index))
        if len(valid_rows) == 0:
            if fixed is not None:
                return None, fixed.empty_ledgers(spec, n_rows, id_missing, wave_missing,
                                                 int(outside.sum()))
            raise InputProblem("no row has a wave inside the --wave-bins edges",
                               file=raw.source, column=spec.wave)
    unit_index, unit_ids = _factorize_ids(frame, spec.id_columns, valid_rows)
    labels, times = reading.labels, _override_times(spec, reading.times, len(reading.labels))
    n_units, n_waves = len(unit_ids), len(labels)
    if fixed is None:
        _check_extent(raw, n_units, n_waves)
        check_memory(spec, n_units, n_waves, raw.source)
        check_shared_waves(np.bincount(wave_index, minlength=n_waves), reading.times,
                           f"the wave column '{spec.wave}'",
                           lambda what: InputProblem(what, file=raw.source, column=spec.wave),
                           spec.wave_grouping, spec.max_waves, reading.kind, n_units)

    cell = unit_index * n_waves + wave_index
    kept, n_duplicate = _resolve_duplicates(raw, spec, cell, valid_rows, unit_ids, labels, n_waves)
    if n_duplicate == 0:  # every row is kept: index with views, not copies
        kept = slice(None)
    rows = valid_rows[kept]
    structural = {"missing_id": int(id_missing.sum()), "missing_wave": int(wave_missing.sum()),
                  "wave_outside_bins": int(outside.sum()), "duplicate_unit_wave": n_duplicate}
    grouping = None
    if spec.wave_grouping.active:
        grouping = _grouping_record(reading, label_index, unit_index, cell, int(outside.sum()))

    values, codes, code_labels, ledgers = {}, {}, {}, {}
    items, item_columns = {}, {}
    for measure in spec.measure_names():
        if spec.duplicates == "mean" and n_duplicate:
            outcome, numbers, code_text, item_numbers = _classify_measure(raw, spec, measure,
                                                                          valid_rows)
            matrix = _cell_means(outcome, numbers, cell, n_units, n_waves)
            if item_numbers is not None:
                items[measure] = np.stack([_cell_means(outcome, v, cell, n_units, n_waves)
                                           for v in item_numbers], axis=2)
            outcome_kept, code_kept, wave_kept = outcome, code_text, wave_index
            reasons = dict(structural, duplicate_unit_wave=0)
        else:
            outcome_kept, numbers, code_kept, item_numbers = _classify_measure(raw, spec, measure,
                                                                              rows)
            wave_kept = wave_index[kept]
            matrix = np.full((n_units, n_waves), np.nan)
            seen = outcome_kept == OBSERVED
            if seen.all():  # scatter by flat cell number, without masked copies
                matrix.reshape(-1)[cell[kept]] = numbers
            else:
                matrix.reshape(-1)[cell[kept][seen]] = numbers[seen]
            if item_numbers is not None:
                cube = np.full((n_units, n_waves, len(item_numbers)), np.nan)
                cube[unit_index[kept][seen], wave_kept[seen], :] = item_numbers[:, seen].T
                items[measure] = cube
            reasons = dict(structural)
        if measure in items:
            item_columns[measure] = dict(spec.items)[measure]
        if fixed is None:  # a streamed read checks the whole matrix at the end
            _require_observed(raw, measure, matrix)
        for code, reason in _CELL_REASON.items():
            reasons[reason] = int((outcome_kept == code).sum())
        used = int((outcome_kept == OBSERVED).sum())
        ledgers[measure] = Ledger(rows_read=n_rows, rows_used=used, dropped_by_reason=reasons,
                                  units=n_units, waves=n_waves, layout="long",
                                  wave_grouping=grouping)
        values[measure] = matrix
        codes[measure] = _code_counts(code_kept, wave_kept, n_waves)
        code_labels[measure] = _code_label_text(raw, measure, codes[measure])

    unit_rows = unit_index[kept]
    panel = Panel(
        unit_ids=unit_ids, wave_labels=labels, wave_times=times, values=values,
        codes=codes, code_labels=code_labels, **_time_basis(spec, reading),
        weights=_unit_weights(raw, spec, rows, unit_rows, unit_ids),
        groups=_unit_groups(raw, spec, rows, unit_rows, unit_ids),
        covariates={c: _scatter(raw, c, rows, unit_rows, wave_index[kept], n_units, n_waves)
                    for c in spec.covariates},
        items=items, item_columns=item_columns,
    )
    return panel, ledgers


def _classify_measure(raw: RawTable, spec: LayoutSpec, measure: str, rows: np.ndarray):
    """Like ``_classify``, plus the item values (K, n) for a scale measure (else None).

    A scale's value is the mean of its items; a row counts as observed only when every
    item is. Otherwise the row gets one reason, the most serious among its items:
    non-numeric, then infinite, then a declared missing code (the first item's code),
    then an empty cell, so each row still enters the ledger exactly once.
    """
    columns = dict(spec.items).get(measure)
    if columns is None:
        return (*_classify(raw, spec, measure, rows, whole_measure=True), None)
    parts = [_classify(raw, spec, column, rows) for column in columns]
    outcomes = np.stack([p[0] for p in parts])
    numbers = np.stack([p[1] for p in parts])
    outcome = np.full(outcomes.shape[1], OBSERVED, dtype=np.int8)
    for code in (MISSING, CODED, INFINITE, NON_NUMERIC):  # later codes take precedence
        outcome[(outcomes == code).any(axis=0)] = code
    code_text = np.full(outcomes.shape[1], None, dtype=object)
    for outcome_i, _, text_i in reversed(parts):  # a loop over items: the first code wins
        coded = outcome_i == CODED
        if coded.any():  # then the item has its code texts
            code_text[coded] = text_i[coded]
    code_text[outcome != CODED] = None
    seen = outcome == OBSERVED
    with np.errstate(invalid="ignore"):
        mean = np.where(seen, numbers.mean(axis=0), np.nan)
    return outcome, mean, code_text, np.where(seen, numbers, np.nan)


def _missing_mask(column: pd.Series) -> np.ndarray:
    mask = column.isna().to_numpy(dtype=bool).copy()
    if not pd.api.types.is_numeric_dtype(column) and not pd.api.types.is_datetime64_any_dtype(column):
        text = column.astype("string").str.strip()
        mask |= (text == "").fillna(False).to_numpy(dtype=bool)
    return mask


def _ids_missing(frame: pd.DataFrame, spec: LayoutSpec) -> np.ndarray:
    """Rows where any column of the unit id is missing."""
    mask = _missing_mask(frame[spec.id_columns[0]])
    for column in spec.id_columns[1:]:
        mask |= _missing_mask(frame[column])
    return mask


def _first_missing_id(frame: pd.DataFrame, spec: LayoutSpec, missing: np.ndarray) -> str:
    if not missing.any():
        return spec.id_columns[0]
    row = int(np.flatnonzero(missing)[0])
    return next(c for c in spec.id_columns if _missing_mask(frame[c].iloc[row:row + 1])[0])


def _factorize_ids(frame: pd.DataFrame, columns: tuple[str, ...],
                   rows: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Unit index per row and the sorted unit ids. An id of several columns is their
    combination, ordered column by column and shown joined by ``ID_SEPARATOR``."""
    parts = [_factorize_column(frame[c], rows) for c in columns]
    if len(parts) == 1:
        return parts[0]
    combined = np.zeros(len(rows), dtype=np.int64)
    for codes, uniques in parts:  # mixed-radix number of the columns' sorted codes
        combined = combined * len(uniques) + codes
    distinct, index = np.unique(combined, return_inverse=True)
    texts = []
    for codes, uniques in reversed(parts):  # the digits back, last column first
        texts.append(np.asarray(uniques).astype(str)[distinct % len(uniques)])
        distinct = distinct // len(uniques)
    ids = texts[-1].astype(object)
    for column_text in reversed(texts[:-1]):
        ids = ids + ID_SEPARATOR + column_text.astype(object)
    return index.astype(np.int64), ids


def _factorize_column(column: pd.Series, rows: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    ids = column.iloc[rows] if len(rows) != len(column) else column
    dense = _dense_integer_codes(ids)
    if dense is not None:
        return dense
    codes, uniques = pd.factorize(_trimmed(ids), sort=True)
    numeric = pd.api.types.is_numeric_dtype(uniques.dtype) and uniques.dtype.kind != "b"
    uniques = np.asarray(uniques, dtype=None if numeric else object)  # int ids stay exact
    if uniques.dtype.kind == "f" and np.all(np.mod(uniques, 1) == 0):
        uniques = uniques.astype(np.int64)
    return codes.astype(np.int64), uniques


def _trimmed(column: pd.Series) -> pd.Series:
    """Text without surrounding spaces: ' H1' and 'H1 ' (padded exports) are the unit H1."""
    if pd.api.types.is_numeric_dtype(column) or pd.api.types.is_datetime64_any_dtype(column):
        return column
    if not isinstance(column.dtype, pd.ArrowDtype):
        column = column.astype("string")
    return column.str.strip()


def _dense_integer_codes(column: pd.Series):
    """Sorted factorisation of a plain integer column whose range is not much wider than
    its length, by direct addressing: (codes int64, sorted uniques int64), as
    ``pd.factorize(sort=True)`` gives; None for any other column."""
    if not (isinstance(column.dtype, np.dtype) and column.dtype.kind == "i") or len(column) == 0:
        return None
    values = column.to_numpy()
    if len(values) > 1:
        steps = values[1:] != values[:-1]
        if np.all(values[1:] >= values[:-1]):
            # sorted (as files written unit by unit are): the codes count the changes,
            # in sequential passes, without the table's random reads and writes
            codes = np.empty(len(values), dtype=np.int64)
            codes[0] = 0
            np.cumsum(steps, out=codes[1:])
            firsts = np.concatenate([[0], np.flatnonzero(steps) + 1])
            return codes, values[firsts].astype(np.int64)
        del steps
    lo, hi = int(values.min()), int(values.max())
    span = hi - lo + 1
    if span > 4 * len(values) + 1024:
        return None
    offset = (values - lo).astype(np.int64, copy=False) if lo else values.astype(np.int64)
    present = np.zeros(span, dtype=bool)
    present[offset] = True
    rank = np.cumsum(present, dtype=np.int64)
    rank -= 1
    np.take(rank, offset, out=offset)  # the codes, written over the offsets
    return offset, (np.flatnonzero(present) + lo).astype(np.int64)


def _check_extent(raw: RawTable, n_units: int, n_waves: int) -> None:
    if n_waves < 2:
        raise InputProblem(f"only {n_waves} wave found; a panel needs at least two waves",
                           file=raw.source)
    if n_units < 2:
        raise InputProblem("only one unit found; a panel needs at least two units",
                           file=raw.source)


# The screen works on a units x waves matrix of doubles per measure (and per item of a
# scale) and on copies of it: summaries by chunk, ranks, trajectories. Its peak memory was
# 12 times one matrix on the benchmark panel of 1,000,000 x 20, reading included
# (docs/performance.md: 1.96 GB); without the reading, about 8.
WORKING_COPIES = 8
MEMORY_SHARE = 0.75   # the default limit: this share of the machine's physical memory


def machine_memory() -> int | None:
    try:
        return os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES")
    except (ValueError, OSError, AttributeError):   # not known on this system
        return None


def check_memory(spec: LayoutSpec, n_units: int, n_waves: int, source: str) -> None:
    """Stop before the units x waves matrices are made when the screen would need more
    memory than the limit (``--memory-limit``; by default three quarters of the
    machine's memory), with the figures and what to do."""
    limit = spec.memory_limit
    if limit is None:
        total = machine_memory()
        if total is None:
            return
        limit, whose = int(MEMORY_SHARE * total), "three quarters of this machine's memory"
    else:
        whose = "--memory-limit"
    matrices = len(spec.measure_names()) + sum(len(cols) for _, cols in spec.items)
    matrix = 8 * n_units * n_waves
    needed = WORKING_COPIES * matrix * matrices
    if needed > limit:
        raise InputProblem(
            f"{n_units:,} units x {n_waves:,} waves x {matrices} measure(s) make matrices of "
            f"{size_text(matrix * matrices)} and the screen needs about {WORKING_COPIES} times "
            f"that, {size_text(needed)}, more than the limit of {size_text(limit)} ({whose}): "
            "screen a sample of the units, fewer waves or one measure at a time, or raise the "
            f"limit with --memory-limit SIZE (e.g. --memory-limit "
            f"{size_text(needed * 1.25).replace(' ', '')})", file=source)


def size_text(n_bytes: float) -> str:
    """A size in bytes written with its binary unit: 1.5 GiB, 320 MiB."""
    for unit, power in (("TiB", 40), ("GiB", 30), ("MiB", 20), ("KiB", 10)):
        if n_bytes >= 2 ** power:
            value = n_bytes / 2 ** power
            return f"{value:.3g} {unit}" if value < 100 else f"{value:.0f} {unit}"
    return f"{int(n_bytes)} B"


SIZE_UNITS = {"": 1, "B": 1, "KB": 10**3, "MB": 10**6, "GB": 10**9, "TB": 10**12,
              "K": 2**10, "M": 2**20, "G": 2**30, "T": 2**40,
              "KIB": 2**10, "MIB": 2**20, "GIB": 2**30, "TIB": 2**40}


def parse_size(text, option: str = "--memory-limit") -> int | None:
    """Bytes of a size: '2GB', '500MB' (powers of 1000), '8G', '1.5GiB' (powers of
    1024), 2000000000. None stays None."""
    if text is None:
        return None
    match = re.fullmatch(r"\s*([0-9]*\.?[0-9]+)\s*([A-Za-z]*)\s*", str(text))
    unit = match.group(2).upper() if match else None
    if not match or unit not in SIZE_UNITS or float(match.group(1)) <= 0:
        raise InputProblem(f"{option} takes a size such as 2GB, 500MB or 8G, got '{text}'")
    return int(float(match.group(1)) * SIZE_UNITS[unit])


def _parse_waves(raw: RawTable, spec: LayoutSpec, rows: np.ndarray):
    """Wave index per row (-1 outside the --wave-bins), the reading of the waves, and the
    index of each row's distinct label (for the grouping record)."""
    column = raw.frame[spec.wave]
    column = column.iloc[rows] if len(rows) != len(column) else column
    dense = _dense_integer_codes(column)  # integer waves: codes already in sorted order
    codes, uniques = dense if dense is not None else pd.factorize(_trimmed(column), sort=False)
    codes = codes.astype(np.int64, copy=False)

    def problem(what: str, index: int | None = None) -> InputProblem:
        row = None if index is None else raw.row_number(rows[np.flatnonzero(codes == index)[0]])
        return InputProblem(what, file=raw.source, row=row, column=spec.wave)

    if len(uniques) > spec.max_waves and not spec.wave_grouping.active:
        # before the labels are read one by one (dates, natural order) and before any
        # matrix of units by waves is made: a column of continuous time stops here
        numbers = np.sort(np.asarray(uniques, dtype=float)) if dense is not None else None
        raise problem(too_many_waves(f"the wave column '{spec.wave}'", len(uniques),
                                     spec.max_waves, numbers,
                                     "text" if numbers is None else "numbers"))

    reading = read_waves(uniques, f"the wave column '{spec.wave}'", problem, spec.date_format,
                         spec.wave_order, spec.wave_grouping)
    if np.array_equal(reading.position, np.arange(len(uniques))):  # codes follow wave order
        return codes, reading, codes
    return reading.position[codes], reading, codes


def _time_basis(spec: LayoutSpec, reading: WaveReading) -> dict:
    """The Panel's time unit and how its waves were read (times given override both)."""
    if spec.wave_times is not None:
        return {"time_unit": None, "wave_reading": {"read_as": reading.kind,
                                                    "times": "given with --wave-times"}}
    return {"time_unit": reading.unit, "wave_reading": reading.describe()}


def _grouping_record(reading: WaveReading, label_index, unit_index, cell, n_outside) -> dict:
    """What --wave-bins or --wave-round did to the rows: moved to another wave label, left
    outside the bins, or landed in a wave already holding a row of their unit."""
    n_labels = len(reading.position)
    before = unit_index * n_labels + label_index
    repeats_before = len(before) - len(np.unique(before))
    repeats_after = len(cell) - len(np.unique(cell))
    return {"rule": reading.grouping,
            "rows_moved": int(reading.moved[label_index].sum()),
            "rows_outside": n_outside,
            "rows_sharing_a_wave": int(repeats_after - repeats_before)}


def _override_times(spec: LayoutSpec, times: np.ndarray, n_waves: int) -> np.ndarray:
    if spec.wave_times is None:
        return np.asarray(times, dtype=float)
    if len(spec.wave_times) != n_waves:
        raise InputProblem(f"--wave-times gives {len(spec.wave_times)} times for {n_waves} waves")
    given = np.array(spec.wave_times, dtype=float)
    if not np.all(np.diff(given) > 0):
        raise InputProblem("--wave-times must increase from wave to wave")
    return given


def _resolve_duplicates(raw, spec, cell, valid_rows, unit_ids, labels, n_waves):
    """Positions (into valid_rows) of the rows kept, and the number of duplicates."""
    if len(cell) < 2 or bool(np.all(cell[1:] > cell[:-1])):  # sorted rows: no repeats
        return slice(None), 0  # every row, without an index array
    counts = np.bincount(cell, minlength=len(unit_ids) * n_waves)
    n_duplicate = int(len(cell) - np.count_nonzero(counts))
    if n_duplicate == 0:
        return np.arange(len(cell)), 0
    if spec.duplicates == "error":
        if raw.refusals is None:
            raise _duplicates_problem(raw, spec, cell, counts, valid_rows, unit_ids, labels,
                                      n_waves)
        _note_duplicates(raw, spec, cell, counts, valid_rows, unit_ids, labels, n_waves)
        return np.arange(len(cell)), n_duplicate  # the run stops once the file is read
    if spec.duplicates == "mean":
        return np.arange(len(cell)), n_duplicate
    order = np.argsort(cell, kind="stable")
    sorted_cells = cell[order]
    if spec.duplicates == "first":
        boundary = np.r_[True, sorted_cells[1:] != sorted_cells[:-1]]
    else:
        boundary = np.r_[sorted_cells[1:] != sorted_cells[:-1], True]
    return np.sort(order[boundary]), n_duplicate


def _repeated_pairs(raw, cell, counts, valid_rows, unit_ids, labels, n_waves, limit=3):
    """Positions of the repeated rows and the first few repeated pairs, as shown."""
    wide = labels == ("",)
    dup_positions = np.flatnonzero(counts[cell] > 1)
    shown = []
    for c in pd.unique(cell[dup_positions])[:limit]:  # name the first few repeated pairs
        same = dup_positions[cell[dup_positions] == c][:2]
        lines = " and ".join(str(raw.row_number(valid_rows[p])) for p in same)
        where = "" if wide else f" at wave {labels[c % n_waves]}"
        shown.append(f"{unit_ids[c // n_waves]}{where} (rows {lines})")
    return dup_positions, shown


def _note_duplicates(raw, spec, cell, counts, valid_rows, unit_ids, labels, n_waves):
    """A block's repeated pairs, for the message given once the whole file is read (the
    remedy naming an outer id column needs every column of the file: not looked for)."""
    already = raw.refusals.noted.get(("duplicates",))
    room = 3 - (len(already[3]) if already else 0)
    dup_positions, shown = _repeated_pairs(raw, cell, counts, valid_rows, unit_ids, labels,
                                           n_waves, limit=max(room, 0))
    row, source = raw.row_later(valid_rows[dup_positions[0]]), raw.source

    def problem(n_cells: int, items=()) -> InputProblem:
        return _duplicates_message(spec, n_cells, list(items), None, False, source, row())
    _stop(raw, ("duplicates",), int(np.count_nonzero(counts > 1)), problem, items=shown)


def _duplicates_problem(raw, spec, cell, counts, valid_rows, unit_ids, labels, n_waves):
    """The repeated unit-wave rows (or ids, in wide data), with the likeliest remedy."""
    wide = labels == ("",)
    dup_positions, shown = _repeated_pairs(raw, cell, counts, valid_rows, unit_ids, labels,
                                           n_waves)
    n_cells = int(np.count_nonzero(counts > 1))
    outer = _outer_id_column(raw, spec, cell // n_waves, cell % n_waves, valid_rows,
                             dup_positions, wide)
    return _duplicates_message(spec, n_cells, shown, outer, wide, raw.source,
                               raw.row_number(valid_rows[dup_positions[0]]))


def _duplicates_message(spec, n_cells, shown, outer, wide, source, row) -> InputProblem:
    what = "unit id(s) appear in more than one row" if wide else \
        "unit-wave pair(s) appear more than once"
    more = ", ..." if n_cells > len(shown) else ""
    if outer is not None:
        ids = " ".join(f"--id {c}" for c in (outer, *spec.id_columns))
        remedy = (f"the repeated ids differ in '{outer}', which is constant within each unit: "
                  f"the ids look unique only within '{outer}'; give both, {ids}")
    elif spec.wave_grouping.active and not wide:
        what += " after grouping the waves"
        remedy = "choose --duplicates mean (the average of a unit's rows in a wave), first or last"
    else:
        remedy = f"choose --duplicates first{' or last' if wide else ', last or mean'}"
    return InputProblem(f"{n_cells} {what}: {', '.join(shown)}{more}; {remedy}",
                        file=source, row=row, column=ID_SEPARATOR.join(spec.id_columns))


def _outer_id_column(raw, spec, unit_index, wave_index, valid_rows, dup_positions, wide):
    """A column of the file, coarser than the id, that tells the repeated rows apart and
    is constant within the ids that are not repeated (a site, a school): the ids are then
    probably unique only within it. None when there is none or the file cannot be read
    again (standard input). Runs only on the way to an error."""
    if raw.all_columns is None:
        return None
    try:
        frame = raw.all_columns()
    except InputProblem:
        return None
    frame = frame.iloc[valid_rows].reset_index(drop=True)
    n_ids = int(unit_index.max()) + 1
    repeated = np.isin(unit_index, np.unique(unit_index[dup_positions]))
    found = []
    for name in frame.columns:  # a loop over columns
        if name in spec.columns():
            continue
        codes = pd.factorize(frame[name], use_na_sentinel=False)[0].astype(np.int64)
        n_values = int(codes.max()) + 1
        if n_values >= n_ids:
            continue
        units = unit_index * n_values + codes
        cells = units * max(int(wave_index.max()) + 1, 1) + wave_index
        if len(np.unique(cells)) != len(cells):
            continue  # the rows stay repeated with it
        single = units[~repeated]
        if len(np.unique(single)) != len(np.unique(unit_index[~repeated])):
            continue  # it varies within ids that are not repeated
        if not wide and len(units) <= len(np.unique(units)):
            continue  # with it every unit would hold one row
        found.append((n_values, name))
    return min(found)[1] if found else None


def _classify(raw: RawTable, spec: LayoutSpec, column: str, rows: np.ndarray,
              whole_measure: bool = False):
    """Outcome per row, the numeric value, and the declared code text (or None). When
    the column is a whole measure (long data), text in every filled cell stops the run
    even with --drop-bad-rows: nothing would be left to screen."""
    series = raw.frame[column]
    series = series.iloc[rows] if len(rows) != len(series) else series
    n = len(series)
    outcome = np.full(n, OBSERVED, dtype=np.int8)
    if pd.api.types.is_numeric_dtype(series) and not pd.api.types.is_bool_dtype(series):
        numbers = series.to_numpy(dtype=float, na_value=np.nan)
    else:
        numbers = pd.to_numeric(series, errors="coerce").to_numpy(dtype=float, na_value=np.nan)
        text_bad = series.notna().to_numpy(dtype=bool) & np.isnan(numbers)
        if column in raw.tagged_missing:
            text_bad &= pd.isna(raw.tagged_missing[column][rows])
        outcome[text_bad] = NON_NUMERIC
        # (a streamed block is part of the column: its cells are refused one by one)
        if whole_measure and raw.refusals is None and text_bad.any() \
                and not np.isfinite(numbers).any():
            i = int(np.flatnonzero(text_bad)[0])
            example = _shown_value(series.iloc[i])
            raise InputProblem(
                f"the column '{column}' holds text, not numbers: none of its "
                f"{int(text_bad.sum()):,} filled cells is a number (e.g.{example} here); a "
                "measure must be numeric: recode its categories as numbers "
                "(1, 2, 3, ...) or name a numeric column",
                file=raw.source, row=raw.row_number(rows[i]), column=column)
        _refuse(raw, spec, column, rows, text_bad, "non-numeric value",
                lambda i: _shown_value(series.iloc[i]))
    infinite = np.isinf(numbers)
    outcome[infinite] = INFINITE
    _refuse(raw, spec, column, rows, infinite, "infinite value", lambda i: "")
    code_text = None  # an object array only once some cell carries a code
    coded = np.zeros(n, dtype=bool)
    finite = np.isfinite(numbers)
    declared = np.zeros(n, dtype=bool)
    for lo, hi in raw.declared_ranges.get(column, []):
        declared |= finite & (numbers >= lo) & (numbers <= hi)
    if spec.missing_codes.values:
        declared |= np.isin(numbers, spec.missing_codes.values)
    if spec.missing_codes.negative:
        declared |= finite & (numbers < 0)
    if declared.any():
        distinct, position = np.unique(numbers[declared], return_inverse=True)
        texts = np.array([number_text(v) for v in distinct], dtype=object)  # per code
        code_text = np.full(n, None, dtype=object)
        code_text[declared] = texts[position]
        coded |= declared
    if column in raw.tagged_missing:
        tags = raw.tagged_missing[column][rows]
        has_tag = ~pd.isna(tags)
        if has_tag.any():
            code_text = np.full(n, None, dtype=object) if code_text is None else code_text
            code_text[has_tag] = tags[has_tag]
        coded |= has_tag
    outcome[coded] = CODED
    outcome[(outcome == OBSERVED) & np.isnan(numbers)] = MISSING
    return outcome, numbers, code_text


def _refuse(raw, spec, column, rows, mask, what, detail) -> None:
    if mask.any() and spec.bad_values == "error":
        i = int(np.flatnonzero(mask)[0])
        shown, row, source = detail(i), raw.row_later(rows[i]), raw.source

        def problem(count: int, _items=()) -> InputProblem:
            return InputProblem(
                f"{what}{shown} in {count} cell(s) of '{column}'; fix them or pass "
                "--drop-bad-rows to drop and count them", file=source, row=row(),
                column=column)
        _stop(raw, (column, what), int(mask.sum()), problem)


def _stop(raw, key, count, problem, order=None, items=()) -> None:
    """Raise ``problem(count, items)`` now, or, in a block of a streamed read, note it."""
    if raw.refusals is None:
        raise problem(count, items)
    raw.refusals.note(key, count, problem, order, items)


class Refusals:
    """The problems met block by block in a streamed read. Once the whole file is seen,
    ``raise_first`` raises the one an in-memory read raises: the first in the order of
    the checks, with its count over the whole file and its first row (or, for a check
    over units, the first unit in id order)."""

    def __init__(self, spec: LayoutSpec):
        keys = [("duplicates",)]
        for measure in spec.measure_names():
            for column in dict(spec.items).get(measure, (measure,)):
                keys += [(column, "non-numeric value"), (column, "infinite value")]
            keys.append(("no observed value", measure))
        keys += [("varies", spec.weight), ("bad weight",), ("varies", spec.group)]
        self.rank = {key: i for i, key in enumerate(keys)}
        self.noted: dict = {}  # key -> [count, problem, order, items]

    def note(self, key, count, problem, order=None, items=()) -> None:
        entry = self.noted.get(key)
        if entry is None:
            self.noted[key] = [count, problem, order, list(items)]
            return
        entry[0] += count
        if order is not None and order < entry[2]:
            entry[1], entry[2] = problem, order
        entry[3] += list(items)[:max(0, 3 - len(entry[3]))]

    def raise_first(self) -> None:
        if self.noted:
            key = min(self.noted, key=self.rank.__getitem__)
            count, problem, _, items = self.noted[key]
            raise problem(count, items)


def _shown_value(value) -> str:
    text = str(value)
    if re.fullmatch(r"\s*[-+]?\d+,\d+\s*", text):
        return f" '{text}' (a decimal comma? write numbers with a decimal point)"
    return f" '{text}'"


def _cell_means(outcome, numbers, cell, n_units, n_waves) -> np.ndarray:
    seen = outcome == OBSERVED
    size = n_units * n_waves
    totals = np.bincount(cell[seen], weights=numbers[seen], minlength=size)
    counts = np.bincount(cell[seen], minlength=size)
    with np.errstate(invalid="ignore", divide="ignore"):
        return (totals / counts).reshape(n_units, n_waves)


def _require_observed(raw, measure, matrix) -> None:
    if not np.isfinite(matrix).any():
        raise no_observed_value(raw.source, measure)


def no_observed_value(source: str, measure: str) -> InputProblem:
    return InputProblem(f"measure '{measure}' has no observed value", file=source,
                        column=measure)


def _code_counts(code_text: np.ndarray | None, wave_index: np.ndarray, n_waves: int) -> dict:
    if code_text is None:
        return {}
    present = ~pd.isna(code_text)
    if not present.any():
        return {}
    codes, uniques = pd.factorize(pd.Series(code_text[present]), sort=True)
    waves = wave_index[present]
    counts = {}
    for k, code in enumerate(uniques):
        counts[str(code)] = np.bincount(waves[codes == k], minlength=n_waves)
    return counts


def _code_label_text(raw: RawTable, column: str, counts: dict) -> dict[str, str]:
    labels = raw.value_labels.get(column, {})
    by_text = {number_text(k): v for k, v in labels.items()}
    return {code: by_text[code] for code in counts if code in by_text}


def _unit_weights(raw, spec, rows, unit_rows, unit_ids):
    if not spec.weight:
        return None
    values = _unit_constant(raw, spec.weight, rows, unit_rows, unit_ids, numeric=True)
    bad = ~np.isfinite(values) | (values < 0)
    if bad.any():
        first = int(np.flatnonzero(bad)[0])
        row = raw.row_later(rows[np.flatnonzero(unit_rows == first)[0]])
        unit, source = unit_ids[first], raw.source

        def problem(count: int, _items=()) -> InputProblem:
            return InputProblem(f"weight is missing, negative or infinite for {count} "
                                f"unit(s), first unit {unit}", file=source, row=row(),
                                column=spec.weight)
        _stop(raw, ("bad weight",), int(bad.sum()), problem, order=unit)
    if raw.refusals is None:   # a streamed block: checked on the whole file (io.stream)
        check_some_weight(values, raw.source, spec.weight)
    return values


def check_some_weight(values: np.ndarray, source, column: str) -> None:
    if len(values) and not values.sum() > 0:
        raise InputProblem("weight is 0 for every unit: nothing to weight by",
                           file=source, column=column)


def _unit_groups(raw, spec, rows, unit_rows, unit_ids):
    if not spec.group:
        return None
    return _unit_constant(raw, spec.group, rows, unit_rows, unit_ids, numeric=False)


def _unit_constant(raw, column, rows, unit_rows, unit_ids, numeric):
    """One value per unit from a column that must not vary within a unit."""
    series = raw.frame[column].iloc[rows].reset_index(drop=True)
    if numeric:
        series = pd.to_numeric(series, errors="coerce")
    else:
        series = series.astype("string")
    grouped = pd.DataFrame({"unit": unit_rows, "value": series}).groupby("unit")["value"]
    first, distinct = grouped.first(), grouped.nunique()
    if (distinct > 1).any():
        unit_pos = int(distinct.index[np.flatnonzero(distinct.to_numpy() > 1)[0]])
        row = raw.row_later(rows[np.flatnonzero(unit_rows == unit_pos)[0]])
        unit, source = unit_ids[unit_pos], raw.source

        def problem(_count=0, _items=()) -> InputProblem:
            return InputProblem(f"'{column}' varies within unit {unit}; it must be "
                                "constant for a unit", file=source, row=row(), column=column)
        _stop(raw, ("varies", column), 0, problem, order=unit)
    out = first.reindex(range(len(unit_ids)))
    if numeric:
        return out.to_numpy(dtype=float, na_value=np.nan)
    return out.fillna("(none)").to_numpy(dtype=object).astype(str)


def _scatter(raw, column, rows, unit_rows, wave_rows, n_units, n_waves):
    numbers = pd.to_numeric(raw.frame[column].iloc[rows], errors="coerce").to_numpy(
        dtype=float, na_value=np.nan)
    matrix = np.full((n_units, n_waves), np.nan)
    matrix[unit_rows, wave_rows] = numbers
    return matrix


# ----------------------------------------------------------------------------- wide

def _build_wide(raw: RawTable, spec: LayoutSpec) -> tuple[Panel, dict[str, Ledger]]:
    frame = raw.frame
    n_rows = len(frame)
    widths = {len(cols) for _, cols in spec.wide}
    if len(widths) != 1:
        raise InputProblem("every --wide measure must list the same number of wave columns")
    n_waves = widths.pop()
    if n_waves > spec.max_waves:
        raise InputProblem(f"--wide names {n_waves:,} wave columns a measure, more than the "
                           f"{spec.max_waves} waves a panel screen takes (raise the limit "
                           "with --max-waves)")
    all_rows = np.arange(n_rows)
    if spec.id_columns:
        id_missing = _ids_missing(frame, spec)
        if id_missing.any() and spec.bad_values == "error":
            raise InputProblem("missing unit id; fix it or pass --drop-bad-rows",
                               file=raw.source, row=raw.row_number(np.flatnonzero(id_missing)[0]),
                               column=_first_missing_id(frame, spec, id_missing))
        rows = np.flatnonzero(~id_missing)
        unit_index, unit_ids = _factorize_ids(frame, spec.id_columns, rows)
    else:
        id_missing = np.zeros(n_rows, dtype=bool)
        rows, unit_index = all_rows, all_rows.copy()
        unit_ids = np.arange(1, n_rows + 1)
    labels, times, basis, order = _wide_waves(spec, spec.wide[0][1])
    _check_extent(raw, len(unit_ids), n_waves)
    check_memory(spec, len(unit_ids), n_waves, raw.source)
    kept, n_duplicate = _resolve_duplicates(raw, spec, unit_index, rows, unit_ids, ("",), 1)
    if spec.duplicates == "mean" and n_duplicate:
        raise InputProblem("--duplicates mean is for long data; choose first or last for "
                           "repeated ids in wide data", file=raw.source,
                           column=ID_SEPARATOR.join(spec.id_columns))
    rows, unit_rows = rows[kept], unit_index[kept]
    n_units = len(unit_ids)
    structural = {"missing_id": int(id_missing.sum()), "duplicate_unit_wave": n_duplicate}
    values, codes, code_labels, ledgers = {}, {}, {}, {}
    for measure, columns in spec.wide:
        matrix = np.full((n_units, n_waves), np.nan)
        cells = {reason: 0 for reason in _CELL_REASON.values()}
        cells["observed"] = 0
        code_counts: dict[str, np.ndarray] = {}
        any_observed = np.zeros(len(rows), dtype=bool)
        for t, column in enumerate(columns[i] for i in order):
            outcome, numbers, code_text = _classify(raw, spec, column, rows)
            seen = outcome == OBSERVED
            matrix[unit_rows[seen], t] = numbers[seen]
            any_observed |= seen
            cells["observed"] += int(seen.sum())
            for code, reason in _CELL_REASON.items():
                cells[reason] += int((outcome == code).sum())
            for code, count in _code_counts(code_text, np.zeros(len(rows), int), 1).items():
                code_counts.setdefault(code, np.zeros(n_waves, dtype=np.int64))[t] += count[0]
        _require_observed(raw, measure, matrix)
        reasons = dict(structural, no_observed_value=int((~any_observed).sum()))
        ledgers[measure] = Ledger(rows_read=n_rows, rows_used=int(any_observed.sum()),
                                  dropped_by_reason=reasons, units=n_units, waves=n_waves,
                                  layout="wide", cells=cells)
        values[measure] = matrix
        codes[measure] = dict(sorted(code_counts.items()))
        label_source = {k: v for c in columns for k, v in raw.value_labels.get(c, {}).items()}
        code_labels[measure] = {code: label_source[float(code)] for code in code_counts
                                if _is_number(code) and float(code) in label_source}
    waves_of_rows = np.zeros(len(rows), dtype=np.int64)
    panel = Panel(
        unit_ids=unit_ids, wave_labels=labels, wave_times=times, values=values,
        codes=codes, code_labels=code_labels, **basis,
        weights=_unit_weights(raw, spec, rows, unit_rows, unit_ids),
        groups=_unit_groups(raw, spec, rows, unit_rows, unit_ids),
        covariates={c: np.repeat(_scatter(raw, c, rows, unit_rows, waves_of_rows, n_units, 1),
                                 n_waves, axis=1) for c in spec.covariates},
    )
    return panel, ledgers


def _wide_waves(spec: LayoutSpec, columns: tuple[str, ...]):
    """Labels from --wave-labels, else trailing numbers of the column names, else 1..T;
    times from labels that are numbers or dates, else 1..T; and the order in which the
    columns are the waves: the labels' time order (numbers or dates given out of order
    are put in order, as the waves of long data are, unless --wave-order given), else
    the columns' own order."""
    n_waves = len(columns)
    as_given = np.arange(n_waves)
    if spec.wave_labels:
        if len(spec.wave_labels) != n_waves:
            raise InputProblem(f"--wave-labels gives {len(spec.wave_labels)} labels for "
                               f"{n_waves} wave columns")
        labels = tuple(spec.wave_labels)
    else:
        tails = [re.search(r"(\d+)$", c) for c in columns]
        numbers = [int(m.group(1)) for m in tails if m]
        if len(numbers) == n_waves and all(np.diff(numbers) > 0):
            labels = tuple(str(n) for n in numbers)
        else:
            labels = tuple(str(t) for t in range(1, n_waves + 1))
            order = WaveReading(np.arange(n_waves), labels, np.arange(1, n_waves + 1.0), None,
                                "columns")
            return (labels, _override_times(spec, order.times, n_waves),
                    _time_basis(spec, order), as_given)
    reading = read_waves(labels, "--wave-labels", lambda what, index=None: InputProblem(what),
                         spec.date_format, "given")
    in_order = np.array_equal(reading.position, as_given)
    if reading.kind == "text" or len(reading.labels) != n_waves or \
            not (in_order or spec.wave_order == "natural"):
        # text, or labels out of time order kept as given: the columns' order, times 1..T
        reading = WaveReading(as_given, labels, np.arange(1, n_waves + 1.0), None, "text")
        return (labels, _override_times(spec, reading.times, n_waves),
                _time_basis(spec, reading), as_given)
    order = np.argsort(reading.position)    # the column of each wave, in time order
    return (reading.labels, _override_times(spec, reading.times, n_waves),
            _time_basis(spec, reading), order)


def _is_number(text: str) -> bool:
    try:
        float(text)
        return True
    except ValueError:
        return False
