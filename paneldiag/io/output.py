"""Writing outputs: atomically, and never over an input."""

from __future__ import annotations

import os
import tempfile

from paneldiag.errors import InputProblem


def refuse_input_overwrite(output: str, inputs: list[str]) -> None:
    """Stop before any work if an output path names one of the input files, or its
    folder does not exist (so a long screen never ends in an unwritable path)."""
    if not os.path.isdir(os.path.dirname(os.path.abspath(output))):
        raise InputProblem("the output folder does not exist", file=output)
    out = os.path.realpath(output)
    for path in inputs:
        if path != "-" and os.path.exists(path) and os.path.realpath(path) == out:
            raise InputProblem("the output path is the input file; choose another path",
                               file=output)


def write_atomic(path: str, data: str | bytes) -> None:
    """Write to a temporary file beside the target, then rename it into place."""
    folder = os.path.dirname(os.path.abspath(path))
    if not os.path.isdir(folder):
        raise InputProblem("the output folder does not exist", file=path)
    payload = data.encode("utf-8") if isinstance(data, str) else data
    handle, tmp = tempfile.mkstemp(dir=folder, prefix=".paneldiag-", suffix=".part")
    try:
        with os.fdopen(handle, "wb") as stream:
            stream.write(payload)
            stream.flush()
            os.fsync(stream.fileno())
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise
