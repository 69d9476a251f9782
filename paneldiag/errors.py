"""The one exception type for problems with the user's input or options."""

from __future__ import annotations

import re

# Line breaks and other control characters in quoted data would split the one-line message.
_CONTROL = re.compile(r"[\x00-\x1f\x7f\u2028\u2029\x85]")


def _one_line(text: str) -> str:
    return _CONTROL.sub(lambda m: repr(m.group())[1:-1] if m.group() != "\t" else " ", text)


class InputProblem(Exception):
    """A problem the user can fix: bad data, a bad option, an unreadable file.

    It carries what went wrong and, where known, where: the file, the row
    (a line number for text files, a record number otherwise) and the column.
    The CLI prints it as one line and exits with status 2. ``listing`` is an optional
    (title, items) pair the CLI shows below that line, wrapped to the terminal (e.g. the
    whole header of a file when a column is not found).
    """

    def __init__(self, what: str, file: str | None = None, row: int | None = None,
                 column: str | None = None,
                 listing: tuple[str, tuple[str, ...]] | None = None):
        what = _one_line(what)
        super().__init__(what)
        self.what = what
        self.file = file
        self.row = row
        self.column = column
        self.listing = listing

    def where(self) -> str:
        parts = [_one_line(str(p)) for p in (self.file, self.row, self.column) if p is not None]
        return ":".join(parts)

    def __str__(self) -> str:
        where = self.where()
        return f"{self.what} ({where})" if where else self.what
