"""The distributed engine (``--engine dask``): a long CSV/TSV or Parquet file read as a
Dask dataframe, validated and summarised partition by partition on a cluster's workers.

The design is the streamed read's (io/stream.py), with partitions for blocks:

1. The client cuts the file into parts (text at record ends, Parquet by row group) and
   takes its digest; nothing else of the file passes through the client.
2. Workers scan the id and wave columns of each part (``stream._scan`` on one block);
   the client merges the scans and makes the whole-file checks and the wave reading
   exactly as a streamed read does.
3. The parts become a Dask dataframe read on the workers. When some unit has rows in
   more than one part, the dataframe is shuffled on the id columns first (each unit's
   rows then sit in one partition, back in file order).
4. Workers validate each partition with ``validate._build_long`` (a block of whole
   units: Panel part, ledger counts, problems noted for the whole file); the client
   adds up the ledgers, raises the first problem, and stacks the parts' unit x wave
   matrices in the in-memory read's unit order.
5. Workers build the summaries of their parts (the sums of ``paneldiag.summaries``,
   weights rescaled over the whole panel); the client merges them in part order and
   runs the diagnostics, rules and renderers on the merged summaries.

What is shipped and what comes back is listed in docs/scale.md.
"""

from __future__ import annotations

import contextlib
import gzip
import os
from dataclasses import dataclass, replace

import numpy as np
import pandas as pd

from paneldiag.errors import InputProblem
from paneldiag.io.readers import NULL_TOKENS, RawTable, _refuse_binary_columns, _to_frame, \
    detect_format
from paneldiag.io.stream import (BLOCK_MAX, BLOCK_MIN, BLOCK_WORK, FixedWaves, _Block,
                                 _count_units, _finish, _last_record_end, _parquet_files,
                                 _read_whole_file_waves, _scan, _Scan, _source, _TextSource,
                                 _unify_types, add_ledgers, check_scanned_extent,
                                 ledger_totals, size_text)
from paneldiag.io.validate import (LayoutSpec, Refusals, _build_long, _factorize_ids,
                                   _ids_missing, _missing_mask)

ENGINES = ("local", "dask")
DASK_FORMATS = ("csv", "tsv", "parquet")
CONNECT_TIMEOUT = 10   # seconds a scheduler has to answer
RECORD = "__record__"  # the column carrying each row's record number through a shuffle
INSTALL = 'pip install "paneldiag[dask]"'


def require_dask():
    """The Dask modules, or a one-line problem naming the install command."""
    try:
        import dask
        import dask.dataframe  # noqa: F401
        import distributed
    except ImportError:
        raise InputProblem(f"--engine dask needs dask and distributed: {INSTALL}") from None
    return dask, distributed


def check_input(data, spec: LayoutSpec, fmt: str | None) -> str:
    """The format of a file the engine reads; a one-line problem for anything else."""
    if isinstance(data, str) and data != "-" and spec.layout == "long":
        if not os.path.exists(data):
            raise InputProblem("file not found", file=data)
        found = detect_format(data, fmt)
        if found in DASK_FORMATS:
            return found
    raise InputProblem("--engine dask reads long CSV/TSV (plain or gzip) and Parquet files "
                       "(or folders of Parquet files) only; screen this input with "
                       "--engine local")


@contextlib.contextmanager
def connect(scheduler: str | None):
    """A client of the cluster at ``scheduler``, or of a local cluster (a process per
    core, one thread each) started here and closed on the way out."""
    _, distributed = require_dask()
    import logging
    if scheduler is None:
        cluster = distributed.LocalCluster(n_workers=os.cpu_count() or 1, threads_per_worker=1,
                                           processes=True, dashboard_address=":0",
                                           silence_logs=logging.CRITICAL)
        with cluster, distributed.Client(cluster) as client:
            yield client
        return
    try:
        client = distributed.Client(scheduler, timeout=CONNECT_TIMEOUT)
    except (OSError, TimeoutError, ValueError) as exc:
        raise InputProblem(
            f"no Dask scheduler answered at {scheduler} within {CONNECT_TIMEOUT} s "
            f"({type(exc).__name__}): check the address and that the scheduler and its "
            "workers run (docs/scale.md), or leave out --scheduler to start a local "
            "cluster") from None
    with client:
        yield client


# ----------------------------------------------------------------------------- parts

@dataclass(frozen=True)
class Part:
    """Where a partition's rows are: a byte range of a text file (whole records, after
    its header), or a row group of a Parquet file (None: the whole dataset, when a
    column lives only in folder names)."""

    path: str
    offset: int = 0
    length: int | None = None     # text: None reads to the end
    file: str | None = None       # Parquet
    row_group: int | None = None
    first_record: int = 0         # its first row's record number in the file (pass 2)
    # pass 2 without a shuffle: its first rows left to the part before (they go on a
    # unit of that part), and the first rows of the parts after that go on its last unit
    skip: int = 0
    heads: tuple = ()             # ((Part, rows), ...)


def plan_parts(source, part_bytes: int) -> list[Part]:
    if isinstance(source, _TextSource):
        spans = [(offset, len(chunk), line) for _, chunk, offset, line
                 in source._chunks(part_bytes)]
        if not spans:
            raise InputProblem("no data rows: the file has a header only", file=source.path)
        if source.gzipped:   # a gzip stream cannot be entered midway: one part
            spans = [(spans[0][0], sum(s[1] for s in spans), spans[0][2])]
        source.spans = [(0, offset, length, line) for offset, length, line in spans]
        return [Part(source.path, offset, length) for offset, length, _ in spans]
    import pyarrow.parquet as pq
    files = _parquet_files(source.path)
    columns = set(source.dataset.schema.names)
    if not all(columns <= set(pq.read_schema(f).names) for f in files):
        return [Part(source.path)]   # hive partition columns: the dataset scanner reads it
    return [Part(source.path, file=f, row_group=g) for f in files
            for g in range(pq.ParquetFile(f).metadata.num_row_groups)]


def read_part(part: Part, source, columns: list[str], types: dict | None,
              first_record: int = 0, rows: int | None = None):
    """The part's rows of ``columns`` as an Arrow table (on a worker); ``rows``: only
    its first rows (a text part is then read from its start until they are in)."""
    import pyarrow as pa
    try:
        if isinstance(source, _TextSource):
            opener = gzip.open if source.gzipped else open
            with opener(part.path, "rb") as handle:
                header = handle.readline()
                handle.seek(part.offset)
                if rows is None:
                    text = handle.read() if part.length is None else handle.read(part.length)
                    table = _parse_text(part, source, header + text, columns, types)
                else:
                    table, size = None, 1 << 16
                    while table is None or table.num_rows < rows and size < part.length:
                        size *= 4
                        handle.seek(part.offset)
                        text = handle.read(min(size, part.length))
                        if len(text) < part.length:   # whole records only
                            text = text[:_last_record_end(text)]
                        table = _parse_text(part, source, header + text, columns, types)
                    table = table.slice(0, rows)
        elif part.file is None:
            import pyarrow.parquet as pq
            table = pa.Table.from_batches(list(source._batches(columns, 1 << 20, pa, pq)))
        else:
            import pyarrow.parquet as pq
            table = pq.ParquetFile(part.file).read_row_group(part.row_group, columns=columns)
            table = table if rows is None else table.slice(0, rows)
    except OSError as exc:
        raise InputProblem(f"a worker could not read the file ({exc.strerror or exc}); the "
                           "data path must be visible to every worker", file=part.path) from None
    if isinstance(source, _TextSource):
        _refuse_binary_columns(part.path, table, lambda i: source.row_of(first_record + i))
    return table


def _parse_text(part: Part, source, text: bytes, columns, types):
    import pyarrow as pa
    import pyarrow.csv as pacsv
    try:
        return pacsv.read_csv(
            pa.BufferReader(text), parse_options=pacsv.ParseOptions(delimiter=source.sep),
            convert_options=pacsv.ConvertOptions(
                include_columns=columns, null_values=NULL_TOKENS, strings_can_be_null=True,
                column_types={c: t for c, t in (types or {}).items() if c in columns}),
            read_options=pacsv.ReadOptions(block_size=1 << 24))
    except pa.ArrowInvalid as exc:
        from paneldiag.io.readers import _text_parse_problem
        raise _text_parse_problem(part.path, None, source.sep, str(exc)) from None


class _OneBlock:
    """A part as a source of one block, for ``stream._scan``."""

    def __init__(self, source, table):
        self.path, self.format, self.table = source.path, source.format, table

    def blocks(self, columns, block_bytes):
        yield _Block(self.table, 0)

    def row_of(self, record: int) -> int:   # the scan keeps records; rows come later
        return record + 1


def scan_part(part: Part, source, spec: LayoutSpec, types: dict | None):
    """Pass 1 on a worker: the part's scan, its rows and the Arrow types inferred."""
    columns = spec.columns() if isinstance(source, _TextSource) else \
        [*spec.id_columns, spec.wave]
    table = read_part(part, source, columns, types)
    scan = _scan(_OneBlock(source, table), spec, 0)
    seen = {name: column.type for name, column in zip(table.column_names, table.columns)}
    return scan, table.num_rows, seen


def merge_scans(scans: list[_Scan], firsts: list[int]) -> _Scan:
    """The whole file's scan from the parts' (records shifted to the file's)."""
    whole = _Scan()
    for scan, first in zip(scans, firsts):
        if scan.missing_id and whole.missing_id_first is None:
            record, column = scan.missing_id_first
            whole.missing_id_first = (record + first, column)
        if scan.missing_wave and whole.missing_wave_first is None:
            whole.missing_wave_first = scan.missing_wave_first + first
        whole.missing_id += scan.missing_id
        whole.missing_wave += scan.missing_wave
        whole.valid_rows += scan.valid_rows
        whole.integer_labels &= scan.integer_labels
        if scan.labels:
            head = next(iter(scan.labels))
            if whole.last_label is not None and whole.integer_labels and \
                    head < whole.last_label:
                whole.sorted_labels = False
            whole.sorted_labels &= scan.sorted_labels
            whole.last_label = scan.last_label
        for label, (record, count) in scan.labels.items():
            entry = whole.labels.get(label)
            if entry is None:
                whole.labels[label] = [record + first, count]
            else:
                entry[1] += count
        for ids, rows in zip(scan.run_ids, scan.run_rows):
            if whole.last_id is not None and len(ids) and ids[0] == whole.last_id:
                ids, rows = ids[1:], rows[1:]   # the unit's run goes on across the cut
            if len(ids):
                whole.run_ids.append(ids)
                whole.run_rows.append(rows + first)
                whole.last_id = ids[-1]
    return whole


def units_span_parts(scans: list[_Scan]) -> bool:
    """Whether some unit has rows in more than one part."""
    ids = [pd.unique(np.concatenate(s.run_ids)) for s in scans if s.run_ids]
    return len(ids) > 1 and pd.Index(np.concatenate(ids)).duplicated().any()


# ----------------------------------------------------------------------------- pass 2

def frame_part(part: Part, source, names, types) -> pd.DataFrame:
    """A partition (``names``, not ``columns``: Dask passes a ``columns`` argument of
    its own to a function that has one)."""
    import pyarrow as pa
    tables = [read_part(part, source, names, types, part.first_record).slice(part.skip)]
    records = [np.arange(part.first_record + part.skip, part.first_record + part.skip
                         + tables[0].num_rows, dtype=np.int64)]
    for after, rows in part.heads:
        tables.append(read_part(after, source, names, types, after.first_record, rows))
        records.append(np.arange(after.first_record, after.first_record + rows,
                                 dtype=np.int64))
    table = tables[0] if len(tables) == 1 else pa.concat_tables(tables)
    frame = _to_frame(table)
    frame[RECORD] = np.concatenate(records)
    return frame


def carry_units(parts: list[Part], scans: list[_Scan], rows: list[int]) -> list[Part]:
    """The parts of a file whose units' rows are together, each unit in the part where
    its rows start: a part's first rows that go on the last unit of the part before are
    read with that part instead (a shuffle is not needed)."""
    leads, last = [], None
    for scan, n in zip(scans, rows):
        ids = np.concatenate(scan.run_ids) if scan.run_ids else np.zeros(0)
        starts = np.concatenate(scan.run_rows) if scan.run_rows else np.zeros(0, int)
        if last is not None and (not len(ids) or ids[0] == last):
            leads.append(int(starts[1]) if len(ids) > 1 else n)
        else:
            leads.append(0)
        if len(ids):
            last = ids[-1]
    carried = []
    for k, part in enumerate(parts):
        heads, j = [], k + 1
        while j < len(parts) and leads[j] and leads[k] < rows[k]:  # (a part taken whole
            # by the one before has no unit of its own to carry rows to)
            heads.append((parts[j], leads[j]))
            if leads[j] < rows[j]:
                break
            j += 1
        carried.append(replace(part, skip=leads[k], heads=tuple(heads)))
    return carried


def _meta(source, columns, types) -> pd.DataFrame:
    """The dataframe's columns and dtypes, from the types fixed in pass 1 (text) or the
    dataset's schema (Parquet), without reading a part on the client."""
    import pyarrow as pa
    if isinstance(source, _TextSource):
        schema = pa.schema([(c, types.get(c, pa.string())) for c in columns])
    else:
        schema = pa.schema([source.dataset.schema.field(c) for c in columns])
    frame = _to_frame(schema.empty_table())
    frame[RECORD] = np.zeros(0, dtype=np.int64)
    return frame


def in_file_order(frame: pd.DataFrame) -> pd.DataFrame:
    return frame.sort_values(RECORD, kind="stable")


class _Rows:
    """Row numbers of a partition's rows, as messages show them (picklable: a problem
    noted on a worker is raised on the client)."""

    def __init__(self, source, records: np.ndarray):
        self.source, self.records = source, records

    def __call__(self, index: int) -> int:
        return self.source.row_of(int(self.records[index]))


def build_part(frame: pd.DataFrame, source, spec: LayoutSpec, fixed: FixedWaves) -> dict:
    """Pass 2 on a worker: a partition of whole units validated into a Panel part, its
    ledgers, the problems noted, and each unit's id columns (for the unit order)."""
    records = frame[RECORD].to_numpy()
    frame = frame.drop(columns=RECORD).reset_index(drop=True)
    raw = RawTable(frame=frame, source=source.path, format=source.format, sha256="",
                   first_row_number=1, locate=_Rows(source, records))
    raw.refusals = Refusals(spec)
    panel, ledgers = _build_long(raw, spec, fixed)
    keys = None
    if panel is not None:
        valid = ~_ids_missing(frame, spec) & ~_missing_mask(frame[spec.wave])
        rows = np.flatnonzero(valid)
        inside = fixed.parse(raw, spec, rows)[0] >= 0
        rows = rows[inside] if spec.wave_grouping.active else rows
        index, ids = _factorize_ids(frame, spec.id_columns, rows)
        first = np.full(len(ids), len(rows))
        np.minimum.at(first, index, np.arange(len(rows)))
        keys = frame.loc[rows[first], list(spec.id_columns)].reset_index(drop=True)
    return dict(panel=panel, ledgers=ledgers, noted=raw.refusals.noted, keys=keys)


def summarise_part(built: dict, measures: list[str], kinds: list[type], factor: float | None,
                   chunk_units: int, n_replicates: int) -> dict | None:
    """The summaries of a part's units, per measure (on a worker): weights rescaled by
    the whole panel's factor, as ``summaries.relative_weights`` does over all units."""
    from paneldiag.summaries import summarise
    panel = built["panel"]
    if panel is None:
        return None
    weights = None if panel.weights is None else np.asarray(panel.weights, dtype=float) * factor
    return {m: summarise(panel, m, kinds, chunk_units=chunk_units, n_replicates=n_replicates,
                         weights=weights) for m in measures}


def _assemble(parts: list[dict], spec: LayoutSpec, n_waves: int) -> dict:
    """The ``stream._finish`` input from the parts: matrices stacked in the in-memory
    read's unit order (the id columns' order, found by the same factorising)."""
    refusals = Refusals(spec)
    for part in parts:
        for key, (count, problem, order, items) in part["noted"].items():
            if order is None:   # shuffled parts are not in file order: the first row wins
                order = problem(count, items).row
            refusals.note(key, count, problem, order, items)
    totals = ledger_totals(spec)
    for part in parts:
        add_ledgers(totals, part["ledgers"])
    panels = [p["panel"] for p in parts if p["panel"] is not None]
    measures = spec.measure_names()
    if not panels:
        empty = {m: np.full((0, n_waves), np.nan) for m in measures}
        return dict(values=empty, items={}, covariates={c: np.full((0, n_waves), np.nan)
                                                         for c in spec.covariates},
                    weights=np.zeros(0) if spec.weight else None,
                    groups=np.zeros(0, dtype=object) if spec.group else None,
                    ids=np.zeros(0), codes={m: {} for m in measures},
                    code_labels={m: {} for m in measures}, totals=totals,
                    refusals=refusals, placed=0)
    keys = pd.concat([p["keys"] for p in parts if p["panel"] is not None], ignore_index=True)
    position, _ = _factorize_ids(keys, spec.id_columns, np.arange(len(keys)))
    order = np.argsort(position, kind="stable")

    def stack(arrays):
        return np.concatenate(arrays)[order]
    codes, code_labels = {m: {} for m in measures}, {m: {} for m in measures}
    for panel in panels:
        for measure in measures:
            for code, counts in panel.codes.get(measure, {}).items():
                codes[measure][code] = codes[measure].get(code, 0) + counts
            code_labels[measure].update(panel.code_labels.get(measure, {}))
    return dict(
        values={m: stack([p.values[m] for p in panels]) for m in measures},
        items={m: stack([p.items[m] for p in panels]) for m in panels[0].items},
        covariates={c: stack([p.covariates[c] for p in panels]) for c in spec.covariates},
        weights=stack([p.weights for p in panels]) if spec.weight else None,
        groups=stack([p.groups for p in panels]) if spec.group else None,
        ids=stack([p.unit_ids for p in panels]),
        codes=codes, code_labels=code_labels, totals=totals, refusals=refusals,
        placed=sum(p.n_units for p in panels))


# ----------------------------------------------------------------------------- the run

def part_bytes(budget: int | None) -> int:
    """Text per partition: within --max-memory a worker (as a streamed block), else the
    streamed read's largest block."""
    if budget is None:
        return BLOCK_MAX
    size = int(min(BLOCK_MAX, budget // (2 * BLOCK_WORK)))
    if size < BLOCK_MIN:
        raise InputProblem(f"--max-memory {size_text(budget)} is too small for a partition "
                           f"({size_text(BLOCK_MIN * 2 * BLOCK_WORK)} at least); raise it")
    return size


def dask_panel(client, path: str, spec: LayoutSpec, fmt: str | None, delimiter: str | None,
               size: int, summary_kinds: list[type], chunk_units: int, n_replicates: int):
    """(Panel, ledgers, digest, format, summaries by measure) of a long file, read and
    summarised on the workers of ``client``."""
    import dask
    import dask.dataframe as dd
    fmt = detect_format(path, fmt)
    source = _source(path, fmt, spec.columns(), delimiter)
    parts = plan_parts(source, size)
    text = isinstance(source, _TextSource)

    types = None
    for _ in range(2):   # again with fixed types when the ids or waves changed type
        found = client.gather(client.map(scan_part, parts, source=source, spec=spec,
                                         types=types, pure=False))
        firsts = np.r_[0, np.cumsum([rows for _, rows, _ in found])[:-1]].astype(int).tolist()
        if not text:
            break
        seen: dict = {}
        for _, _, part_types in found:
            for name, kind in part_types.items():
                if kind not in seen.setdefault(name, []):
                    seen[name].append(kind)
        types = {name: _unify_types(kinds) for name, kinds in seen.items()}
        source.types = types   # any later read on the client (stream._count_units) too
        source.spans = [(f, *span[1:]) for f, span in zip(firsts, source.spans)]
        if not any(len(seen[c]) > 1 for c in (*spec.id_columns, spec.wave)):
            break
    if sum(rows for _, rows, _ in found) == 0:
        raise InputProblem("no data rows", file=path)
    scans = [scan for scan, _, _ in found]
    scan = merge_scans(scans, firsts)
    labels, reading = _read_whole_file_waves(scan, source, spec)
    if (reading.position < 0).all():
        raise InputProblem("no row has a wave inside the --wave-bins edges",
                           file=path, column=spec.wave)
    n_units = _count_units(scan, source, spec, labels, reading, size)[0]
    times, n_waves = check_scanned_extent(scan, labels, reading, spec, path, fmt, n_units)
    spanning = units_span_parts(scans)
    runs = np.concatenate(scan.run_ids) if scan.run_ids else np.zeros(0)
    together = not pd.Index(runs).duplicated().any()   # each unit's rows in one run
    parts = [replace(part, first_record=first) for part, first in zip(parts, firsts)]
    if spanning and together:
        parts, spanning = carry_units(parts, scans, [rows for _, rows, _ in found]), False
    del scan, scans, found, runs

    columns = spec.columns()
    with dask.config.set({"dataframe.convert-string": False}):
        frame = dd.from_map(frame_part, parts, args=(source, columns, types),
                            meta=_meta(source, columns, types), label="paneldiag-read",
                            enforce_metadata=False)
        if spanning:   # each unit's rows into one partition, then back in file order
            frame = frame.shuffle(on=list(spec.id_columns)).map_partitions(in_file_order)
        fixed = FixedWaves(labels, reading)
        built = [dask.delayed(build_part)(piece, source, spec, fixed)
                 for piece in frame.to_delayed()]
        futures = client.compute(built)
        parts_built = client.gather(futures)
    assembled = _assemble(parts_built, spec, n_waves)
    panel, ledgers, digest, fmt = _finish(assembled, spec, reading, times, path, source, fmt)
    factor = None
    if panel.weights is not None:   # as summaries.relative_weights over every unit
        total = float(np.sum(panel.weights))
        factor = len(panel.weights) / total if total > 0 else 0.0
    summary_parts = client.gather(client.map(
        summarise_part, futures, measures=list(panel.measures), kinds=summary_kinds,
        factor=factor, chunk_units=chunk_units, n_replicates=n_replicates, pure=False))
    summaries: dict = {}
    for part in summary_parts:
        for measure, kinds in (part or {}).items():
            merged = summaries.setdefault(measure, {})
            for kind, value in kinds.items():
                merged[kind] = value if kind not in merged else merged[kind].merge(value)
    return panel, ledgers, digest, fmt, summaries
