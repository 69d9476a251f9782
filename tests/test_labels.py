"""One name, one number: every figure a screen shows carries one value under its label,
in the terminal (summary and --details), the appendix and the JSON report.

The panels are simulated with known truth (paneldiag.simulate, one measure per process
family, two groups), screened once through the CLI; the labels are read back from the
outputs as a reader would read them."""

from __future__ import annotations

import json
import re

import numpy as np
import pandas as pd
import pytest

from paneldiag.labels import FAMILY_NAMES
from paneldiag.render.appendix import build
from paneldiag.render.document import to_markdown
from paneldiag.render.terminal import render_terminal
from paneldiag.simulate import FAMILIES, family_values
from conftest import run_cli

N_UNITS, N_WAVES = 200, 4
# words that do not name a figure (a label's content is the rest)
STOPWORDS = {"the", "a", "an", "of", "and", "in", "at", "to", "from", "with", "by", "on",
             "was", "were", "is", "are", "averaged", "had", "gave", "value", "be"}
# tests and their p-values are named by the sentence they sit in, not by a label
TEST_WORDS = {"p", "df", "chi-square", "chi2", "q", "f", "z", "statistic", "test"}
NUMBER = r"[-−]?\d+\.\d+"
VALUE = re.compile(rf"(?P<value>{NUMBER})(?P<pct>%?)(?:\s*\[(?:95% ci )?(?P<lo>{NUMBER}),"
                   rf" (?P<hi>{NUMBER})\])?")


@pytest.fixture(scope="module")
def outputs(tmp_path_factory):
    """(terminal summary, terminal --details, appendix markdown, JSON report)."""
    tmp = tmp_path_factory.mktemp("labels")
    rng = np.random.default_rng(20261202)
    frames = []
    for family in FAMILIES:   # simulation with known truth: one measure per family
        y = family_values(family, N_UNITS, N_WAVES, 0.8, "mcar", rng)
        frames.append(pd.DataFrame(y, columns=[f"{family}_{w}" for w in range(N_WAVES)]))
    wide = pd.concat(frames, axis=1)
    wide.insert(0, "unit", np.arange(N_UNITS))
    long = pd.wide_to_long(wide, stubnames=list(FAMILIES), i="unit", j="wave",
                           sep="_").reset_index()
    path = tmp / "panel.csv"
    long.to_csv(path, index=False)
    args = ["screen", path, "--id", "unit", "--wave", "wave", "--json", tmp / "report.json",
            "--details"]
    for family in FAMILIES:
        args += ["--value", family]
    done = run_cli(*args)
    assert done.returncode == 0, done.stderr.decode()
    report = json.loads((tmp / "report.json").read_text())
    # the summary and the appendix from the same report (the appendix without figures,
    # which take long to draw and carry no labelled numbers)
    summary = render_terminal(report, details=False)
    appendix = to_markdown(build(report, {})[0])
    return summary, done.stdout.decode(), appendix, report


# ------------------------------------------------------------------ reading the labels

def _normal(label: str) -> str:
    label = label.lower().replace("−", "-")
    label = re.sub(r"\s+", " ", label).strip(" :=,.(")
    words = label.split(" ")
    while words and words[0] in STOPWORDS:
        words.pop(0)
    while words and words[-1] in STOPWORDS:
        words.pop()
    return " ".join(words)


def _pairs_in(segment: str, prefix: str = "") -> list[tuple[str, str]]:
    """(label, value) of the first figure in a segment of text: the label is the text
    before the number, from the last colon on (or before it, when nothing follows)."""
    m = VALUE.search(segment)
    if not m:
        return []
    before = segment[:m.start()]
    if ":" in before:
        head, tail = before.rsplit(":", 1)
        before = tail if re.search(r"[A-Za-z]", tail) else head.rsplit(":", 1)[-1]
    label = _normal(prefix + _normal(before))
    words = set(re.findall(r"[a-z0-9'/+()-]+", label))
    if not re.search(r"[a-z]", label) or words & TEST_WORDS:
        return []
    value = m.group("value").replace("−", "-")
    suffix = " %" if m.group("pct") else ""
    out = [(label + suffix, value)]
    if m.group("lo"):
        out.append((label + suffix + " [low]", m.group("lo").replace("−", "-")))
        out.append((label + suffix + " [high]", m.group("hi").replace("−", "-")))
    return out


def _segments(text: str) -> list[str]:
    parts = re.split(r" · |; |\. (?=[A-Z])|\s{2,}", text)
    return [p for p in parts if p.strip()]


def terminal_pairs(text: str) -> list[tuple[str, str]]:
    pairs = []
    rows = text.splitlines()
    header, groups = None, False
    for line in rows:
        if line.startswith("▸ "):
            groups = line.startswith("▸ By ")
        if groups:   # a range over groups: 'label by group: lowest to highest'
            m = re.match(rf"  (.+ by group): ({NUMBER})%? to ({NUMBER})", line)
            if m:
                pairs += [(f"groups | {_normal(m.group(1))} [min]", m.group(2)),
                          (f"groups | {_normal(m.group(1))} [max]", m.group(3))]
            continue
        cells = [c for c in re.split(r"\s{2,}", line.strip()) if c]
        if cells and cells[0] == "family":
            header = cells
            continue
        if header and len(cells) == len(header) and cells[0] in FAMILY_NAMES.values():
            for name, cell in zip(header[1:], cells[1:]):
                if name == "key evidence":
                    for seg in cell.split("; "):
                        pairs += _pairs_in(seg)
                elif re.fullmatch(NUMBER, cell):
                    pairs.append((f"{cells[0]} | {name}", cell))
            continue
        header = None if not line.startswith("  ") else header
        for seg in _segments(line):
            pairs += _pairs_in(seg)
    return pairs


def markdown_pairs(text: str) -> list[tuple[str, str]]:
    pairs = []
    header, groups = None, None
    for line in text.splitlines():
        if re.match(r"#{2,3} ", line):
            groups = "groups | " if line == "### Groups" else None
        elif groups and line.startswith("#### Group: "):
            groups = f"groups | {line[12:]} | "
        if groups and not line.startswith("|"):   # figures of one group, or ranges over them
            for seg in _segments(line):
                pairs += _pairs_in(seg, groups)
            continue
        if line.startswith("|"):
            cells = [c.strip() for c in line.strip().strip("|").split("|")]
            if header is None:
                header = cells
            elif not set("".join(cells)) <= set("-: "):
                # a row is named by its cells that are not figures
                row = " ".join(c for c in cells if not VALUE.fullmatch(c))
                for name, cell in zip(header, cells):
                    if VALUE.fullmatch(cell):
                        pairs += _pairs_in(cell, f"{row} | {name} ")
            continue
        header = None
        # an item of the family evidence speaks of one family: its figures are that
        # family's (the BIC weight, the fit of its specification)
        item = re.match(r"- ([a-z +-]+) \((?:supported|plausible)\): ", line)
        for seg in _segments(line[item.end():] if item else line):
            pairs += _pairs_in(seg, f"{item.group(1)} | " if item else "")
    return pairs


def json_pairs(report: dict) -> list[tuple[str, str]]:
    """The labelled figures of a measure's JSON: the verdicts' statistics under the labels
    the report gives them, the measurement, and the by-group comparison."""
    pairs = []
    basis = report.get("verdict_basis") or {}
    labels = basis.get("labels") or {}
    for key, node in (basis.get("statistics") or {}).items():
        if key in labels and isinstance(node, dict) and node.get("estimate") is not None:
            for part, field in (("", "estimate"), (" [low]", "ci_low"), (" [high]", "ci_high")):
                if node.get(field) is not None:
                    pairs.append((_normal(labels[key]) + part, f"{node[field]:.3f}"))
    for comp in (report.get("groups") or {}).get("comparison") or []:
        scale = 100 if comp["figure"] == "retention" else 1
        values = [v for v in comp["by_group"] if v.get("estimate") is not None]
        for v in values:
            pairs.append((f"{_normal(comp['label'])} | {v['group']}",
                          f"{scale * v['estimate']:.3f}"))
        if values:
            name = f"groups | {_normal(comp['label'] + ' by group')}"
            pairs += [(f"{name} [min]", f"{scale * min(v['estimate'] for v in values):.3f}"),
                      (f"{name} [max]", f"{scale * max(v['estimate'] for v in values):.3f}")]
    return pairs


# ------------------------------------------------------------------ the checks

def _words(label: str) -> frozenset:
    return frozenset(w for w in re.findall(r"[a-z0-9'/+()%\[\]-]+", label)
                     if w not in STOPWORDS)


def _same(a: str, b: str) -> bool:
    """Equal after rounding to the coarser of the two shown precisions."""
    digits = min(len(a.split(".")[1]), len(b.split(".")[1]))
    return round(float(a), digits) == round(float(b), digits) or \
        abs(float(a) - float(b)) <= 0.5 * 10 ** -digits + 1e-12


def conflicts(pairs: list[tuple[str, str, str]]) -> list[str]:
    """Labels a reader takes for one figure (one's words all in the other's; interval
    ends only with interval ends) that carry different values."""
    seen: dict[str, set] = {}
    for label, value, where in pairs:
        seen.setdefault(label, set()).add((value, where))
    out = []
    labels = sorted(seen)
    for i, a in enumerate(labels):
        for b in labels[i:]:
            wa, wb = _words(a), _words(b)
            # a table cell is named by its row and column; a label of one word may be
            # part of many longer names: both are compared by exact name only
            exact_only = "|" in a + b or min(len(wa), len(wb)) < 2
            if a != b and (exact_only or not (wa <= wb or wb <= wa)):
                continue
            if a != b and (a.endswith("]") != b.endswith("]") or a.endswith("%") != b.endswith("%")):
                continue
            for va, where_a in seen[a]:
                for vb, where_b in seen[b]:
                    if not _same(va, vb):
                        out.append(f"'{a}' = {va} ({where_a}) but '{b}' = {vb} ({where_b})")
    return sorted(set(out))


def _measure_blocks(summary, details, appendix, report):
    if "measures" not in report:   # one measure: the outputs are its block
        name = report["measure"]
        summary, details = (f"▸ ═══ {name}\n" + t for t in (summary, details))
        appendix = appendix.replace(f"## Measure: {name}", f"## Measure: {name}")
        report = {"measures": {name: report}}
    """Per measure: (name, [(label, value, output)])."""
    def split_terminal(text):
        text = text.split("▸ Cross-lagged correlations")[0].split("▸ Cautions")[0]
        blocks = re.split(r"^▸ ═══ (\S+)$", text, flags=re.M)
        return dict(zip(blocks[1::2], blocks[2::2]))

    def split_appendix(text):
        text = text.split("## Cross-lagged correlations")[0].split("## Notes on methods")[0]
        blocks = re.split(r"^## Measure: (\S+)$", text, flags=re.M)
        return dict(zip(blocks[1::2], blocks[2::2]))

    short, long_, app = split_terminal(summary), split_terminal(details), split_appendix(appendix)
    for name, rep in report["measures"].items():
        pairs = ([(lab, v, "terminal") for lab, v in terminal_pairs(short[name])]
                 + [(lab, v, "terminal --details") for lab, v in terminal_pairs(long_[name])]
                 + [(lab, v, "appendix") for lab, v in markdown_pairs(app[name])]
                 + [(lab, v, "JSON") for lab, v in json_pairs(rep)])
        yield name, pairs


def test_the_reader_finds_the_figures(outputs):
    """The extraction reads the figures it is meant to check (not an empty pass)."""
    summary, details, appendix, report = outputs
    for name, pairs in _measure_blocks(summary, details, appendix, report):
        where = {w for _, _, w in pairs}
        assert where == {"terminal", "terminal --details", "appendix", "JSON"}, (name, where)
        assert len(pairs) > 40, name


def test_no_label_carries_two_values(outputs):
    summary, details, appendix, report = outputs
    problems = []
    for name, pairs in _measure_blocks(summary, details, appendix, report):
        problems += [f"{name}: {c}" for c in conflicts(pairs)]
    assert not problems, "\n".join(problems[:40])


@pytest.fixture(scope="module")
def grouped(tmp_path_factory):
    """One measure (trait + carry-over, simulated with known truth) in two groups."""
    tmp = tmp_path_factory.mktemp("grouped")
    y = family_values("trait_autoregressive", 300, N_WAVES, 0.8, "mcar",
                      np.random.default_rng(11))
    unit, wave = np.meshgrid(np.arange(300), np.arange(N_WAVES), indexing="ij")
    frame = pd.DataFrame({"unit": unit.ravel(), "wave": wave.ravel(), "score": y.ravel(),
                          "site": np.where(unit.ravel() % 2, "north", "south")})
    path = tmp / "panel.csv"
    frame.to_csv(path, index=False)
    done = run_cli("screen", path, "--id", "unit", "--wave", "wave", "--value", "score",
                   "--group", "site", "--json", tmp / "report.json", "--details")
    assert done.returncode == 0, done.stderr.decode()
    report = json.loads((tmp / "report.json").read_text())
    return (render_terminal(report, details=False), done.stdout.decode(),
            to_markdown(build(report, {})[0]), report)


def test_group_figures_keep_their_names(grouped):
    summary, details, appendix, report = grouped
    (name, pairs), = _measure_blocks(summary, details, appendix, report)
    assert any(label.startswith("groups |") and where == "terminal"
               for label, _, where in pairs)
    assert any(label.startswith("groups |") and where == "JSON" for label, _, where in pairs)
    assert not conflicts(pairs), "\n".join(conflicts(pairs)[:20])


def test_the_checker_sees_a_planted_conflict():
    """Two labels a reader takes for one figure, with different values, are caught."""
    pairs = [("stable share", "0.00", "terminal"),
             ("lag-profile stable share", "0.47", "terminal"),
             ("stable share a/(a+b)", "0.47", "appendix")]
    assert conflicts(pairs)
    assert not conflicts([("stable share", "0.47", "terminal"),
                          ("stable share", "0.468", "JSON")])


def test_family_names_are_the_same_everywhere(outputs):
    summary, details, appendix, report = outputs
    names = set(FAMILY_NAMES.values())
    table_rows = re.findall(r"^\| ([a-z +-]+?) \| (?:supported|plausible|unlikely|undetermined)",
                            appendix, flags=re.M)
    assert table_rows and set(table_rows) <= names, set(table_rows) - names
    for text in (summary, details):
        rows = re.findall(r"^  ([a-z +-]+?)\s{2,}(?:supported|plausible|unlikely|undetermined)",
                          text, flags=re.M)
        assert rows and set(rows) <= names, set(rows) - names
    for rep in report["measures"].values():
        assert rep["verdict_basis"]["names"] == FAMILY_NAMES
