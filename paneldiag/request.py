"""What a screen is asked to do, in one place for the command and the Python API: the
options with their defaults (``ScreenRequest``), and the run from the data to the report
(``run_screen``). The command line and ``paneldiag.screen`` both build a request and
call ``run_screen``; neither keeps its own defaults.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass, fields
from typing import Callable

from paneldiag.errors import InputProblem
from paneldiag.io.validate import LayoutSpec, MissingCodes, build_panel, check_spec, parse_size
from paneldiag.io.waves import MAX_WAVES, WaveGrouping
from paneldiag.summaries import CHUNK_UNITS


@dataclass(frozen=True)
class ScreenRequest:
    """Every option of a screen, by the command's option names (dashes as underscores);
    the defaults here are the command's defaults."""

    id: tuple[str, ...] = ()
    wave: str | None = None
    value: tuple[str, ...] = ()
    wide: tuple[str, ...] = ()           # NAME=C1,C2,... per measure
    items: tuple[str, ...] = ()          # NAME=C1,C2,... per scale (long data)
    wave_labels: str | None = None       # L1,L2,...
    wave_times: str | None = None        # T1,T2,...
    wave_order: str = "natural"
    date_format: str | None = None
    wave_bins: str | None = None
    wave_round: str | None = None
    max_waves: int = MAX_WAVES
    memory_limit: str | int | None = None  # e.g. '8G'; None: 3/4 of the machine's memory
    weight: str | None = None
    group: str | None = None
    covariate: tuple[str, ...] = ()
    missing_codes: str | None = None
    duplicates: str = "error"
    drop_bad_rows: bool = False
    format: str | None = None
    delimiter: str | None = None
    sheet: str | None = None             # a spreadsheet's sheet: a name, or a position from 1
    r_object: str | None = None          # the data frame of an .RData file holding several
    min_cell: int = 5
    ordinal: bool | None = None
    rules: str | None = None             # a TOML file of thresholds
    audit_only: bool = False
    # check the released counts together for small counts they give by subtraction, and
    # withhold as few further counts as it can so that none does (docs/disclosure.md)
    disclosure_audit: bool = True
    trajectory_sample: int = 0
    trajectory_seed: int = 1
    triplet_table: bool = False          # keep every triplet's values for a file of their own
    max_memory: str | None = None        # e.g. 2GB: read a long file in blocks within it
    engine: str = "local"                # "dask": read and summarise on a Dask cluster
    scheduler: str | None = None         # the cluster's scheduler (None: start a local one)
    # units summarised at a time (memory, not results: the figures agree across chunk
    # sizes to rounding; an advanced option, hidden from the command's help)
    chunk_units: int = CHUNK_UNITS

    @classmethod
    def option_names(cls) -> tuple[str, ...]:
        return tuple(f.name for f in fields(cls))

    @classmethod
    def default(cls, name: str):
        return next(f.default for f in fields(cls) if f.name == name)

    def memory_budget(self) -> int | None:
        """Bytes of --max-memory (None when not given)."""
        if self.max_memory is None:
            return None
        return parse_size(self.max_memory, "--max-memory")

    def layout(self) -> LayoutSpec:
        ids = tuple(self.id)
        self.memory_budget()   # a bad size stops here, with the other options
        return LayoutSpec(
            id=ids[0] if len(ids) == 1 else (ids or None), wave=self.wave,
            values=tuple(self.value), wide=wide_measures(self.wide),
            items=item_scales(self.items),
            wave_labels=list_option(self.wave_labels, "--wave-labels"),
            wave_times=list_option(self.wave_times, "--wave-times", numeric=True),
            wave_order=self.wave_order, date_format=self.date_format,
            wave_grouping=WaveGrouping.parse(self.wave_bins, self.wave_round),
            max_waves=self.max_waves, memory_limit=parse_size(self.memory_limit),
            weight=self.weight, group=self.group,
            covariates=tuple(self.covariate),
            missing_codes=MissingCodes.parse(self.missing_codes), duplicates=self.duplicates,
            bad_values="drop" if self.drop_bad_rows else "error")

    @property
    def scale(self) -> str:
        return "auto" if self.ordinal is None else ("ordinal" if self.ordinal else "continuous")


def wide_measures(items) -> tuple[tuple[str, tuple[str, ...]], ...]:
    measures = []
    for item in items:
        name, _, columns = item.rpartition("=")
        cols = tuple(c.strip() for c in columns.split(",") if c.strip())
        if len(cols) < 2:
            raise InputProblem(f"--wide '{item}' needs at least two columns, comma-separated")
        measures.append((name.strip() or "value", cols))
    return tuple(measures)


def item_scales(items) -> tuple[tuple[str, tuple[str, ...]], ...]:
    scales = []
    for item in items:
        name, sep, columns = item.partition("=")
        cols = tuple(c.strip() for c in columns.split(",") if c.strip())
        if not sep or not name.strip() or len(cols) < 2:
            raise InputProblem(f"--items '{item}' needs NAME=COL1,COL2,... with at least two "
                               "item columns")
        scales.append((name.strip(), cols))
    return tuple(scales)


def list_option(text: str | None, name: str, numeric: bool = False):
    if text is None:
        return None
    items = [t.strip() for t in text.split(",") if t.strip()]
    if not numeric:
        return tuple(items)
    try:
        return tuple(float(t) for t in items)
    except ValueError:
        raise InputProblem(f"{name} must be comma-separated numbers, got '{text}'") from None


def options_record(spec: LayoutSpec, request: ScreenRequest) -> dict:
    """The options that shaped the result, for the reproducibility record."""
    record = {
        "layout": spec.layout,
        "id": spec.id if isinstance(spec.id, str) or spec.id is None else list(spec.id),
        "wave": spec.wave, "values": list(spec.values),
        "wide": {name: list(cols) for name, cols in spec.wide},
        "items": {name: list(cols) for name, cols in spec.items},
        "wave_labels": list(spec.wave_labels) if spec.wave_labels else None,
        "wave_times": list(spec.wave_times) if spec.wave_times else None,
        "wave_order": spec.wave_order, "date_format": spec.date_format,
        **spec.wave_grouping.record(),
        "max_waves": spec.max_waves if spec.max_waves != MAX_WAVES else None,
        "weight": spec.weight, "group": spec.group,
        "covariates": list(spec.covariates), "missing_codes": spec.missing_codes.describe(),
        "duplicates": spec.duplicates, "drop_bad_rows": spec.bad_values == "drop",
        "format": request.format, "delimiter": request.delimiter,
        "sheet": request.sheet, "r_object": request.r_object,
        "min_cell": request.min_cell,
    }
    return {k: v for k, v in record.items() if v not in (None, [], {}, "")}


def frame_table(frame, columns: list[str]):
    """A DataFrame held in memory as the raw table of a screen: the named columns,
    copied (the caller's frame is never changed), with a digest of their content."""
    import pandas as pd

    from paneldiag.io.readers import RawTable, column_not_found
    absent = [c for c in columns if c not in frame.columns]
    if absent:
        raise column_not_found(absent[0], list(map(str, frame.columns)), "DataFrame")
    part = frame.loc[:, columns].reset_index(drop=True).copy()
    digest = hashlib.sha256(pd.util.hash_pandas_object(part, index=False).to_numpy()
                            .tobytes()).hexdigest()
    return RawTable(frame=part, source="DataFrame", format="dataframe", sha256=digest,
                    first_row_number=1)


def _whole_read_reason(data, spec: LayoutSpec) -> str:
    if not isinstance(data, str):
        return "a DataFrame is"
    if data == "-":
        return "standard input is"
    return "wide data are" if spec.layout == "wide" else "files of this format are"


def run_screen(data, request: ScreenRequest, stage: Callable[[str], None] = lambda _: None
               ) -> tuple[dict, object]:
    """The report (JSON-ready dict) and the Panel of a screen of ``data`` (a path, '-'
    for standard input, or a pandas DataFrame). Raises InputProblem for bad input."""
    spec = request.layout()
    if not (isinstance(request.chunk_units, int) and request.chunk_units >= 1):
        raise InputProblem(f"chunk_units must be a whole number of at least 1, got "
                           f"{request.chunk_units!r}")
    if not spec.measure_names():
        raise InputProblem("name at least one measure with --value (long) or --wide (wide)")
    check_spec(spec)   # a conflict of options is named before the file is read
    thresholds = None
    if request.rules:
        from paneldiag.rules.thresholds import load_thresholds
        thresholds = load_thresholds(request.rules)
    import pandas as pd
    if not isinstance(data, (str, pd.DataFrame)):
        raise InputProblem(f"data must be a path or a pandas DataFrame, not "
                           f"{type(data).__name__}")
    if not isinstance(data, str):
        for name in ("format", "delimiter", "sheet", "r_object"):
            if getattr(request, name) is not None:
                raise InputProblem(f"{name} is for reading a file; data given as a "
                                   "DataFrame is already read")
    budget = request.memory_budget()
    from paneldiag.io.stream import should_stream, stream_panel, streamable
    table_in_file: dict = {}
    summaries = None
    memory_bound = budget is not None
    engine = check_engine(request)
    if engine is not None:
        from paneldiag.dask_engine import check_input, connect, dask_panel, part_bytes
        from paneldiag.pipeline import AUDIT_SUMMARY_KINDS, SUMMARY_KINDS
        from paneldiag.summaries import N_REPLICATES
        check_input(data, spec, request.format)
        size = part_bytes(budget)
        stage(f"reading {data} on a Dask cluster")
        with connect(request.scheduler) as client:
            panel, ledgers, digest, fmt, summaries = dask_panel(
                client, data, spec, request.format, request.delimiter, size,
                AUDIT_SUMMARY_KINDS if request.audit_only else SUMMARY_KINDS,
                request.chunk_units, N_REPLICATES)
    elif should_stream(data, request.format, spec, budget):
        memory_bound = True   # a budget, or a file too large to read whole
        stage(f"reading {data} in blocks")
        panel, ledgers, digest, fmt = stream_panel(data, spec, request.format,
                                                   request.delimiter, budget)
    else:
        if budget is not None:
            raise InputProblem(f"--max-memory reads {streamable()} in blocks; "
                               f"{_whole_read_reason(data, spec)} read whole: screen "
                               "without --max-memory")
        if isinstance(data, str):
            from paneldiag.io.readers import read_table
            stage(f"reading {data}")
            raw = read_table(data, request.format, columns=spec.columns(),
                             delimiter=request.delimiter, sheet=request.sheet,
                             r_object=request.r_object)
        else:
            raw = frame_table(data, spec.columns())
        stage("building the panel")
        panel, ledgers = build_panel(raw, spec)
        digest, fmt, table_in_file = raw.sha256, raw.format, raw.table_in_file
        del raw  # the parsed columns are in the panel now: free them before the screen
    stage("screening")
    input_info = {"path": data if isinstance(data, str) else "DataFrame",
                  "sha256": digest, "format": fmt, **table_in_file,
                  "options": dict(options_record(spec, request), scale=request.scale)}
    if request.rules:
        input_info["options"]["rules"] = request.rules
    if request.audit_only:
        input_info["options"]["audit_only"] = True
    if not request.disclosure_audit:
        input_info["options"]["disclosure_audit"] = False
    # the diagnostics are imported only once there is data to screen, so a bad input is
    # reported without paying for their (heavy) imports
    from paneldiag.ahead import workers as ahead_workers
    from paneldiag.pipeline import ScreenOptions, screen
    options = ScreenOptions(min_cell=request.min_cell, scale=request.scale,
                            group_column=request.group, rules=thresholds,
                            audit_only=request.audit_only,
                            disclosure_audit=request.disclosure_audit,
                            triplet_table=request.triplet_table,
                            chunk_units=request.chunk_units,
                            # read in blocks or within a budget: one thread unless
                            # asked, as a second holds its own temporaries (10M x 20
                            # streamed: 2.8 GiB peak on two threads, 2.6 GiB on one)
                            workers=ahead_workers() if memory_bound else None)
    return screen(panel, ledgers, input_info, options, summaries), panel


def check_engine(request: ScreenRequest) -> str | None:
    """The distributed engine asked for (None: the local one), its options checked."""
    from paneldiag.dask_engine import ENGINES, require_dask
    if request.engine not in ENGINES:
        raise InputProblem(f"engine must be one of {', '.join(ENGINES)}, got "
                           f"{request.engine!r}")
    if request.engine == "local":
        if request.scheduler is not None:
            raise InputProblem("--scheduler is for --engine dask: add --engine dask or "
                               "leave out --scheduler")
        return None
    require_dask()
    return request.engine
