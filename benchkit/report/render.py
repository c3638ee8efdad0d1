"""Format a :class:`~benchkit.report.tables.Table` as markdown, LaTeX, HTML or plain text.

Best values are bold in markdown (``**x**``), LaTeX (``\\textbf{x}``) and HTML (``<strong>``), and
followed by ``*`` in plain text. All text is escaped for the target format (markdown too: ``<``,
``>`` and ``&`` become HTML entities, since markdown viewers pass HTML through).
"""

from __future__ import annotations

import html

from tabulate import tabulate

from benchkit.errors import SpecError
from benchkit.report.tables import Cell, Stat, Table

FORMATS = ("md", "latex", "html", "plain")
EXTENSIONS = {"md": "md", "latex": "tex", "html": "html", "plain": "txt"}
_TABULATE = {"md": "pipe", "latex": "latex_raw", "html": "unsafehtml", "plain": "simple"}
_LATEX_SPECIAL = {
    "\\": r"\textbackslash{}",
    "&": r"\&",
    "%": r"\%",
    "$": r"\$",
    "#": r"\#",
    "_": r"\_",
    "{": r"\{",
    "}": r"\}",
    "~": r"\textasciitilde{}",
    "^": r"\textasciicircum{}",
}


def latex_escape(text: str) -> str:
    """Escape LaTeX's special characters (and write ± as ``$\\pm$``)."""
    out = "".join(_LATEX_SPECIAL.get(ch, ch) for ch in text)
    return out.replace("±", r"$\pm$")


def _markdown_escape(text: str) -> str:
    """Pipes and stars escaped; ``& < >`` as HTML entities, so no label becomes live markup."""
    text = text.replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;")
    return text.replace("|", r"\|").replace("*", r"\*")


def _cell_text(cell: Cell, fmt: str) -> str:
    text = cell.text() if isinstance(cell, Stat) else str(cell)
    best = isinstance(cell, Stat) and cell.best
    if fmt == "md":
        text = _markdown_escape(text)
        return f"**{text}**" if best else text
    if fmt == "latex":
        text = latex_escape(text)
        return rf"\textbf{{{text}}}" if best else text
    if fmt == "html":
        text = html.escape(text)
        return f"<strong>{text}</strong>" if best else text
    return f"{text}*" if best else text


def check_format(fmt: str) -> None:
    """Raise SpecError unless ``fmt`` is one of :data:`FORMATS`."""
    if fmt not in FORMATS:
        raise SpecError(f"--format: expected one of {', '.join(FORMATS)}, got {fmt!r}")


def render_table(table: Table, fmt: str = "md") -> str:
    """The table with its title and notes in ``fmt`` (``md``, ``latex``, ``html`` or ``plain``)."""
    check_format(fmt)
    headers = [_cell_text(h, fmt) for h in table.headers]
    rows = [[_cell_text(c, fmt) for c in row] for row in table.rows]
    body = tabulate(rows, headers=headers, tablefmt=_TABULATE[fmt], disable_numparse=True)
    if fmt == "md":
        notes = "\n".join(f"> {_markdown_escape(n)}" for n in table.notes)
        return f"### {_markdown_escape(table.title)}\n\n{body}\n\n{notes}\n".rstrip() + "\n"
    if fmt == "latex":
        notes = "\n".join(rf"\par\noindent\small {latex_escape(n)}" for n in table.notes)
        return (
            "\\begin{table}[ht]\n\\centering\n"
            f"\\caption{{{latex_escape(table.title)}}}\n{body}\n{notes}\n\\end{{table}}\n"
        )
    if fmt == "html":
        notes = "".join(f'<p class="note">{html.escape(n)}</p>' for n in table.notes)
        return (
            f'<section class="table" id="{html.escape(table.name)}">'
            f"<h3>{html.escape(table.title)}</h3>{body}{notes}</section>\n"
        )
    notes = "\n".join(f"note: {n}" for n in table.notes)
    return f"{table.title}\n\n{body}\n\n{notes}\n".rstrip() + "\n"


def render_tables(tables: list[Table], fmt: str = "md") -> str:
    """Several tables one after another, separated by a blank line."""
    return "\n".join(render_table(t, fmt) for t in tables)
