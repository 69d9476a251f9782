"""Text helpers shared by the terminal blocks: headings, numbers, shares, tables."""

from __future__ import annotations

from tabulate import tabulate


def heading(title: str, color: bool) -> str:
    text = f"▸ {title}"
    return f"\033[1m{text}\033[0m" if color else text


def number(value, digits: int = 3) -> str:
    if value is None:
        return "–"
    if isinstance(value, int):
        return f"{value:,}"
    return f"{value:.{digits}g}" if abs(value) >= 1e4 else f"{value:.{digits}f}"


def share(value) -> str:
    return "–" if value is None else f"{100 * value:.1f}%"


def table(rows: list[list], headers: list[str]) -> str:
    return tabulate(rows, headers=headers, tablefmt="plain", disable_numparse=True,
                    stralign="right")
