"""The JSON report: deterministic text, NaN written as null, lists of plain values on
one line (a T x T matrix takes T lines, not T^2)."""

from __future__ import annotations

import json
import re

from paneldiag.results import plain

_SCALAR = r"(?:-?\d[\d.eE+-]*|null|true|false)"
_SCALAR_LIST = re.compile(rf"\[\s+((?:{_SCALAR},\s+)*{_SCALAR})\s+\]")
_GAP = re.compile(r",\s+")


def report_json(report: dict) -> str:
    text = json.dumps(plain(report), indent=2, ensure_ascii=False, allow_nan=False)
    return _SCALAR_LIST.sub(lambda m: "[" + _GAP.sub(", ", m.group(1)) + "]", text) + "\n"
