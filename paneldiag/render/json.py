"""The JSON report: deterministic text, NaN written as null."""

from __future__ import annotations

import json

from paneldiag.results import plain


def report_json(report: dict) -> str:
    return json.dumps(plain(report), indent=2, ensure_ascii=False, allow_nan=False) + "\n"
