"""The Python API: ``paneldiag.screen`` on a pandas DataFrame or a file, for notebooks.

    import paneldiag
    report = paneldiag.screen(frame, id="household", wave="year", value="trust")
    report.families          # the verdicts as a DataFrame
    report.to_dict()         # the same JSON as `paneldiag screen ... --json`
    report.write_report("appendix")

The options and their defaults are the command's (``paneldiag.request.ScreenRequest``),
by the command's option names with dashes as underscores (``missing_codes="-9,-8"``,
``min_cell=10``, ``wave_bins="0,5,10"``). A problem with the data or the options raises
``paneldiag.InputProblem`` with the message the command prints.
"""

from __future__ import annotations

import html
import json
import os

from paneldiag.errors import InputProblem
from paneldiag.labels import FAMILY_NAMES
from paneldiag.request import ScreenRequest, run_screen

_REPEATED = ("id", "value", "wide", "items", "covariate")   # options given more than once


def _as_tuple(value) -> tuple:
    if value is None:
        return ()
    if isinstance(value, str):
        return (value,)
    if isinstance(value, dict):   # wide / items as {name: [columns]}
        return tuple(f"{name}={','.join(map(str, cols))}" for name, cols in value.items())
    return tuple(value)


def _as_text(value):
    """A list option (wave labels, wave times, wave bins, missing codes) in the command's
    comma-separated form."""
    if value is None or isinstance(value, (str, int, float)) and not isinstance(value, bool):
        return None if value is None else str(value)
    return ",".join(str(v) for v in value)


def screen(data, *, id, wave=None, value=None, wide=None, **options) -> "Report":
    """Screen a panel: ``data`` is a pandas DataFrame or a path (any format the command
    reads). ``id`` is a column or a list of columns (a composite id); long data name
    ``wave`` and ``value`` (one column or a list), wide data give ``wide`` as
    {measure: [columns in wave order]}. Other options as the command's, e.g.
    ``missing_codes="-9,-8"``, ``weight="w"``, ``group="district"``, ``ordinal=True``,
    ``rules="thresholds.toml"``, ``min_cell=10``. Returns a ``Report``."""
    unknown = sorted(set(options) - set(ScreenRequest.option_names()))
    if unknown:
        raise InputProblem(f"unknown option {unknown[0]!r} (options: "
                           f"{', '.join(ScreenRequest.option_names())})")
    given = dict(options, id=id, wave=wave, value=value, wide=wide)
    for name in _REPEATED:
        given[name] = _as_tuple(given.get(name))
    for name in ("wave_labels", "wave_times", "wave_bins", "wave_round", "missing_codes"):
        if name in given:
            given[name] = _as_text(given[name])
    if isinstance(given.get("sheet"), int) and not isinstance(given["sheet"], bool):
        given["sheet"] = str(given["sheet"])   # a position, counted from 1 as on the command
    if isinstance(data, os.PathLike):
        data = os.fspath(data)
    request = ScreenRequest(**{k: v for k, v in given.items() if v is not None})
    try:
        report, panel = run_screen(data, request)
    except InputProblem as problem:
        if problem.listing:   # what the command prints below its line, here in a note
            title, items = problem.listing
            problem.add_note(f"{title}: {', '.join(map(str, items))}")
        raise
    return Report(report, panel, request, data if isinstance(data, str) else None)


class Report:
    """A screen's report: ``to_dict()`` (the JSON report), tables as DataFrames (one row
    per family, wave, pattern, lag or triplet, with a ``measure`` column when the panel
    has several measures), ``write_report(folder)`` (the methods appendix), and a view
    in notebooks."""

    def __init__(self, report: dict, panel, request: ScreenRequest, path: str | None):
        self._report, self._panel, self._request, self._path = report, panel, request, path

    def to_dict(self) -> dict:
        """The JSON report, exactly as ``paneldiag screen ... --json`` writes it."""
        from paneldiag.render.json import report_json
        return json.loads(report_json(self._report))

    @property
    def measures(self) -> dict[str, dict]:
        return self._report.get("measures") or {self._report["measure"]: self._report}

    def _table(self, rows_of):
        import pandas as pd
        frames = []
        for name, one in self.measures.items():
            rows = rows_of(self.to_dict_of(name))
            frame = pd.DataFrame(rows or [])
            if len(self.measures) > 1:
                frame.insert(0, "measure", name)
            frames.append(frame)
        return pd.concat(frames, ignore_index=True) if frames else pd.DataFrame()

    def to_dict_of(self, measure: str) -> dict:
        """The JSON report of one measure."""
        whole = self.to_dict()
        return (whole.get("measures") or {measure: whole})[measure]

    @property
    def families(self):
        """The verdicts: family, verdict, specification, BIC difference and weight."""
        keys = ("family", "verdict", "specification", "bic_difference", "bic_weight")
        return self._table(lambda r: [{k: f.get(k) for k in keys}
                                      for f in r.get("families") or []])

    @property
    def wave_profile(self):
        return self._table(lambda r: r.get("wave_profile"))

    @property
    def retention(self):
        return self._table(lambda r: (r.get("attrition") or {}).get("retention"))

    @property
    def patterns(self):
        return self._table(lambda r: ((r.get("missingness") or {}).get("patterns")
                                      or {}).get("rows"))

    @property
    def lag_profile(self):
        return self._table(lambda r: r.get("lag_profile"))

    @property
    def reliability(self):
        """The listed triplets of waves: Heise reliability (with its jackknife SE) and
        the Wiley-Wiley reliability of the middle wave."""
        def rows(r):
            rel = r.get("reliability") or {}
            wiley = {tuple(w["waves"]): w for w in rel.get("wiley_wiley") or []}
            return [{"waves": " ".join(h["waves"]), "heise": h["reliability"],
                     "heise_se": h["reliability_se"], "impossible": h["impossible"],
                     "wiley_wiley_middle": (wiley.get(tuple(h["waves"]), {})
                                            .get("reliability") or [None] * 3)[1]}
                    for h in rel.get("heise") or []]
        return self._table(rows)

    def write_report(self, folder: str) -> list[str]:
        """Write the methods appendix to ``folder`` (as ``--report``); returns the files."""
        from paneldiag.render.appendix import write_report
        return write_report(self._report, os.fspath(folder),
                            [self._path] if self._path else [], self._panel,
                            self._request.trajectory_sample, self._request.trajectory_seed)

    def summary(self, details: bool = False) -> str:
        """The terminal summary as text."""
        from paneldiag.render.terminal import render_terminal
        return render_terminal(self._report, color=False, details=details)

    def __repr__(self) -> str:
        panel = self._panel
        parts = []
        for name, one in self.measures.items():
            if "families" not in one:
                parts.append(f"{name}: audit only, no verdicts")
                continue
            top = [FAMILY_NAMES.get(f["family"], f["family"]) for f in one["families"]
                   if f.get("verdict") == "supported"]
            parts.append(f"{name}: {', '.join(top) or 'no family'} supported")
        return (f"<paneldiag report: {panel.n_units:,} units x {panel.n_waves} waves; "
                + "; ".join(parts) + ">")

    def _repr_html_(self) -> str:
        blocks = []
        for name in self.measures:
            table = self.families
            if "measure" in table:
                table = table[table["measure"] == name].drop(columns="measure")
            blocks.append(f"<h4>{html.escape(name)}: process families (screening evidence, "
                          "not proof of a model)</h4>" + table.to_html(index=False))
        return ("".join(blocks) + "<pre>" + html.escape(self.summary()) + "</pre>")
