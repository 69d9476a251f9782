"""Streamed reading: a long CSV/TSV or Parquet file (or a folder of Parquet files) read
block by block, so that the long table is never held whole.

Two passes over the file. The first reads the id and wave columns only: it counts the
rows without an id or a wave, collects the distinct wave labels (and the first row of
each), and follows the runs of unit ids to count the units and to check that each
unit's rows are together. The waves are then read from the distinct labels as an
in-memory read reads them, and the whole-file checks run in the same order. The second
pass validates each block of whole units with ``validate._build_long`` (the one place
that decides what a row means) and writes its units' rows of the N x T matrices, which
are allocated once. Problems met in the blocks are noted and raised once the file is
read, with the whole file's counts (``validate.Refusals``).

Memory is the Panel's matrices (8 bytes a cell, per measure, item and covariate) plus
one block of the file; docs/scale.md states the bound as measured.
"""

from __future__ import annotations

from abc import ABC, abstractmethod

import bisect
import gzip
import hashlib
import os
from dataclasses import dataclass, field
from typing import Iterator

import numpy as np
import pandas as pd

from paneldiag.errors import InputProblem
from paneldiag.io.ledger import Ledger
from paneldiag.io.readers import (NULL_TOKENS, RawTable, _arrow_types, _check_text,
                                  _record_lines, _refuse_binary_columns, _require_columns,
                                  _text_head, _text_parse_problem, detect_format)
from paneldiag.io.validate import (_CELL_REASON, ID_SEPARATOR, LayoutSpec, Refusals,
                                   _build_long, _check_extent, _check_magnitude, check_some_weight, check_spec,
                                   _factorize_ids, _first_missing_id, _ids_missing,
                                   _missing_mask, _override_times, _time_basis, _trimmed,
                                   no_observed_value)
from paneldiag.io.waves import WaveReading, check_shared_waves, read_waves
from paneldiag.panel import Panel

STREAMED_FORMATS = ("csv", "tsv", "parquet")

BLOCK_WORK = 12
"""Bytes of working memory per byte of CSV text in a block: the Arrow columns, their
pandas form and the validator's per-row arrays (row codes, masks, cell numbers), about
ten 8-byte arrays a row against 15-25 bytes of text a row (tests/perf/bench_stream.py
measures it)."""
BLOCK_MAX = 64 * 2**20     # text per block: larger blocks gain little speed
BLOCK_MIN = 2**16          # text per block below which the per-block cost dominates
IN_MEMORY_WORK = 10
"""Bytes an in-memory read holds per byte of the file (measured for CSV by
tests/perf/bench_stream.py; Parquet counts its uncompressed size): a file above the
budget divided by this is streamed when --max-memory is not given."""


def default_budget() -> int:
    """Half the machine's physical memory (the rest for the system and other work)."""
    try:
        return os.sysconf("SC_PHYS_PAGES") * os.sysconf("SC_PAGE_SIZE") // 2
    except (ValueError, OSError, AttributeError):
        return 4 * 10**9


def size_text(n: float) -> str:
    for unit, scale in (("GB", 1e9), ("MB", 1e6), ("KB", 1e3)):
        if n >= scale:
            return f"{n / scale:.1f} {unit}"
    return f"{int(n)} B"


def streamable() -> str:
    return "long CSV, TSV and Parquet files (or folders of Parquet files)"


def should_stream(path, fmt: str | None, spec: LayoutSpec, budget: int | None) -> bool:
    """Stream when asked (--max-memory) or when an in-memory read would not fit the
    default budget; only files (not standard input) of the streamed formats, long data."""
    if not isinstance(path, str) or path == "-" or spec.layout != "long":
        return False
    if not os.path.exists(path):
        return False
    fmt = detect_format(path, fmt)
    if fmt not in STREAMED_FORMATS:
        return False
    if budget is not None:
        return True
    return _input_bytes(path, fmt) * IN_MEMORY_WORK > default_budget()


def _input_bytes(path: str, fmt: str) -> int:
    if fmt == "parquet":
        import pyarrow.parquet as pq
        try:
            metas = [pq.ParquetFile(f).metadata for f in _parquet_files(path)]
            return sum(m.row_group(g).total_byte_size for m in metas
                       for g in range(m.num_row_groups))
        except Exception:  # unreadable: the reader says why
            return 0
    size = os.path.getsize(path)
    return size * 5 if path.lower().endswith(".gz") else size  # text compresses ~5x


def _parquet_files(path: str) -> list[str]:
    if not os.path.isdir(path):
        return [path]
    found = []
    for folder, subfolders, files in os.walk(path):
        subfolders.sort()
        found += [os.path.join(folder, f) for f in sorted(files)
                  if not f.startswith((".", "_"))]
    return found


# ----------------------------------------------------------------------------- blocks

@dataclass
class _Block:
    table: object            # pyarrow.Table of the needed columns
    first_record: int        # record number (0-based) of its first row in the file


class _Source(ABC):
    """Blocks of a file, and the row number of any record (worked out on demand)."""

    def __init__(self, path: str, fmt: str, columns: list[str], delimiter: str | None):
        self.path, self.format = path, fmt
        self.delimiter = delimiter
        self.types: dict = {}     # CSV: Arrow type per column, fixed once inferred
        self.seen: dict = {}      # CSV: the types the blocks were inferred as

    @abstractmethod
    def row_of(self, record: int) -> int:
        """The file's row number of a record (0-based record index)."""

    @abstractmethod
    def blocks(self, columns: list[str], block_bytes: int) -> Iterator[_Block]:
        """The file's records in blocks of about ``block_bytes``."""

    @abstractmethod
    def digest(self) -> str:
        """The SHA-256 of the file's bytes."""


class _TextSource(_Source):
    """CSV/TSV (optionally gzip-compressed) cut at record ends into blocks of about
    ``block_bytes`` of text; each block is parsed with the header by the parser an
    in-memory read uses, and its line numbers are found from its own bytes."""

    def __init__(self, path, fmt, columns, delimiter):
        super().__init__(path, fmt, columns, delimiter)
        head = _text_head(path, None)
        _check_text(path, head)
        sep = delimiter or ("\t" if fmt == "tsv" else ",")
        sep = {"\\t": "\t", "tab": "\t"}.get(sep, sep)
        if len(sep) != 1:
            raise InputProblem(f"the delimiter must be one character, got {sep!r}")
        self.sep = sep
        header_line = head.lstrip(b"\xef\xbb\xbf").split(b"\n", 1)[0].decode("utf-8", "replace")
        import csv
        header = next(csv.reader([header_line.rstrip("\r")], delimiter=sep))
        _require_columns(path, header, columns, sep, header_line)
        self.gzipped = head is not None and _is_gzip(path)
        self.spans: list[tuple[int, int, int, int]] = []  # first record, offset, length, line

    def _open(self):
        return gzip.open(self.path, "rb") if self.gzipped else open(self.path, "rb")

    def digest(self) -> str:
        digest = hashlib.sha256()
        with open(self.path, "rb") as handle:
            for chunk in iter(lambda: handle.read(1 << 22), b""):
                digest.update(chunk)
        return digest.hexdigest()

    def _chunks(self, block_bytes: int) -> Iterator[tuple[bytes, bytes, int, int]]:
        """(header, text of whole records, its byte offset, the line it starts on)."""
        with self._open() as handle:
            header = handle.readline()
            offset, line, rest = len(header), 2, b""
            while True:
                data = handle.read(block_bytes)
                text = rest + data
                if not data:
                    if text.strip():
                        yield header, text, offset, line
                    return
                cut = _last_record_end(text)
                if cut <= 0:       # a record longer than the block: read on
                    rest = text
                    continue
                chunk, rest = text[:cut], text[cut:]
                yield header, chunk, offset, line
                offset += len(chunk)
                line += chunk.count(b"\n")

    def blocks(self, columns, block_bytes):
        import pyarrow as pa
        import pyarrow.csv as pacsv

        self.spans = []
        record = 0
        for header, chunk, offset, line in self._chunks(block_bytes):
            types = {c: self.types[c] for c in columns if c in self.types}
            try:
                table = pacsv.read_csv(
                    pa.BufferReader(header + chunk),
                    parse_options=pacsv.ParseOptions(delimiter=self.sep),
                    convert_options=pacsv.ConvertOptions(
                        include_columns=columns, null_values=NULL_TOKENS,
                        strings_can_be_null=True, column_types=types),
                    read_options=pacsv.ReadOptions(block_size=1 << 24))
            except pa.ArrowInvalid as exc:
                raise _text_parse_problem(self.path, None, self.sep, str(exc)) from None
            self.spans.append((record, offset, len(chunk), line))
            for name, column in zip(table.column_names, table.columns):
                known = self.seen.setdefault(name, [])
                if column.type not in known:
                    known.append(column.type)
            first = record
            _refuse_binary_columns(self.path, table, lambda i: self.row_of(first + i))
            record += table.num_rows
            yield _Block(table, first)
        if record == 0:
            raise InputProblem("no data rows: the file has a header only", file=self.path)

    def row_of(self, record: int) -> int:
        """The line of a record: its block's bytes are read again (only for messages)."""
        starts = [s[0] for s in self.spans]
        k = max(bisect.bisect_right(starts, record) - 1, 0)
        first, offset, length, line = self.spans[k]
        with self._open() as handle:
            header = handle.readline()
            handle.seek(offset)
            chunk = handle.read(length)
        lines = _record_lines(None, header + chunk, self.sep)
        index = record - first
        return int(lines[index]) + line - 2 if index < len(lines) else record + 2


def _is_gzip(path: str) -> bool:
    with open(path, "rb") as handle:
        return handle.read(2) == b"\x1f\x8b"


def _last_record_end(text: bytes) -> int:
    """Position after the last line break outside quotes (0 when there is none)."""
    end = text.rfind(b"\n")
    if end < 0:
        return 0
    if b'"' not in text:
        return end + 1
    buf = np.frombuffer(text, dtype=np.uint8)
    quotes = np.flatnonzero(buf == 34)
    breaks = np.flatnonzero(buf == 10)
    outside = np.searchsorted(quotes, breaks) % 2 == 0
    found = breaks[outside]
    return int(found[-1]) + 1 if len(found) else 0


class _ParquetSource(_Source):
    """A Parquet file or a folder of them (a partitioned dataset), read in batches; a
    row group is decoded whole, so its size adds to the block (docs/scale.md)."""

    def __init__(self, path, fmt, columns, delimiter):
        super().__init__(path, fmt, columns, delimiter)
        import pyarrow as pa
        import pyarrow.dataset as ds
        import pyarrow.parquet as pq
        try:
            for name in _parquet_files(path):   # the in-memory read's message first
                pq.read_schema(name)
            self.dataset = ds.dataset(path, format="parquet", partitioning="hive")
            names = self.dataset.schema.names
        except (pa.ArrowInvalid, OSError) as exc:
            raise InputProblem(f"not a readable Parquet file ({str(exc).splitlines()[0]})",
                               file=path) from None
        _require_columns(path, names, columns, ",", "")
        if self.dataset.count_rows() == 0:
            raise InputProblem("no data rows", file=path)

    def _row_bytes(self, columns) -> float:
        """A decoded row's bytes (encoded sizes can be far smaller: dictionaries, runs),
        taken for the text bytes a CSV row of the same columns would have."""
        schema = self.dataset.schema
        return float(sum(schema.field(c).type.bit_width // 8 + 1
                         if _fixed_width(schema.field(c).type) else 24 for c in columns))

    def digest(self) -> str:
        digest = hashlib.sha256()
        for name in _parquet_files(self.path):
            with open(name, "rb") as handle:
                for chunk in iter(lambda: handle.read(1 << 22), b""):
                    digest.update(chunk)
        return digest.hexdigest()

    def blocks(self, columns, block_bytes):
        import pyarrow as pa
        import pyarrow.parquet as pq
        rows = max(int(block_bytes / self._row_bytes(columns)), 1)
        record = 0
        for batch in self._batches(columns, rows, pa, pq):
            if batch.num_rows:
                yield _Block(pa.Table.from_batches([batch]), record)
                record += batch.num_rows

    def _batches(self, columns, rows, pa, pq):
        """File by file, decoding pages as the batches need them; a column that only
        the folder names hold (hive partitions, key=value) needs the dataset scanner,
        which decodes a row group at a time."""
        files = _parquet_files(self.path)
        if all(set(columns) <= set(pq.read_schema(f).names) for f in files):
            for name in files:
                reader = pq.ParquetFile(name, pre_buffer=False)
                yield from reader.iter_batches(batch_size=rows, columns=columns,
                                               use_threads=False)
            return
        import pyarrow.dataset as ds
        scan = ds.ParquetFragmentScanOptions(pre_buffer=False)
        yield from self.dataset.to_batches(columns=columns, batch_size=rows,
                                           batch_readahead=0, fragment_readahead=0,
                                           fragment_scan_options=scan, use_threads=False)

    def row_of(self, record: int) -> int:
        return record + 1


def _fixed_width(arrow_type) -> bool:
    try:
        return arrow_type.bit_width > 0
    except ValueError:   # variable width: text, binary, nested
        return False


def read_parquet_folder(path: str, columns: list[str] | None) -> RawTable:
    """A folder of Parquet files read whole, in the order of a streamed read."""
    import pyarrow as pa
    import pyarrow.parquet as pq
    source = _ParquetSource(path, "parquet", columns or [], None)
    columns = columns or source.dataset.schema.names
    table = pa.Table.from_batches(list(source._batches(columns, 1 << 20, pa, pq)),
                                  schema=pa.schema([source.dataset.schema.field(c)
                                                    for c in columns]))
    return RawTable(frame=_to_frame(table), source=path, format="parquet",
                    sha256=source.digest(), first_row_number=1)


def _source(path, fmt, columns, delimiter) -> _Source:
    if not os.path.exists(path):
        raise InputProblem("file not found", file=path)
    if fmt == "parquet":
        return _ParquetSource(path, fmt, columns, delimiter)
    if os.path.isdir(path):
        raise InputProblem("is a folder, not a file", file=path)
    return _TextSource(path, fmt, columns, delimiter)


def _unify_types(seen: list) -> object:
    """The type a whole-file CSV read gives a column whose blocks were inferred as
    ``seen``: integers and decimals read as decimals; any other mix reads as text."""
    import pyarrow as pa
    kinds = {t for t in seen if not pa.types.is_null(t)}
    if not kinds:
        return pa.null()
    if len(kinds) == 1:
        return kinds.pop()
    if kinds <= {pa.int64(), pa.float64()}:
        return pa.float64()
    return pa.string()


def _to_frame(table) -> pd.DataFrame:
    """As the reader's, but without freeing the Arrow buffers: slices of a block share
    them with the rows carried to the next block."""
    return table.to_pandas(types_mapper=_arrow_types, split_blocks=True)


def _frame(block: _Block, source: _Source, columns: list[str] | None = None) -> RawTable:
    first = block.first_record
    table = block.table if columns is None else block.table.select(columns)
    return RawTable(frame=_to_frame(table), source=source.path, format=source.format,
                    sha256="", first_row_number=first + 1,
                    locate=lambda i: source.row_of(first + i))


# ----------------------------------------------------------------------------- pass 1

@dataclass
class _Scan:
    """What the first pass learns from the id and wave columns."""

    missing_id: int = 0
    missing_id_first: tuple | None = None     # (record, column)
    missing_wave: int = 0
    missing_wave_first: int | None = None
    valid_rows: int = 0
    labels: dict = field(default_factory=dict)    # label -> [first record, rows]
    integer_labels: bool = True
    sorted_labels: bool = True
    last_label: object = None
    run_ids: list = field(default_factory=list)   # per block: ids of the runs that start
    run_rows: list = field(default_factory=list)  # per block: their first records
    last_id: object = None


def _scan(source: _Source, spec: LayoutSpec, block_bytes: int) -> _Scan:
    scan = _Scan()
    columns = [*spec.id_columns, spec.wave]
    read = spec.columns() if isinstance(source, _TextSource) else columns
    for block in source.blocks(read, block_bytes):
        raw = _frame(block, source, columns)
        frame = raw.frame
        id_missing = _ids_missing(frame, spec)
        wave_missing = _missing_mask(frame[spec.wave]) & ~id_missing
        if id_missing.any():
            if scan.missing_id_first is None:
                first = int(np.flatnonzero(id_missing)[0])
                scan.missing_id_first = (block.first_record + first,
                                         _first_missing_id(frame, spec, id_missing))
            scan.missing_id += int(id_missing.sum())
        if wave_missing.any():
            if scan.missing_wave_first is None:
                scan.missing_wave_first = block.first_record + int(np.flatnonzero(wave_missing)[0])
            scan.missing_wave += int(wave_missing.sum())
        valid = np.flatnonzero(~id_missing & ~wave_missing)
        scan.valid_rows += len(valid)
        if not len(valid):
            continue
        _scan_labels(scan, frame[spec.wave].iloc[valid], valid, block.first_record)
        codes, ids = _factorize_ids(frame, spec.id_columns, valid)
        starts = np.r_[0, np.flatnonzero(codes[1:] != codes[:-1]) + 1]
        run_ids = np.asarray(ids)[codes[starts]]
        rows = block.first_record + valid[starts]
        if scan.last_id is not None and run_ids[0] == scan.last_id:
            run_ids, rows = run_ids[1:], rows[1:]   # the unit goes on from the last block
        if len(run_ids):
            scan.run_ids.append(run_ids)
            scan.run_rows.append(rows)
            scan.last_id = run_ids[-1]
    return scan


def _scan_labels(scan: _Scan, column: pd.Series, valid: np.ndarray, first_record: int):
    if not (isinstance(column.dtype, np.dtype) and column.dtype.kind == "i"):
        scan.integer_labels = False
    codes, uniques = pd.factorize(_trimmed(column), sort=False)
    counts = np.bincount(codes, minlength=len(uniques))
    firsts = np.full(len(uniques), len(codes))
    np.minimum.at(firsts, codes, np.arange(len(codes)))
    for label, count, first in zip(uniques, counts, firsts):  # a loop over wave labels
        entry = scan.labels.get(label)
        if entry is None:
            scan.labels[label] = [first_record + int(valid[first]), int(count)]
        else:
            entry[1] += int(count)
    if scan.integer_labels:
        values = column.to_numpy()
        if scan.last_label is not None and values[0] < scan.last_label or \
                np.any(values[1:] < values[:-1]):
            scan.sorted_labels = False
        scan.last_label = values[-1]


class FixedWaves:
    """The waves of the whole file, for the blocks of the second pass."""

    def __init__(self, labels: list, reading: WaveReading):
        self.position = {label: k for k, label in enumerate(labels)}
        self.reading = reading

    def parse(self, raw: RawTable, spec: LayoutSpec, rows: np.ndarray):
        column = raw.frame[spec.wave].iloc[rows]
        codes, uniques = pd.factorize(_trimmed(column), sort=False)
        label_index = np.array([self.position[u] for u in uniques], dtype=np.int64)[codes]
        return self.reading.position[label_index], self.reading, label_index

    def empty_ledgers(self, spec, n_rows, id_missing, wave_missing, n_outside) -> dict:
        reasons = {"missing_id": int(id_missing.sum()), "missing_wave": int(wave_missing.sum()),
                   "wave_outside_bins": n_outside, "duplicate_unit_wave": 0}
        grouping = None
        if spec.wave_grouping.active:
            grouping = {"rule": self.reading.grouping, "rows_moved": 0,
                        "rows_outside": n_outside, "rows_sharing_a_wave": 0}
        return {m: Ledger(rows_read=n_rows, rows_used=0, dropped_by_reason=dict(reasons),
                          layout="long", wave_grouping=grouping)
                for m in spec.measure_names()}


def _read_whole_file_waves(scan: _Scan, source: _Source, spec: LayoutSpec):
    """The checks an in-memory read makes before its duplicates, in its order."""
    def at(record, column):
        return dict(file=source.path, row=source.row_of(record), column=column)

    if spec.bad_values == "error":
        if scan.missing_id:
            record, column = scan.missing_id_first
            raise InputProblem(f"missing unit id in {scan.missing_id} row(s); fix them or "
                               "pass --drop-bad-rows to drop and count them",
                               **at(record, column))
        if scan.missing_wave:
            raise InputProblem(f"missing wave in {scan.missing_wave} row(s); fix them or pass "
                               "--drop-bad-rows to drop and count them",
                               **at(scan.missing_wave_first, spec.wave))
    if not scan.valid_rows:
        raise InputProblem("no row has both a unit id and a wave", file=source.path)
    labels = list(scan.labels)
    if scan.integer_labels and labels:
        span = int(max(labels)) - int(min(labels)) + 1
        if scan.sorted_labels or span <= 4 * scan.valid_rows + 1024:
            labels = sorted(labels)     # as the in-memory read's dense integer codes
    firsts = [scan.labels[label][0] for label in labels]

    def problem(what: str, index: int | None = None) -> InputProblem:
        row = None if index is None else source.row_of(firsts[index])
        return InputProblem(what, file=source.path, row=row, column=spec.wave)

    uniques = pd.Index(labels)
    reading = read_waves(uniques, f"the wave column '{spec.wave}'", problem,
                         spec.date_format, spec.wave_order, spec.wave_grouping)
    return labels, reading


def _count_units(scan: _Scan, source, spec, labels, reading, block_bytes):
    """Units and whether each unit's rows are together; the units with a row inside
    the --wave-bins edges when some rows fall outside (a further pass over the ids)."""
    run_ids = np.concatenate(scan.run_ids) if scan.run_ids else np.zeros(0)
    run_rows = np.concatenate(scan.run_rows) if scan.run_rows else np.zeros(0, dtype=np.int64)
    repeated = pd.Index(run_ids).duplicated()
    outside = {label for label, p in zip(labels, reading.position) if p < 0}
    if not outside:
        return int(len(run_ids) - repeated.sum()), run_ids, run_rows, repeated
    inside = set()
    columns = [*spec.id_columns, spec.wave]
    for block in source.blocks(columns, block_bytes):
        raw = _frame(block, source, columns)
        frame = raw.frame
        keep = ~_ids_missing(frame, spec) & ~_missing_mask(frame[spec.wave])
        waves = _trimmed(frame[spec.wave])
        keep &= ~waves.isin(list(outside)).to_numpy(dtype=bool)
        valid = np.flatnonzero(keep)
        if len(valid):
            _, ids = _factorize_ids(frame, spec.id_columns, valid)
            inside.update(ids.tolist())
    return len(inside), run_ids, run_rows, repeated


def _unsorted_problem(source, spec, run_ids, run_rows, repeated) -> InputProblem:
    k = int(np.flatnonzero(repeated)[0])
    ids = ID_SEPARATOR.join(spec.id_columns)
    return InputProblem(
        f"the rows of unit {run_ids[k]} are not together: they start again after other "
        f"units' rows; a read in blocks needs each unit's rows in one run: sort the file by "
        f"{ids} (a stable sort keeps each unit's rows in order; docs/scale.md shows one "
        "within bounded memory), or screen it in memory if it fits (without --max-memory)",
        file=source.path, row=source.row_of(int(run_rows[k])), column=ids)


# ----------------------------------------------------------------------------- pass 2

@dataclass
class _Holdings:
    """The Panel's arrays, allocated once for every unit."""

    n_units: int
    n_waves: int
    spec: LayoutSpec
    item_counts: dict

    def bytes(self) -> int:
        cells = self.n_units * self.n_waves * 8
        matrices = len(self.spec.measure_names()) + len(self.spec.covariates) + \
            sum(self.item_counts.values())
        return cells * matrices + self.n_units * (8 + 8 + 64)  # ids, weights, groups


def check_scanned_extent(scan: _Scan, labels, reading, spec: LayoutSpec, path: str, fmt: str,
                         n_units: int) -> tuple[np.ndarray, int]:
    """The whole file's checks of size and waves from the first pass (the panel's extent,
    waves sharing a time); returns the wave times and the number of waves."""
    times = _override_times(spec, reading.times, len(reading.labels))
    n_waves = len(reading.labels)
    _check_extent(RawTable(frame=pd.DataFrame(), source=path, format=fmt, sha256="",
                           first_row_number=1), n_units, n_waves)
    rows_per_wave = np.zeros(n_waves, dtype=np.int64)
    for label, position in zip(labels, reading.position):
        if position >= 0:
            rows_per_wave[position] += scan.labels[label][1]
    check_shared_waves(rows_per_wave, reading.times, f"the wave column '{spec.wave}'",
                       lambda what: InputProblem(what, file=path, column=spec.wave),
                       spec.wave_grouping, spec.max_waves, reading.kind, n_units)
    return times, n_waves


def ledger_totals(spec: LayoutSpec) -> dict:
    """Each measure's ledger counts over blocks, empty (filled by ``add_ledgers``)."""
    return {m: {"rows_read": 0, "rows_used": 0, "reasons": {}, "grouping": None}
            for m in spec.measure_names()}


def add_ledgers(totals: dict, ledgers: dict) -> None:
    """Adds one block's ledgers (by measure) to the running ``totals``."""
    for measure, ledger in ledgers.items():
        total = totals[measure]
        total["rows_read"] += ledger.rows_read
        total["rows_used"] += ledger.rows_used
        for reason, count in ledger.dropped_by_reason.items():
            total["reasons"][reason] = total["reasons"].get(reason, 0) + count
        if ledger.wave_grouping:
            grouping = total["grouping"] or dict(ledger.wave_grouping, rows_moved=0,
                                                 rows_outside=0, rows_sharing_a_wave=0)
            for key in ("rows_moved", "rows_outside", "rows_sharing_a_wave"):
                grouping[key] += ledger.wave_grouping[key]
            total["grouping"] = grouping


def _assemble(source, spec, labels, reading, n_units, block_bytes):
    n_waves = len(reading.labels)
    fixed = FixedWaves(labels, reading)
    refusals = Refusals(spec)
    item_columns = dict(spec.items)
    values = {m: np.full((n_units, n_waves), np.nan) for m in spec.measure_names()}
    items = {m: np.full((n_units, n_waves, len(item_columns[m])), np.nan)
             for m in spec.measure_names() if m in item_columns}
    covariates = {c: np.full((n_units, n_waves), np.nan) for c in spec.covariates}
    weights = np.full(n_units, np.nan) if spec.weight else None
    groups = np.empty(n_units, dtype=object) if spec.group else None
    unit_ids: list = []
    codes = {m: {} for m in spec.measure_names()}
    code_labels = {m: {} for m in spec.measure_names()}
    totals = ledger_totals(spec)
    placed = 0

    def take(raw: RawTable) -> None:
        nonlocal placed
        raw.refusals = refusals
        panel, ledgers = _build_long(raw, spec, fixed)
        add_ledgers(totals, ledgers)
        if panel is None:
            return
        if placed + panel.n_units > n_units:  # the first pass saw each unit in one run
            raise AssertionError("more units in the second pass than in the first")
        rows = slice(placed, placed + panel.n_units)
        for measure, matrix in panel.values.items():
            values[measure][rows] = matrix
            for code, counts in panel.codes.get(measure, {}).items():
                codes[measure][code] = codes[measure].get(code, 0) + counts
            code_labels[measure].update(panel.code_labels.get(measure, {}))
        for measure, cube in panel.items.items():
            items[measure][rows] = cube
        for name, matrix in panel.covariates.items():
            covariates[name][rows] = matrix
        if weights is not None:
            weights[rows] = panel.weights
        if groups is not None:
            groups[rows] = panel.groups
        unit_ids.append(panel.unit_ids)
        placed += panel.n_units

    import pyarrow as pa
    carry = None
    for block in source.blocks(spec.columns(), block_bytes):
        table, first = block.table, block.first_record
        if carry is not None:
            table = pa.concat_tables([carry.table, table], promote_options="permissive")
            first = carry.first_record
        cut = _last_unit_start(table, spec)
        if cut > 0:
            take(_frame(_Block(table.slice(0, cut), first), source, None))
        carry = _Block(table.slice(cut), first + cut)
    if carry is not None and carry.table.num_rows:
        take(_frame(carry, source, None))
    ids = np.concatenate(unit_ids) if unit_ids else np.zeros(0)
    return dict(values=values, items=items, covariates=covariates, weights=weights,
                groups=groups, ids=ids, codes=codes, code_labels=code_labels,
                totals=totals, refusals=refusals, placed=placed)


def _last_unit_start(table, spec: LayoutSpec) -> int:
    """The first row of the last unit's run in a block (its rows may go on in the next
    block), or the block's length when it has no row with an id and a wave."""
    frame = _to_frame(table.select([*spec.id_columns, spec.wave]))
    valid = np.flatnonzero(~_ids_missing(frame, spec) & ~_missing_mask(frame[spec.wave]))
    if not len(valid):
        return table.num_rows
    codes, _ = _factorize_ids(frame, spec.id_columns, valid)
    changes = np.flatnonzero(codes[1:] != codes[:-1])
    return int(valid[changes[-1] + 1]) if len(changes) else int(valid[0])


def stream_panel(path: str, spec: LayoutSpec, fmt: str | None, delimiter: str | None,
                 budget: int | None, block_bytes: int | None = None
                 ) -> tuple[Panel, dict[str, Ledger], str, str]:
    """The Panel, its ledgers, the file's digest and format of a long file read in
    blocks within ``budget`` bytes (None: the default budget). ``block_bytes`` fixes the
    size of the blocks instead (tests cut small files into many blocks with it)."""
    check_spec(spec)
    fmt = detect_format(path, fmt)
    budget = budget or default_budget()
    first_blocks = block_bytes or int(min(BLOCK_MAX, max(budget // (2 * BLOCK_WORK), 1)))
    if first_blocks < BLOCK_MIN and not block_bytes:
        raise InputProblem(f"--max-memory {size_text(budget)} is too small to read a block of "
                           f"the file ({size_text(BLOCK_MIN * 2 * BLOCK_WORK)} at least); "
                           "raise it", file=path)
    source = _source(path, fmt, spec.columns(), delimiter)
    scan = _scan(source, spec, first_blocks)
    if isinstance(source, _TextSource):  # each column's type as a whole-file read infers it
        source.types = {name: _unify_types(seen) for name, seen in source.seen.items()}
        if any(len(source.seen[c]) > 1 for c in (*spec.id_columns, spec.wave)):
            scan = _scan(source, spec, first_blocks)   # the ids or waves change type
    labels, reading = _read_whole_file_waves(scan, source, spec)
    outside = reading.position < 0
    if outside.all():
        raise InputProblem("no row has a wave inside the --wave-bins edges",
                           file=path, column=spec.wave)
    n_units, run_ids, run_rows, repeated = _count_units(scan, source, spec, labels, reading,
                                                       first_blocks)
    times, n_waves = check_scanned_extent(scan, labels, reading, spec, path, fmt, n_units)
    if repeated.any():
        raise _unsorted_problem(source, spec, run_ids, run_rows, repeated)
    del run_ids, run_rows, scan
    holdings = _Holdings(n_units, n_waves, spec, {m: len(c) for m, c in spec.items})
    room = budget - holdings.bytes()
    if room // BLOCK_WORK < BLOCK_MIN:
        need = holdings.bytes() + BLOCK_MIN * BLOCK_WORK
        raise InputProblem(f"--max-memory {size_text(budget)} is too small: the panel's "
                           f"matrices ({n_units:,} units x {n_waves} waves) take "
                           f"{size_text(holdings.bytes())}; give at least "
                           f"{size_text(need)}", file=path)
    block_bytes = block_bytes or int(min(BLOCK_MAX, room // BLOCK_WORK))
    built = _assemble(source, spec, labels, reading, n_units, block_bytes)
    import pyarrow as pa
    pa.default_memory_pool().release_unused()   # the blocks' buffers (0.2 GB at 10M x 20)
    return _finish(built, spec, reading, times, path, source, fmt)


def _finish(built, spec, reading, times, path, source, fmt):
    refusals: Refusals = built["refusals"]
    for measure, matrix in built["values"].items():  # in the order of the checks
        if not np.isfinite(matrix).any():
            refusals.note(("no observed value", measure), 0,
                          lambda _c, _i=(), m=measure: no_observed_value(path, m))
    refusals.raise_first()
    if built["placed"] != len(built["ids"]) or built["placed"] != built["values"][
            spec.measure_names()[0]].shape[0]:
        raise AssertionError("units placed differ from units counted")
    ids = built["ids"]
    order = _id_order(ids, spec)
    if order is not None:   # blocks not in id order: the in-memory read's unit order
        ids = ids[order]
        for collection in (built["values"], built["items"], built["covariates"]):
            for name in collection:
                collection[name] = collection[name][order]
        for name in ("weights", "groups"):
            if built[name] is not None:
                built[name] = built[name][order]
    n_units, n_waves = len(ids), len(reading.labels)
    ledgers = {}
    for measure, total in built["totals"].items():
        reasons = {"missing_id": 0, "missing_wave": 0, "wave_outside_bins": 0,
                   "duplicate_unit_wave": 0, **{r: 0 for r in _CELL_REASON.values()}}
        reasons.update(total["reasons"])
        ledgers[measure] = Ledger(rows_read=total["rows_read"], rows_used=total["rows_used"],
                                  dropped_by_reason=reasons, units=n_units, waves=n_waves,
                                  layout="long", wave_grouping=total["grouping"])
    raw = RawTable(frame=pd.DataFrame(), source=path, format=fmt, sha256="",
                   first_row_number=1)
    for measure, matrix in built["values"].items():
        if _beyond_magnitude(matrix):   # then the in-memory read's check makes the message
            _check_magnitude(raw, measure, matrix)
    if built["weights"] is not None:
        check_some_weight(built["weights"], path, spec.weight)
    groups = built["groups"]
    panel = Panel(
        unit_ids=ids, wave_labels=reading.labels, wave_times=times, values=built["values"],
        codes={m: dict(sorted(c.items())) for m, c in built["codes"].items()},
        code_labels=built["code_labels"], **_time_basis(spec, reading),
        weights=built["weights"], groups=None if groups is None else groups.astype(str),
        covariates=built["covariates"], items=built["items"],
        item_columns={m: c for m, c in spec.items})
    return panel, ledgers, source.digest(), fmt


def _beyond_magnitude(matrix: np.ndarray) -> bool:
    """Whether ``validate._check_magnitude`` would stop, without its copies of the
    matrix (the matrices hold no infinite value: those cells are refused or dropped)."""
    from paneldiag.io.validate import LARGEST_VALUE, SMALLEST_SPREAD
    if not np.isfinite(matrix).any():
        return False
    largest = max(abs(float(np.nanmax(matrix))), abs(float(np.nanmin(matrix))))
    return largest > LARGEST_VALUE or 0 < largest < SMALLEST_SPREAD


def _id_order(ids: np.ndarray, spec: LayoutSpec) -> np.ndarray | None:
    """The permutation to sorted ids (an in-memory read's order), or None when sorted.
    An id of several columns stays in file order (its order is by column, not text)."""
    if len(ids) < 2 or len(spec.id_columns) > 1:
        return None
    try:
        ahead = ids[1:] < ids[:-1]
    except TypeError:
        return None
    if not np.any(ahead):
        return None
    return np.argsort(ids, kind="stable")
