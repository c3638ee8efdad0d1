"""Read GitHub pipe tables back into cells (for checking rendered markdown against numbers)."""

from __future__ import annotations

import re

_NUMBER = re.compile(r"^\*{0,2}([+-]?\d+(?:\.\d+)?)(?: ± (\d+(?:\.\d+)?))?\*{0,2}$")


def pipe_tables(text: str) -> list[list[list[str]]]:
    """Every pipe table in ``text`` as rows of stripped cell texts (header first, rule dropped)."""
    tables, current = [], []
    for line in text.splitlines():
        if line.startswith("|"):
            cells = [c.strip() for c in re.split(r"(?<!\\)\|", line.strip())[1:-1]]
            if not all(set(c) <= set(":-") for c in cells):
                current.append(cells)
        elif current:
            tables.append(current)
            current = []
    if current:
        tables.append(current)
    return tables


def number(cell: str) -> tuple[float, float | None, bool]:
    """``(mean, std or None, bold)`` of a cell such as ``**0.812 ± 0.010**``."""
    m = _NUMBER.match(cell)
    if not m:
        raise ValueError(f"not a number cell: {cell!r}")
    std = float(m.group(2)) if m.group(2) else None
    return float(m.group(1)), std, cell.startswith("**")
