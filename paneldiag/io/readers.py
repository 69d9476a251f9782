"""Readers: turn a file (or standard input) into a raw table of columns.

This module and ``validate`` are the only places that look at raw input. A reader
only parses; deciding what a row means (unit, wave, value, missing code) is the
validator's job.
"""

from __future__ import annotations

import csv
import difflib
import gzip
import hashlib
import io
import os
import re
import sys
import threading
from dataclasses import dataclass, field
from typing import Callable

import numpy as np
import pandas as pd

from paneldiag.errors import InputProblem

FORMATS = ("csv", "tsv", "parquet", "dta", "sav", "sas7bdat", "xpt", "xlsx", "xls", "ods",
           "rds", "rdata", "arrow")
EXTENSIONS = {
    ".csv": "csv", ".txt": "csv", ".tsv": "tsv", ".tab": "tsv",
    ".parquet": "parquet", ".pq": "parquet",
    ".dta": "dta", ".sav": "sav", ".zsav": "sav",
    ".sas7bdat": "sas7bdat", ".xpt": "xpt",
    ".xlsx": "xlsx", ".xlsm": "xlsx", ".xls": "xls", ".ods": "ods",
    ".rds": "rds", ".rdata": "rdata", ".rda": "rdata",
    ".arrow": "arrow", ".feather": "arrow", ".ipc": "arrow",
}
SPREADSHEETS = ("xlsx", "xls", "ods")
# Cell texts that mean "no value" in exported panel files ('.' is a common
# export of a system-missing value).
NULL_TOKENS = ["", "NA", "N/A", "NaN", "nan", "NULL", "null", "."]


@dataclass
class RawTable:
    """Parsed columns plus what the file itself declares about missing values."""

    frame: pd.DataFrame
    source: str
    format: str
    sha256: str
    first_row_number: int  # row number of the first data record (a text file's line)
    declared_ranges: dict[str, list[tuple[float, float]]] = field(default_factory=dict)
    tagged_missing: dict[str, np.ndarray] = field(default_factory=dict)
    value_labels: dict[str, dict[float, str]] = field(default_factory=dict)
    # text files: record index -> line number, worked out only when a message needs it
    # (blank lines and quoted line breaks move records off first_row_number + index)
    locate: Callable[[int], int] | None = None
    # every column of the file, read again only when a message needs them (None for
    # standard input, which cannot be read twice)
    all_columns: Callable[[], pd.DataFrame] | None = None
    # which table of a file holding several was read, for the report's input section:
    # {"sheet": name, "sheets": [names]} or {"r_object": name, "r_objects": [names]}
    table_in_file: dict = field(default_factory=dict)
    # a block of a streamed read: problems are noted here and raised once the whole file
    # is seen (io.stream), so that their counts and order are the whole file's
    refusals: object | None = None

    def row_number(self, index: int) -> int:
        if self.locate is not None:
            return self.locate(int(index))
        return self.first_row_number + int(index)

    def row_later(self, index: int) -> Callable[[], int]:
        """The row number of record ``index``, worked out when called (keeps no data)."""
        locate, first, index = self.locate, self.first_row_number, int(index)
        return (lambda: locate(index)) if locate is not None else (lambda: first + index)


def detect_format(path: str, override: str | None) -> str:
    if override:
        if override not in FORMATS:
            raise InputProblem(f"unknown format '{override}'; choose one of {', '.join(FORMATS)}")
        return override
    if path == "-":
        return "csv"
    if os.path.isdir(path) and _holds_parquet(path):
        return "parquet"  # a partitioned dataset: a folder of Parquet files
    name = path.lower()
    if name.endswith(".gz"):
        name = name[:-3]
    ext = os.path.splitext(name)[1]
    if ext not in EXTENSIONS:
        raise InputProblem(
            f"unknown file type '{ext or '(none)'}'; name a format with --format "
            f"({', '.join(FORMATS)})", file=path)
    return EXTENSIONS[ext]


def read_table(path: str, fmt: str | None = None, columns: list[str] | None = None,
               delimiter: str | None = None, sheet: str | None = None,
               r_object: str | None = None) -> RawTable:
    """Read the named columns of a panel file; ``path='-'`` reads standard input.
    ``sheet`` picks a spreadsheet's sheet (a name, or a position counted from 1),
    ``r_object`` the data frame of an .RData file holding several."""
    fmt = detect_format(path, fmt)
    _check_table_choice(fmt, sheet, r_object)
    if fmt == "parquet" and os.path.isdir(path):
        from paneldiag.io.stream import read_parquet_folder
        return read_parquet_folder(path, columns)
    data = _load_bytes(path)
    if isinstance(data, bytes):
        hashing, digest = None, hashlib.sha256(data).hexdigest()
    else:  # the file's digest is taken on a second thread while the parser runs
        hashing, digest = _Background(_sha256_file, path), ""
    if fmt in ("csv", "tsv"):
        raw = data if isinstance(data, bytes) else None
        table = _read_text(path, raw, fmt, columns, delimiter, digest)
    elif fmt == "parquet":
        table = _read_parquet(path, data, columns, digest)
    elif fmt in SPREADSHEETS:
        table = _read_spreadsheet(path, data, fmt, columns, sheet, digest)
    elif fmt in ("rds", "rdata"):
        table = _read_r_file(path, data, fmt, columns, r_object, digest)
    elif fmt == "arrow":
        table = _read_arrow(path, data, columns, digest)
    else:
        table = _read_stat_file(path, data, fmt, columns, digest)
    if hashing is not None:
        table.sha256 = hashing.result()
    if path != "-" and columns is not None:
        table.all_columns = lambda: read_table(path, fmt, None, delimiter, sheet,
                                               r_object).frame
        if fmt in SPREADSHEETS:   # the header is found by the columns asked for
            table.all_columns = lambda: _read_spreadsheet(path, None, fmt, columns, sheet, "",
                                                          every_column=True).frame
    return table


def _check_table_choice(fmt: str, sheet, r_object) -> None:
    if sheet is not None and fmt not in SPREADSHEETS:
        raise InputProblem(f"--sheet is for spreadsheet files (xlsx, xls, ods), not {fmt}")
    if r_object is not None and fmt != "rdata":
        raise InputProblem(f"--r-object is for .RData files, not {fmt}")


def _holds_parquet(folder: str) -> bool:
    return any(name.lower().endswith((".parquet", ".pq"))
               for _, _, names in os.walk(folder) for name in names)


class _Background:
    """A function run on a daemon thread (hashlib and file reads release the GIL)."""

    def __init__(self, function, *args):
        self._outcome: list = []
        self._thread = threading.Thread(target=self._run, args=(function, args), daemon=True)
        self._thread.start()

    def _run(self, function, args) -> None:
        try:
            self._outcome.append((True, function(*args)))
        except BaseException as exc:  # handed to the caller by result()
            self._outcome.append((False, exc))

    def result(self):
        self._thread.join()
        ok, value = self._outcome[0]
        if not ok:
            raise value
        return value


def _load_bytes(path: str) -> bytes | None:
    """Standard input is read whole; a file is left on disk (None)."""
    if path == "-":
        return sys.stdin.buffer.read()
    if not os.path.exists(path):
        raise InputProblem("file not found", file=path)
    if os.path.isdir(path):
        raise InputProblem("is a folder, not a file", file=path)
    return None


def _sha256_file(path: str) -> str:
    digest = hashlib.sha256()
    with open(path, "rb") as handle:
        for block in iter(lambda: handle.read(1 << 22), b""):
            digest.update(block)
    return digest.hexdigest()


HEAD_BYTES = 1 << 16


def _text_head(path: str, raw: bytes | None, size: int = HEAD_BYTES) -> bytes:
    if raw is None:
        with open(path, "rb") as handle:
            raw_head = handle.read(size)
    else:
        raw_head = raw[:size]
    if raw_head[:2] == b"\x1f\x8b":
        stream = gzip.GzipFile(fileobj=io.BytesIO(raw if raw is not None else open(path, "rb").read()))
        try:
            return stream.read(size)
        except (OSError, EOFError) as exc:
            raise InputProblem(f"damaged gzip file ({exc})", file=path) from None
    return raw_head


def _is_gzip(path: str, raw: bytes | None) -> bool:
    if raw is not None:
        return raw[:2] == b"\x1f\x8b"
    with open(path, "rb") as handle:
        return handle.read(2) == b"\x1f\x8b"


def _check_text(path: str, head: bytes) -> None:
    if not head.strip():
        raise InputProblem("file is empty", file=path)
    if head[:2] in (b"\xff\xfe", b"\xfe\xff"):
        raise InputProblem("file is UTF-16 text (it starts with a UTF-16 byte-order mark); "
                           "save it as UTF-8", file=path)
    if b"\x00" in head:
        offset = head.index(b"\x00")
        raise InputProblem(f"not a text table: binary content at byte {offset}", file=path)
    try:
        head.decode("utf-8")
    except UnicodeDecodeError as exc:
        # a multi-byte character cut at the end of a head shorter than the file is fine
        if exc.start < len(head) - 4 or len(head) < HEAD_BYTES:
            line = head[:exc.start].count(b"\n") + 1
            raise InputProblem(f"not UTF-8 text: undecodable byte at offset {exc.start}; "
                               "save the file as UTF-8", file=path, row=line) from None


def _read_text(path, raw, fmt, columns, delimiter, digest) -> RawTable:
    import pyarrow as pa
    import pyarrow.csv as pacsv

    head = _text_head(path, raw)
    _check_text(path, head)
    sep = delimiter or ("\t" if fmt == "tsv" else ",")
    sep = {"\\t": "\t", "tab": "\t"}.get(sep, sep)  # as the shell passes a typed \t
    if len(sep) != 1:
        raise InputProblem(f"the delimiter must be one character, got {sep!r}")
    # the first line ends at \n, \r\n or a lone \r (as the parser's lines do)
    header_line = re.split(rb"\r\n?|\n", head.lstrip(b"\xef\xbb\xbf"), maxsplit=1)[0]
    header_line = header_line.decode("utf-8", "replace")
    header = next(csv.reader([header_line], delimiter=sep))
    if columns:
        _require_columns(path, header, columns, sep, header_line)
    # compressed or not by the content, never by the name: a '.gz' name on plain text
    # (or gzip under a '.csv' name) is read as what it is
    gzipped = _is_gzip(path, raw)
    source = (pa.BufferReader(raw) if raw is not None
              else pa.input_stream(path, compression=None))
    if gzipped:
        source = pa.CompressedInputStream(source, "gzip")
    try:
        table = pacsv.read_csv(
            source,
            parse_options=pacsv.ParseOptions(delimiter=sep),
            convert_options=pacsv.ConvertOptions(
                include_columns=columns, null_values=NULL_TOKENS, strings_can_be_null=True),
            read_options=pacsv.ReadOptions(block_size=1 << 24),
        )
    except pa.ArrowInvalid as exc:
        raise _text_parse_problem(path, raw, sep, str(exc)) from None
    except OSError as exc:   # a gzip stream damaged past the part already checked
        if not gzipped:
            raise
        raise InputProblem(f"damaged gzip file ({str(exc).splitlines()[0]})",
                           file=path) from None
    if table.num_rows == 0:
        raise InputProblem("no data rows: the file has a header only", file=path)
    locate = _line_locator(path, raw, sep)
    _refuse_binary_columns(path, table, locate)
    frame = _to_frame(table)
    return RawTable(frame=frame, source=path, format=fmt, sha256=digest, first_row_number=2,
                    locate=locate)


def _refuse_binary_columns(path, table, locate) -> None:
    """The parser leaves a column as bytes when it holds text that is not UTF-8."""
    import pyarrow as pa

    for name, column in zip(table.column_names, table.columns):
        if pa.types.is_binary(column.type) or pa.types.is_large_binary(column.type):
            values = column.to_pylist()  # only on the way to an error
            index = next(i for i, v in enumerate(values) if v is not None and not _is_utf8(v))
            raise InputProblem("not UTF-8 text; save the file as UTF-8", file=path,
                               row=locate(index), column=name)


def _is_utf8(value: bytes) -> bool:
    try:
        value.decode("utf-8")
        return True
    except UnicodeDecodeError:
        return False


def _line_locator(path, raw, sep) -> Callable[[int], int]:
    """Line number of each data record, computed once on first use.

    Without quote characters the line starts are found with numpy and blank lines (which
    the parser skips) are left out; with quotes, the csv module follows quoted line breaks.
    """
    lines: list[np.ndarray] = []

    def locate(index: int) -> int:
        if not lines:
            lines.append(_record_lines(path, raw, sep))
        found = lines[0]
        return int(found[index]) if index < len(found) else index + 2

    return locate


def _record_lines(path, raw, sep) -> np.ndarray:
    if raw is None:
        with open(path, "rb") as handle:
            raw = handle.read()
    data = raw
    if data[:2] == b"\x1f\x8b":
        data = gzip.decompress(data)
    if b'"' not in data:
        buf = np.frombuffer(data, dtype=np.uint8)
        breaks = np.flatnonzero(buf == 10)
        starts = np.r_[0, breaks + 1]
        ends = np.r_[breaks, len(buf)]
        carriage = (ends > starts) & (buf[np.maximum(ends - 1, 0)] == 13)
        filled = (ends - starts - carriage) > 0
        return (np.flatnonzero(filled) + 1)[1:]
    reader = csv.reader(io.TextIOWrapper(io.BytesIO(data), "utf-8-sig", errors="replace",
                                         newline=""), delimiter=sep)
    ends = [reader.line_num for record in reader if record]  # only on the way to an error
    return np.array(ends[1:], dtype=np.int64)


def _to_frame(table) -> pd.DataFrame:
    """An Arrow table as a DataFrame, one block per column (no consolidating copy),
    freeing each Arrow column once converted, so the table is not held twice."""
    table = _exact_large_integers(table)
    return table.to_pandas(types_mapper=_arrow_types, split_blocks=True, self_destruct=True)


EXACT_INTEGER = 2 ** 53   # integers beyond it do not all survive a double


def _exact_large_integers(table):
    """An integer column with empty cells becomes doubles in pandas, where ids such as
    9007199254740993 and 9007199254740992 would fall together: such a column whose
    values go beyond 2^53 is kept as their decimal text instead (exact and distinct)."""
    import pyarrow as pa
    import pyarrow.compute as pc
    for i, field in enumerate(table.schema):
        column = table.column(i)
        if not pa.types.is_integer(field.type) or column.null_count == 0:
            continue
        extent = pc.min_max(column)
        low, high = extent["min"].as_py(), extent["max"].as_py()
        if low is not None and max(abs(low), abs(high)) > EXACT_INTEGER:
            table = table.set_column(i, field.name, column.cast(pa.string()))
    return table


def _arrow_types(arrow_type):
    """Keep text as pandas' Arrow-backed strings (cheap), numbers as numpy."""
    import pyarrow as pa
    if pa.types.is_string(arrow_type) or pa.types.is_large_string(arrow_type):
        return pd.ArrowDtype(arrow_type)
    return None


def _require_columns(path, header, columns, sep, header_line) -> None:
    missing = [c for c in columns if c not in header]
    if not missing:
        return
    hint = ""
    if len(header) == 1:
        for other in (";", "\t", "|", ","):
            if other != sep and other in header_line:
                shown = "\\t" if other == "\t" else other
                hint = f"; the header looks '{shown}'-separated: try --delimiter '{shown}'"
                break
    raise column_not_found(missing[0], list(header), path, row=1, hint=hint)


INLINE_HEADER = 60  # characters: a longer header is listed below the message, wrapped


def column_not_found(name: str, header: list[str], path: str, row: int | None = None,
                     hint: str = "") -> InputProblem:
    """Column ``name`` is not in ``header``: near matches (case aside, or close spellings)
    in the message, and the whole header, in it when short, else in its listing."""
    near = []
    if not hint:  # a header read with the wrong delimiter has no near match
        lowered = {h.strip().lower(): h for h in reversed(header)}
        key = name.strip().lower()
        near = [lowered[key]] if key in lowered else []
        near += [lowered[m] for m in difflib.get_close_matches(key, list(lowered), 3, 0.6)]
        near = list(dict.fromkeys(near))[:3]
    offer = f" (did you mean {' or '.join(repr(n) for n in near)}?)" if near else ""
    shown = ", ".join(header)
    if len(shown) <= INLINE_HEADER:
        return InputProblem(f"column '{name}' not found{offer}; the header has: {shown}{hint}",
                            file=path, row=row)
    return InputProblem(f"column '{name}' not found{offer}; the header's {len(header)} "
                        f"columns are listed below{hint}", file=path, row=row,
                        listing=("header", tuple(header)))


def _text_parse_problem(path, raw, sep, message) -> InputProblem:
    """Translate a parser error into one line with the offending line number."""
    first = message.splitlines()[0].replace("CSV parse error: ", "")
    if "Expected" in first and "columns" in first:
        line = _first_ragged_line(path, raw, sep)
        return InputProblem(f"ragged row: {first.split(':')[0].lower()}", file=path, row=line)
    return InputProblem(f"cannot parse the table: {first}", file=path)


def _first_ragged_line(path, raw, sep) -> int | None:
    if raw is not None and raw[:2] == b"\x1f\x8b":
        raw = gzip.decompress(raw)
    # only to find a line number: bytes that are not UTF-8 past the checked head count
    # as characters all the same
    text = {"encoding": "utf-8-sig", "errors": "replace", "newline": ""}
    handle = io.TextIOWrapper(io.BytesIO(raw), **text) if raw is not None \
        else (gzip.open(path, "rt", **text) if _is_gzip(path, raw) else open(path, **text))
    with handle:
        reader = csv.reader(handle, delimiter=sep)
        width = None
        for record in reader:
            if width is None:
                width = len(record)
            elif len(record) != width and record:
                return reader.line_num
    return None


def _read_parquet(path, raw, columns, digest) -> RawTable:
    import pyarrow as pa
    import pyarrow.parquet as pq

    source = pa.BufferReader(raw) if raw is not None else path
    try:
        schema = pq.read_schema(source)
        if columns:
            _require_columns(path, schema.names, columns, ",", "")
        table = pq.read_table(source, columns=columns)
    except (pa.ArrowInvalid, OSError) as exc:
        raise InputProblem(f"not a readable Parquet file ({str(exc).splitlines()[0]})",
                           file=path) from None
    if table.num_rows == 0:
        raise InputProblem("no data rows", file=path)
    frame = _to_frame(table)
    return RawTable(frame=frame, source=path, format="parquet", sha256=digest, first_row_number=1)


def _read_stat_file(path, raw, fmt, columns, digest) -> RawTable:
    """Stata, SPSS and SAS files via pyreadstat, keeping declared missing values."""
    import tempfile

    import pyreadstat

    readers = {"dta": pyreadstat.read_dta, "sav": pyreadstat.read_sav,
               "sas7bdat": pyreadstat.read_sas7bdat, "xpt": pyreadstat.read_xport}
    tmp = None
    if raw is not None:  # pyreadstat reads paths only
        tmp = tempfile.NamedTemporaryFile(suffix="." + fmt, delete=False)
        tmp.write(raw)
        tmp.close()
    target = tmp.name if tmp else path
    try:
        try:
            _, meta = readers[fmt](target, metadataonly=True)
        except Exception as exc:  # pyreadstat raises its own types for damaged files
            raise InputProblem(f"not a readable {fmt} file ({str(exc).splitlines()[0]})",
                               file=path) from None
        if columns:
            _require_columns(path, list(meta.column_names), columns, ",", "")
        options = {"usecols": columns}
        if fmt != "xpt":
            options["user_missing"] = True
        frame, meta = readers[fmt](target, **options)
    finally:
        if tmp:
            os.unlink(tmp.name)
    if len(frame) == 0:
        raise InputProblem("no data rows", file=path)
    tagged = {}
    if fmt in ("dta", "sas7bdat"):  # letters .a-.z are the formats' tagged missing values
        kinds = getattr(meta, "readstat_variable_types", None) or {}
        for name in frame.columns:
            column = frame[name]
            if kinds.get(name) != "string" and not pd.api.types.is_numeric_dtype(column):
                letters = column.astype("string").str.fullmatch(r"[A-Za-z]").fillna(False)
                letters = letters.to_numpy(dtype=bool)
                rest = pd.to_numeric(column.where(~letters), errors="coerce")
                if letters.any() and rest.notna().sum() == column.notna().sum() - letters.sum():
                    tagged[name] = np.where(letters, "." + column.astype(str), None)
                    frame[name] = rest
    ranges = {name: [(float(r["lo"]), float(r["hi"])) for r in spans]
              for name, spans in (getattr(meta, "missing_ranges", None) or {}).items()}
    labels = {name: {float(k): str(v) for k, v in mapping.items()
                     if isinstance(k, (int, float))}
              for name, mapping in (getattr(meta, "variable_value_labels", None) or {}).items()}
    return RawTable(frame=frame, source=path, format=fmt, sha256=digest, first_row_number=1,
                    declared_ranges=ranges, tagged_missing=tagged, value_labels=labels)


FORMAT_NAMES = {"xlsx": "Excel (.xlsx)", "xls": "Excel (.xls)", "ods": "OpenDocument (.ods)",
                "rds": "R .rds", "rdata": "R .RData", "arrow": "Arrow IPC / Feather"}


def _unreadable(path: str, fmt: str, exc: BaseException) -> InputProblem:
    lines = str(exc).strip().splitlines()
    detail = lines[0] if lines else type(exc).__name__
    return InputProblem(f"not a readable {FORMAT_NAMES.get(fmt, fmt)} file ({detail})",
                        file=path)


def _read_spreadsheet(path, raw, fmt, columns, sheet, digest,
                      every_column: bool = False) -> RawTable:
    """One sheet of a workbook (python-calamine, the engine pandas uses for these files).
    Rows above the header (a title, notes) are passed over; blank rows are skipped as a
    text file's blank lines are, and each record keeps its sheet row number for messages."""
    import python_calamine

    try:
        book = (python_calamine.CalamineWorkbook.from_filelike(io.BytesIO(raw))
                if raw is not None else python_calamine.CalamineWorkbook.from_path(path))
        names = list(book.sheet_names)
        name = _chosen_sheet(path, names, sheet)
        cells = book.get_sheet_by_name(name).to_python(skip_empty_area=False)
    except InputProblem:
        raise
    except Exception as exc:  # calamine raises its own types (zip, XML, password, ...)
        raise _unreadable(path, fmt, exc) from None
    grid = np.array(cells, dtype=object)   # calamine gives the used range, rectangular
    if grid.ndim != 2:
        grid = grid.reshape(len(cells), -1) if grid.size else np.empty((0, 0), dtype=object)
    rows_with_data = np.flatnonzero((grid != "").any(axis=1))
    where = f"sheet '{name}'" + (f" of {len(names)}" if len(names) > 1 else "")
    if len(rows_with_data) == 0:
        raise InputProblem(f"{where} is empty" + _other_sheets(names, name), file=path)
    header_at = _header_row(grid, rows_with_data, columns)
    header = [_header_text(v) for v in grid[header_at]]
    if columns:
        missing = [c for c in columns if c not in header]
        if missing:
            raise column_not_found(missing[0], [h for h in header if h], path,
                                   row=int(header_at) + 1)
    records = rows_with_data[rows_with_data > header_at]
    if len(records) == 0:
        raise InputProblem(f"no data rows: {where} has a header only", file=path)
    wanted = [h for h in dict.fromkeys(header) if h] if every_column or not columns \
        else columns
    frame = pd.DataFrame({c: _sheet_column(grid[records, header.index(c)]) for c in wanted})
    lines = records + 1   # sheet rows count from 1
    return RawTable(frame=frame, source=path, format=fmt, sha256=digest, first_row_number=2,
                    locate=lambda index: int(lines[index]),
                    table_in_file={"sheet": name, "sheets": names})


TITLE_ROWS = 20   # rows above the header a sheet may hold (a title, a note, blank rows)


def _header_row(grid: np.ndarray, rows_with_data: np.ndarray, columns) -> int:
    """The header: the first non-blank row holding every column asked for, among the
    first rows of the sheet (a sheet often opens with a title); else the first non-blank
    row, whose cells the column-not-found message then lists."""
    if columns:
        for row in rows_with_data[:TITLE_ROWS]:
            if set(columns) <= {_header_text(v) for v in grid[row]}:
                return int(row)
    return int(rows_with_data[0])


def _chosen_sheet(path: str, names: list[str], sheet) -> str:
    if not names:
        raise InputProblem("the workbook has no sheets", file=path)
    if sheet is None:
        return names[0]
    text = str(sheet).strip()
    if text in names:
        return text
    listed = ", ".join(f"'{n}'" for n in names)
    if text.isdigit():
        position = int(text)
        if 1 <= position <= len(names):
            return names[position - 1]
        raise InputProblem(
            f"--sheet {position} is out of range: the workbook has {len(names)} sheet"
            f"{'s' if len(names) > 1 else ''} ({listed}), counted from 1", file=path)
    lowered = {n.lower(): n for n in reversed(names)}
    near = difflib.get_close_matches(text.lower(), list(lowered), 1, 0.6)
    offer = f" (did you mean '{lowered[near[0]]}'?)" if near else ""
    raise InputProblem(f"no sheet named '{text}'{offer}; the workbook's sheets are {listed}",
                       file=path)


def _other_sheets(names: list[str], name: str) -> str:
    others = [n for n in names if n != name]
    return (f"; choose another with --sheet ({', '.join(repr(n) for n in others)})"
            if others else "")


def _header_text(value) -> str:
    if isinstance(value, float) and value.is_integer():
        return str(int(value))     # a year typed as a number heads a wave column
    return str(value).strip()


def _sheet_column(values: np.ndarray) -> pd.Series:
    """A column of cells typed as the text reader types it: empty cells and the null
    words are missing; numbers (whole numbers as integers when none is missing), text,
    dates; a mix stays as it is (text beside numbers is the validator's to name)."""
    values = values.copy()
    values[values == ""] = None
    series = pd.Series(values, dtype=object)
    series[series.isin(NULL_TOKENS)] = None
    kind = pd.api.types.infer_dtype(series, skipna=True)
    if kind in ("floating", "integer", "mixed-integer-float", "empty"):
        numbers = series.astype(float)
        whole = numbers.notna().all() and np.all(np.mod(numbers, 1) == 0) \
            and np.all(np.abs(numbers) < 2 ** 53)
        return numbers.astype(np.int64) if whole and kind != "empty" else numbers
    if kind == "string":
        import pyarrow as pa
        return series.astype(pd.ArrowDtype(pa.string()))
    if kind in ("datetime", "datetime64", "date"):
        return pd.to_datetime(series)
    return series


def _plain_columns(frame: pd.DataFrame) -> pd.DataFrame:
    """Categorical columns (R factors, Arrow dictionaries) as their labels: a factor's
    codes mean nothing to the screen."""
    for name in frame.columns:
        column = frame[name]
        if isinstance(column.dtype, pd.CategoricalDtype):
            frame[name] = column.astype(column.cat.categories.dtype)
    return frame


def _on_disk(path: str, raw: bytes | None, suffix: str):
    """A path to the bytes for readers that take paths only: the file itself, or a
    temporary copy of standard input (removed by the caller through the returned cleanup)."""
    import tempfile

    if raw is None:
        return path, lambda: None
    tmp = tempfile.NamedTemporaryFile(suffix=suffix, delete=False)
    tmp.write(raw)
    tmp.close()
    return tmp.name, lambda: os.unlink(tmp.name)


def _read_r_file(path, raw, fmt, columns, r_object, digest) -> RawTable:
    """An R data frame (pyreadr): the one of an .rds file, or one of an .RData file,
    named with ``r_object`` when the file holds several."""
    import warnings

    import pyreadr

    target, cleanup = _on_disk(path, raw, ".rds" if fmt == "rds" else ".RData")
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # pyreadr warns of skipped objects; we say it
            try:
                listed = [o["object_name"] for o in pyreadr.list_objects(target)]
                name = _chosen_object(path, fmt, listed, r_object)
                found = pyreadr.read_r(target, use_objects=None if name is None else [name])
            except InputProblem:
                raise
            except Exception as exc:  # pyreadr raises its own types for damaged files
                raise _unreadable(path, fmt, exc) from None
    finally:
        cleanup()
    if not found:
        raise InputProblem("the file holds no data frame that can be read (lists and S4 "
                           "objects are not); save the panel as a data.frame", file=path)
    frame = next(iter(found.values()))
    header = list(map(str, frame.columns))
    if columns:
        _require_columns(path, header, columns, ",", "")
        frame = frame.loc[:, columns]
    if len(frame) == 0:
        raise InputProblem("no data rows", file=path)
    where = {"r_object": name, "r_objects": listed} if fmt == "rdata" else {}
    return RawTable(frame=_plain_columns(frame.reset_index(drop=True)), source=path,
                    format=fmt, sha256=digest, first_row_number=1, table_in_file=where)


def _chosen_object(path: str, fmt: str, listed: list, r_object) -> str | None:
    if fmt == "rds" or not listed:
        return None
    if r_object is None:
        if len(listed) == 1:
            return listed[0]
        raise InputProblem(f"the file holds {len(listed)} data frames "
                           f"({', '.join(map(str, listed))}); name one with --r-object",
                           file=path)
    if r_object not in listed:
        raise InputProblem(f"no data frame named '{r_object}'; the file holds "
                           f"{', '.join(map(str, listed))}", file=path)
    return r_object


def _read_arrow(path, raw, columns, digest) -> RawTable:
    """An Arrow IPC file (Feather version 2), an Arrow IPC stream, or a Feather version 1
    file (pyarrow)."""
    import pyarrow as pa
    import pyarrow.feather as feather

    def source():
        return pa.BufferReader(raw) if raw is not None else pa.memory_map(path)

    table = None
    try:
        try:
            reader = pa.ipc.open_file(source())
            schema = reader.schema
        except pa.ArrowInvalid:
            try:
                reader = pa.ipc.open_stream(source())
                schema = reader.schema
            except pa.ArrowInvalid:   # Feather version 1 has a layout of its own
                table = feather.read_table(source())
                schema = table.schema
        if columns:
            _require_columns(path, schema.names, columns, ",", "")
        if table is None:
            table = reader.read_all()
        if columns:
            table = table.select(columns)
    except InputProblem:
        raise
    except (pa.ArrowException, OSError, ValueError) as exc:
        raise _unreadable(path, "arrow", exc) from None
    if table.num_rows == 0:
        raise InputProblem("no data rows", file=path)
    return RawTable(frame=_plain_columns(_to_frame(table)), source=path, format="arrow",
                    sha256=digest, first_row_number=1)
