"""The methods appendix written by `paneldiag screen ... --report DIR`.

Checks: the folder's files, byte-identical output of two runs, the HTML parses
(html5lib) and embeds every figure with no external reference, headless Chromium
renders it (Debian package `chromium`; skipped with a reason when absent), every number
in the prose equals the JSON value it comes from (extracted and compared), LaTeX
compiles when a TeX engine is present, the reproduced command line gives the same
report, and unsafe report folders are refused.
"""

from __future__ import annotations

import base64
import json
import os
import re
import shlex
import shutil
import subprocess
import sys

import html5lib
import numpy as np
import pytest

from conftest import run_cli
from paneldiag.render import appendix, prose
from paneldiag.render.appendix import build, command_line

SCREEN = ["--id", "household", "--wave", "year", "--value", "trust", "--value",
          "energy_use", "--missing-codes", "-9,-8", "--weight", "weight", "--group",
          "district", "--trajectory-sample", "6"]


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    """The invented demo panel (Ostervale Tenant Panel), screened twice: once with the
    options above, once with the command line the first report records."""
    base = tmp_path_factory.mktemp("appendix")
    demo = run_cli("demo", "tenants.csv", "--households", "160", cwd=base)
    assert demo.returncode == 0, demo.stderr
    done = run_cli("screen", "tenants.csv", *SCREEN, "--report", "one", "--quiet", cwd=base)
    assert done.returncode == 0, done.stderr
    report = json.loads((base / "one" / "report.json").read_text())
    args = shlex.split(command_line(report["input"]))
    assert args[:3] == ["paneldiag", "screen", "tenants.csv"]
    done = run_cli(*args[1:], "--report", "two", "--quiet", cwd=base)
    assert done.returncode == 0, done.stderr
    return base


def _read(base, name, rel):
    return (base / name / rel).read_bytes()


def test_folder_holds_every_file(runs):
    folder = runs / "one"
    names = sorted(os.listdir(folder))
    assert names == ["appendix.html", "appendix.md", "figures", "report.json", "tables.tex"]
    figures = sorted(os.listdir(folder / "figures"))
    stems = {f.rsplit(".", 1)[0] for f in figures}
    assert all(f"{s}.png" in figures and f"{s}.svg" in figures for s in stems)
    for expected in ("trust-wave_means", "trust-lag_decay", "trust-correlation",
                     "trust-reliability", "trust-groups", "trust-trajectories",
                     "cross-lag-trust-energy-use"):
        assert expected in stems
    assert not [p for p in os.listdir(runs) if p.endswith((".part", ".old"))]


def test_two_runs_are_byte_identical(runs):
    for rel in ["appendix.md", "appendix.html", "tables.tex", "report.json"] + \
            [f"figures/{f}" for f in sorted(os.listdir(runs / "one" / "figures"))]:
        assert _read(runs, "one", rel) == _read(runs, "two", rel), rel


def test_html_is_self_contained_and_embeds_every_figure(runs):
    text = _read(runs, "one", "appendix.html").decode("utf-8")
    parser = html5lib.HTMLParser(strict=False, namespaceHTMLElements=False)
    tree = parser.parse(text)
    assert not parser.errors, parser.errors[:3]
    assert tree.findall(".//script") == []
    for element in tree.iter():
        for attr in ("src", "href"):
            value = element.get(attr)
            assert value is None or not re.match(r"(?i)\s*(https?:)?//", value), value
    sources = [img.get("src") for img in tree.findall(".//img")]
    embedded = {base64.b64decode(s.split(",", 1)[1]) for s in sources
                if s.startswith("data:image/svg+xml;base64,")}
    assert len(embedded) == len(sources)
    for name in os.listdir(runs / "one" / "figures"):
        if name.endswith(".svg"):
            assert _read(runs, "one", f"figures/{name}") in embedded, name
    assert "http://" not in text.replace("http://www.w3.org", "") and "https://" not in text


def test_cautions_are_visible(runs):
    md = _read(runs, "one", "appendix.md").decode("utf-8")
    html = _read(runs, "one", "appendix.html").decode("utf-8")
    for text in (md, html):
        assert "not proof of a model" in text
        assert "candidate models must still be fitted and compared" in text
        assert "suppressed" in text   # small cells withheld (common practice)
    assert '<div class="caution"' in html


NUMBER = re.compile(r"(?<![\w.])(-?\d[\d,]*(?:\.\d+)?%?)")


def _json_forms(report) -> set[str]:
    """Every number of the JSON written in each format the prose uses."""
    forms: set[str] = set()

    def walk(node):
        if isinstance(node, dict):
            for v in node.values():
                walk(v)
        elif isinstance(node, list):
            for v in node:
                walk(v)
        elif isinstance(node, str):
            forms.add(node)
        elif isinstance(node, (int, float)) and not isinstance(node, bool):
            v = float(node)
            if v.is_integer():
                forms.add(f"{int(v):,}")
            forms.update({prose.dec(v, 2), prose.dec(v, 3), prose.pct(v)})
    walk(report)
    return forms


def test_every_number_in_the_prose_is_in_the_json(runs):
    report = json.loads(_read(runs, "one", "report.json"))
    md = _read(runs, "one", "appendix.md").decode("utf-8")
    _, paragraphs = build(report, {})  # the prose does not depend on the figures
    assert len(paragraphs) >= 10
    forms = _json_forms(report)
    cited = sorted({form for short, _ in prose.REFERENCES.values()
                    for form in (short, f"{short.rsplit(' ', 1)[0]} ({short.rsplit(' ', 1)[1]})")},
                   key=len, reverse=True)
    checked = 0
    for text in paragraphs:
        assert text in md  # the prose checked is the prose written
        stripped = text.replace("p < 0.001", "")
        for form in cited:
            stripped = stripped.replace(form, "")
        for token in NUMBER.findall(stripped):
            token = token.rstrip(",")
            assert token in forms, f"{token!r} in: {text}"
            checked += 1
    assert checked >= 40


def test_prose_numbers_equal_their_json_values(runs):
    """Spot checks by path: the paragraph shows the JSON value, formatted."""
    report = json.loads(_read(runs, "one", "report.json"))
    md = _read(runs, "one", "appendix.md").decode("utf-8")
    trust = report["measures"]["trust"]
    assert f"The panel holds {trust['panel']['n_units']:,} units" in md
    rel = trust["reliability"]["summary"]
    assert f"was {rel['estimate']:.2f} (confidence interval {rel['ci_low']:.2f} to " \
           f"{rel['ci_high']:.2f})" in md
    lag1 = report["cross_lag"][0]["lags"][0]
    assert f"earlier trust correlated {lag1['x_leads']['r']:.2f} with later energy_use" in md


def test_latex_tables_use_booktabs_and_compile_when_tex_exists(runs, tmp_path):
    tex = _read(runs, "one", "tables.tex").decode("utf-8")
    assert tex.count(r"\toprule") == tex.count(r"\bottomrule") >= 4
    assert r"\hline" not in tex
    assert tex.count(r"\begin{") == tex.count(r"\end{")
    unescaped = re.sub(r"\\[{}]", "", tex)
    assert unescaped.count("{") == unescaped.count("}")  # braces balance
    assert all(ord(c) < 0x100 for c in tex)  # nothing pdflatex cannot set
    engine = shutil.which("pdflatex") or shutil.which("lualatex") or shutil.which("xelatex")
    if engine is None:
        pytest.skip("no TeX engine on this machine (pdflatex, lualatex or xelatex)")
    doc = tmp_path / "doc.tex"
    doc.write_text("\\documentclass{article}\n\\usepackage[utf8]{inputenc}\n"
                   "\\usepackage[T1]{fontenc}\n\\usepackage{booktabs}\n"
                   "\\usepackage{textcomp}\n\\begin{document}\n\\input{"
                   + str(runs / "one" / "tables.tex") + "}\n\\end{document}\n")
    done = subprocess.run([engine, "-interaction=nonstopmode", "-halt-on-error", doc.name],
                          cwd=tmp_path, capture_output=True, timeout=120)
    assert done.returncode == 0, done.stdout[-2000:]


def test_reproduced_command_is_in_the_appendix(runs):
    """Run "two" used the recorded command line; test_two_runs_are_byte_identical shows
    it reproduces the report."""
    report = json.loads(_read(runs, "one", "report.json"))
    md = _read(runs, "one", "appendix.md").decode("utf-8")
    assert command_line(report["input"]) in md
    assert "--trajectory-sample 6" in command_line(report["input"])


def test_reproducibility_block(runs):
    md = _read(runs, "one", "appendix.md").decode("utf-8")
    report = json.loads(_read(runs, "one", "report.json"))
    assert report["input"]["sha256"] in md
    assert f"paneldiag {report['tool']['version']}" in md
    assert "Input file: tenants.csv" in md


def test_absent_sections_leave_no_trace(tmp_path):
    demo = run_cli("demo", "t.csv", "--households", "60", cwd=tmp_path)
    assert demo.returncode == 0
    done = run_cli("screen", "t.csv", "--id", "household", "--wave", "year", "--value",
                   "trust", "--missing-codes", "-9,-8", "--report", "r", "--quiet",
                   cwd=tmp_path)
    assert done.returncode == 0, done.stderr
    md = (tmp_path / "r" / "appendix.md").read_text()
    assert "### Groups" not in md and "Cross-lagged" not in md
    assert not [f for f in os.listdir(tmp_path / "r" / "figures") if "trajectories" in f]
    assert not re.search(r"(?i)placeholder|not available|todo|n/a", md)


def test_refuses_a_folder_holding_the_input(tmp_path):
    data = tmp_path / "in" / "p.csv"
    data.parent.mkdir()
    demo = run_cli("demo", data, "--households", "30")
    assert demo.returncode == 0
    before = sorted(os.listdir(data.parent))
    for target in (data.parent, tmp_path):
        done = run_cli("screen", data, "--id", "household", "--wave", "year", "--value",
                       "trust", "--report", target, "--quiet")
        assert done.returncode == 2
        assert done.stderr.decode().count("\n") == 1
        assert "input file" in done.stderr.decode()
    assert sorted(os.listdir(data.parent)) == before


def test_refuses_a_folder_with_other_files(tmp_path):
    demo = run_cli("demo", "p.csv", "--households", "30", cwd=tmp_path)
    assert demo.returncode == 0
    (tmp_path / "busy").mkdir()
    (tmp_path / "busy" / "notes.txt").write_text("keep me")
    done = run_cli("screen", "p.csv", "--id", "household", "--wave", "year", "--value",
                   "trust", "--quiet", "--report", "busy", cwd=tmp_path)
    assert done.returncode == 2 and "other files" in done.stderr.decode()
    assert (tmp_path / "busy" / "notes.txt").read_text() == "keep me"


def test_report_folder_is_replaced_whole_or_not_at_all(tmp_path, monkeypatch):
    files = {"appendix.md": b"# new\n", "figures/a.svg": b"<svg/>"}
    monkeypatch.setattr(appendix, "render_files", lambda *a, **k: dict(files))
    target = tmp_path / "rep"
    appendix.write_report({}, str(target), [])
    (target / "appendix.md").write_bytes(b"stale")
    (target / "figures" / "old.svg").write_bytes(b"old")
    appendix.write_report({}, str(target), [])
    assert (target / "appendix.md").read_bytes() == b"# new\n"
    assert sorted(os.listdir(target / "figures")) == ["a.svg"]

    # a write that fails half-way (a payload that is not bytes)
    monkeypatch.setattr(appendix, "render_files", lambda *a, **k: {"appendix.md": b"x",
                                                                   "figures/b.svg": None})
    with pytest.raises(TypeError):
        appendix.write_report({}, str(target), [])
    assert (target / "appendix.md").read_bytes() == b"# new\n"  # the old report stands
    assert sorted(os.listdir(tmp_path)) == ["rep"]  # no temporary folder left behind


def _chromium():
    for name in ("chromium", "chromium-browser"):
        path = shutil.which(name)
        if path:
            return path
    return None


def test_html_renders_in_headless_chromium(runs, tmp_path):
    browser = _chromium()
    if browser is None:
        pytest.skip("headless Chromium is not installed (Debian package 'chromium'; "
                    ".ci/run installs it when apt-get is available)")
    shot = tmp_path / "shot.png"
    page = runs / "one" / "appendix.html"
    cmd = [browser, "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
           "--no-first-run", "--disable-background-networking", "--disable-component-update",
           "--disable-sync", f"--user-data-dir={tmp_path / 'profile'}",
           f"--screenshot={shot}", "--window-size=1200,2000", page.as_uri()]
    done = subprocess.run(cmd, capture_output=True, timeout=90)
    assert shot.exists(), done.stderr.decode(errors="replace")[-1500:]
    import matplotlib.image as mpimg
    pixels = mpimg.imread(shot)
    flat = np.round(pixels[..., :3] * 255).astype(np.uint8).reshape(-1, 3)
    colours = np.unique(flat, axis=0)
    assert len(colours) > 200  # text, the caution box and figures, not a blank page
    assert (flat != 255).any(axis=1).mean() > 0.02
    shutil.copy(shot, runs / "screenshot.png")  # kept for a person to look at


def test_terminal_summary_is_concise_with_verdicts_first(runs):
    from paneldiag.render.terminal import render_terminal
    report = json.loads(_read(runs, "one", "report.json"))
    text = render_terminal(report, color=False)
    assert "\033[" not in text
    lines = text.splitlines()
    assert len(lines) <= 40 * len(report["measures"]) + 10
    families = [i for i, line in enumerate(lines) if line.startswith("▸ Process families")]
    figures = [i for i, line in enumerate(lines) if line.startswith("▸ Key figures")]
    assert len(families) == len(figures) == len(report["measures"])
    assert all(f < k for f, k in zip(families, figures))  # the verdict table comes first
    assert "not proof of a model" in text and "suppressed" in text
    full = render_terminal(report, color=False, details=True)
    assert len(full.splitlines()) > len(lines)
    coloured = render_terminal(report, color=True)
    assert "\033[1m" in coloured


def test_quiet_prints_nothing_and_no_color_is_honoured(runs):
    done = run_cli("screen", "tenants.csv", "--id", "household", "--wave", "year", "--value",
                   "trust", "--quiet", cwd=runs)
    assert done.returncode == 0 and done.stdout == b""
    import os as _os
    env = dict(_os.environ, NO_COLOR="1")
    shown = subprocess.run([sys.executable, "-m", "paneldiag", "screen", "tenants.csv",
                            "--id", "household", "--wave", "year", "--value", "trust"],
                           capture_output=True, cwd=runs, env=env)
    assert shown.returncode == 0 and b"\033[" not in shown.stdout
    assert b"Key figures" in shown.stdout


def test_measure_names_that_slug_alike_get_distinct_files():
    stems = appendix.measure_stems({"measures": {"a b": {}, "a-b": {}, "A_B": {}}})
    assert len(set(stems.values())) == 3
    assert appendix.command_line({"path": "-", "options": {"layout": "long", "id": "u"}}) \
        == "paneldiag screen - --id u"
