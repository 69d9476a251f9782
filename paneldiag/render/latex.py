"""The appendix tables as LaTeX (booktabs), for pasting into a manuscript.

``tables.tex`` is a fragment: each table is a ``table`` float with ``\\toprule``,
``\\midrule`` and ``\\bottomrule``; the preamble needs ``\\usepackage{booktabs}``.
"""

from __future__ import annotations

import re

from paneldiag.render.document import Block, Table

_SPECIAL = {"\\": r"\textbackslash{}", "&": r"\&", "%": r"\%", "$": r"\$", "#": r"\#",
            "_": r"\_", "{": r"\{", "}": r"\}", "~": r"\textasciitilde{}",
            "^": r"\textasciicircum{}"}
_UNICODE = {"–": "--", "—": "---", "−": "$-$", "±": r"$\pm$", "×": r"$\times$",
            "ρ": r"$\rho$", "≤": r"$\leq$", "≥": r"$\geq$", "<": r"$<$", ">": r"$>$",
            "·": r"$\cdot$", "…": r"\ldots{}", "χ": r"$\chi$", "²": r"$^2$", "’": "'",
            "‘": "`", "“": "``", "”": "''", "→": r"$\rightarrow$", "←": r"$\leftarrow$",
            "≈": r"$\approx$", "≠": r"$\neq$", "√": r"$\surd$", "α": r"$\alpha$",
            "β": r"$\beta$", "σ": r"$\sigma$", "τ": r"$\tau$", "μ": r"$\mu$",
            "³": r"$^3$", "═": "=", "▸": ">"}


def escape(text: str) -> str:
    """LaTeX for plain text: special characters escaped, common symbols as math, any
    other character beyond Latin-1 (which pdflatex cannot set without extra fonts) as
    '?'."""
    out = "".join(_SPECIAL.get(c, c) for c in str(text))
    for char, tex in _UNICODE.items():
        out = out.replace(char, tex)
    return "".join(c if ord(c) < 0x100 else "?" for c in out)


def _label(text: str) -> str:
    return re.sub(r"[^a-z0-9]+", "-", text.lower()).strip("-")


def table_tex(table: Table) -> str:
    spec = table.alignment().replace("p", r"p{0.42\linewidth}")
    lines = [r"\begin{table}[htbp]", r"\centering", r"\small",
             rf"\caption{{{escape(table.caption)}}}", rf"\label{{tab:{_label(table.label)}}}",
             rf"\begin{{tabular}}{{@{{}}{spec}@{{}}}}", r"\toprule",
             " & ".join(escape(h) for h in table.headers) + r" \\", r"\midrule"]
    lines += [" & ".join(escape(c) for c in row) + r" \\" for row in table.rows]
    lines += [r"\bottomrule", r"\end{tabular}"]
    if table.notes:
        lines += [r"\par\smallskip", r"\begin{minipage}{0.9\linewidth}\footnotesize",
                  " ".join(escape(n) for n in table.notes), r"\end{minipage}"]
    lines.append(r"\end{table}")
    return "\n".join(lines)


def to_latex(blocks: list[Block], title: str) -> str:
    header = [f"% {escape(title)}: tables of the methods appendix, written by paneldiag.",
              r"% Needs \usepackage{booktabs} in the preamble.", ""]
    tables = [table_tex(b) for b in blocks if isinstance(b, Table)]
    return "\n".join(header) + "\n\n".join(tables) + "\n"
