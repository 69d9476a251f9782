"""A small document model for the appendix, written out as Markdown and as HTML.

The appendix is built once as a list of blocks (headings, paragraphs, notes, tables,
figures, code); the Markdown, HTML and LaTeX writers each walk the same list, so the
three files always say the same thing.
"""

from __future__ import annotations

import base64
import html
from dataclasses import dataclass, field


@dataclass(frozen=True)
class Heading:
    level: int
    text: str
    anchor: str = ""


@dataclass(frozen=True)
class Paragraph:
    text: str
    prose: bool = False  # True for the paragraphs with numbers drawn from the report


@dataclass(frozen=True)
class Note:
    title: str
    items: tuple[str, ...]


@dataclass(frozen=True)
class Table:
    label: str                 # a stable name, used for LaTeX labels
    caption: str
    headers: tuple[str, ...]
    rows: tuple[tuple[str, ...], ...]
    notes: tuple[str, ...] = ()
    align: str = ""            # a letter per column: l, r, c, p (wrapped text); default l r r ..

    def alignment(self) -> str:
        return self.align or "l" + "r" * (len(self.headers) - 1)


@dataclass(frozen=True)
class FigureRef:
    name: str                  # file stem under figures/
    caption: str
    svg: bytes = field(repr=False, default=b"")


@dataclass(frozen=True)
class Code:
    text: str


@dataclass(frozen=True)
class ListBlock:
    items: tuple[str, ...]


Block = Heading | Paragraph | Note | Table | FigureRef | Code | ListBlock


# ----------------------------------------------------------------------------- Markdown

def _md_cell(text: str) -> str:
    return str(text).replace("|", "\\|").replace("\n", " ")


def to_markdown(blocks: list[Block]) -> str:
    out: list[str] = []
    figure_no = table_no = 0
    for block in blocks:
        if isinstance(block, Heading):
            out.append("#" * block.level + " " + block.text)
        elif isinstance(block, Paragraph):
            out.append(block.text)
        elif isinstance(block, Note):
            lines = [f"> **{block.title}**", ">"] + [f"> - {item}" for item in block.items]
            out.append("\n".join(lines))
        elif isinstance(block, ListBlock):
            out.append("\n".join(f"- {item}" for item in block.items))
        elif isinstance(block, Table):
            table_no += 1
            align = {"l": ":--", "r": "--:", "c": ":-:", "p": ":--"}
            lines = [f"**Table {table_no}.** {block.caption}", "",
                     "| " + " | ".join(_md_cell(h) for h in block.headers) + " |",
                     "|" + "|".join(align[a] for a in block.alignment()) + "|"]
            lines += ["| " + " | ".join(_md_cell(c) for c in row) + " |" for row in block.rows]
            if block.notes:
                lines += [""] + [f"*{note}*" for note in block.notes]
            out.append("\n".join(lines))
        elif isinstance(block, FigureRef):
            figure_no += 1
            out.append(f"![Figure {figure_no}: {block.caption}](figures/{block.name}.svg)\n\n"
                       f"*Figure {figure_no}.* {block.caption} "
                       f"([PNG](figures/{block.name}.png))")
        elif isinstance(block, Code):
            out.append("```\n" + block.text + "\n```")
    return "\n\n".join(out) + "\n"


# ----------------------------------------------------------------------------- HTML

STYLE = """
body { font-family: Georgia, 'Times New Roman', serif; max-width: 52rem; margin: 2rem auto;
       padding: 0 1rem; color: #111; line-height: 1.5; background: #fff; }
h1, h2, h3, h4 { font-family: 'Helvetica Neue', Arial, sans-serif; line-height: 1.25; }
h2 { border-bottom: 1px solid #bbb; padding-bottom: .2rem; margin-top: 2.2rem; }
table { border-collapse: collapse; margin: .6rem 0 1.2rem; font-size: .9rem; }
caption { caption-side: top; text-align: left; font-weight: bold; padding-bottom: .3rem; }
th, td { padding: .2rem .6rem; }
thead th { border-top: 2px solid #111; border-bottom: 1px solid #111; }
tbody tr:last-child td { border-bottom: 2px solid #111; }
td.r, th.r { text-align: right; white-space: nowrap; } td.l, th.l { text-align: left; } td.c, th.c { text-align: center; }
.tnote { font-size: .85rem; font-style: italic; margin-top: -.8rem; }
.caution { border: 2px solid #D55E00; background: #fff6ef; padding: .6rem 1rem;
           margin: 1rem 0; }
.caution strong { display: block; margin-bottom: .3rem; }
figure { margin: 1rem 0 1.6rem; } figure img { width: 100%; max-width: 48rem; height: auto; }
figcaption { font-size: .9rem; }
pre { background: #f3f3f3; padding: .6rem; overflow-x: auto; font-size: .85rem;
      white-space: pre-wrap; word-break: break-all; }
"""


def _e(text) -> str:
    return html.escape(str(text), quote=True)


def to_html(blocks: list[Block], title: str) -> str:
    body: list[str] = []
    figure_no = table_no = 0
    for block in blocks:
        if isinstance(block, Heading):
            anchor = f' id="{_e(block.anchor)}"' if block.anchor else ""
            body.append(f"<h{block.level}{anchor}>{_e(block.text)}</h{block.level}>")
        elif isinstance(block, Paragraph):
            body.append(f"<p>{_e(block.text)}</p>")
        elif isinstance(block, Note):
            items = "".join(f"<li>{_e(item)}</li>" for item in block.items)
            body.append(f'<div class="caution" role="note"><strong>{_e(block.title)}</strong>'
                        f"<ul>{items}</ul></div>")
        elif isinstance(block, ListBlock):
            body.append("<ul>" + "".join(f"<li>{_e(i)}</li>" for i in block.items) + "</ul>")
        elif isinstance(block, Table):
            table_no += 1
            align = block.alignment().replace("p", "l")
            head = "".join(f'<th class="{a}">{_e(h)}</th>' for h, a in zip(block.headers, align))
            rows = "".join("<tr>" + "".join(f'<td class="{a}">{_e(c)}</td>'
                                            for c, a in zip(row, align)) + "</tr>"
                           for row in block.rows)
            body.append(f"<table><caption>Table {table_no}. {_e(block.caption)}</caption>"
                        f"<thead><tr>{head}</tr></thead><tbody>{rows}</tbody></table>")
            body += [f'<p class="tnote">{_e(note)}</p>' for note in block.notes]
        elif isinstance(block, FigureRef):
            figure_no += 1
            data = base64.b64encode(block.svg).decode("ascii")
            body.append(f'<figure id="figure-{_e(block.name)}"><img alt="Figure {figure_no}: '
                        f'{_e(block.caption)}" src="data:image/svg+xml;base64,{data}">'
                        f"<figcaption>Figure {figure_no}. {_e(block.caption)}</figcaption>"
                        "</figure>")
        elif isinstance(block, Code):
            body.append(f"<pre>{_e(block.text)}</pre>")
    return ("<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n"
            f"<title>{_e(title)}</title>\n<style>{STYLE}</style>\n</head>\n<body>\n"
            + "\n".join(body) + "\n</body>\n</html>\n")
