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
import sys
import threading
from dataclasses import dataclass, field
from typing import Callable

import numpy as np
import pandas as pd

from paneldiag.errors import InputProblem

FORMATS = ("csv", "tsv", "parquet", "dta", "sav", "sas7bdat", "xpt")
EXTENSIONS = {
    ".csv": "csv", ".txt": "csv", ".tsv": "tsv", ".tab": "tsv",
    ".parquet": "parquet", ".pq": "parquet",
    ".dta": "dta", ".sav": "sav", ".zsav": "sav",
    ".sas7bdat": "sas7bdat", ".xpt": "xpt",
}
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
               delimiter: str | None = None) -> RawTable:
    """Read the named columns of a panel file; ``path='-'`` reads standard input."""
    fmt = detect_format(path, fmt)
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
    else:
        table = _read_stat_file(path, data, fmt, columns, digest)
    if hashing is not None:
        table.sha256 = hashing.result()
    if path != "-" and columns is not None:
        table.all_columns = lambda: read_table(path, fmt, None, delimiter).frame
    return table


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


def _text_head(path: str, raw: bytes | None, size: int = 1 << 16) -> bytes:
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
        if exc.start < len(head) - 4:  # a cut multi-byte character at the end is fine
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
    header_line = head.lstrip(b"\xef\xbb\xbf").split(b"\n", 1)[0].decode("utf-8", "replace")
    header = next(csv.reader([header_line.rstrip("\r")], delimiter=sep))
    if columns:
        _require_columns(path, header, columns, sep, header_line)
    source = pa.BufferReader(raw) if raw is not None else path
    if raw is not None and raw[:2] == b"\x1f\x8b":
        source = pa.CompressedInputStream(pa.BufferReader(raw), "gzip")
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
    return table.to_pandas(types_mapper=_arrow_types, split_blocks=True, self_destruct=True)


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
    handle = io.TextIOWrapper(io.BytesIO(raw), "utf-8-sig", newline="") if raw is not None \
        else (gzip.open(path, "rt", encoding="utf-8-sig", newline="") if path.endswith(".gz")
              else open(path, encoding="utf-8-sig", newline=""))
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
