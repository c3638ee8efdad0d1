"""Rendering tables in the four formats, escaping, and markdown that parses back."""

from __future__ import annotations

import html.parser

import pytest

from benchkit.errors import SpecError
from benchkit.report.render import latex_escape, render_table
from benchkit.report.tables import Stat, Table

from .mdparse import number, pipe_tables

TABLE = Table(
    name="t",
    title="Scores & <b>things</b>",
    headers=("detector", "f1"),
    rows=(("<script>alert(1)</script>", Stat(0.8125, 0.01, best=True)),
          ("a_b|c", Stat(0.5))),
    notes=("50% of *cases*",),
)


def test_markdown_parses_back_with_bold_best():
    text = render_table(TABLE, "md")
    (table,) = pipe_tables(text)
    assert table[0] == ["detector", "f1"]
    assert number(table[1][1]) == (0.812, 0.01, True)  # 0.8125 rounds half to even: 0.812
    assert number(table[2][1]) == (0.5, None, False)
    assert table[2][0] == r"a_b\|c"  # a pipe inside a cell is escaped
    assert "> 50% of \\*cases\\*" in text
    # markup in labels is neutralised: a markdown viewer passes raw HTML through
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in text and "<script>" not in text
    assert "Scores &amp; &lt;b&gt;things&lt;/b&gt;" in text


def test_plain_marks_best_with_a_star():
    text = render_table(TABLE, "plain")
    assert "0.812 ± 0.010*" in text and "0.500*" not in text
    assert "note: 50% of *cases*" in text


def test_latex_escapes_specials_and_bolds_best():
    text = render_table(TABLE, "latex")
    assert r"\textbf{0.812 $\pm$ 0.010}" in text
    assert r"a\_b|c" in text and r"50\% of" in text
    assert r"\caption{Scores \& <b>things</b>}" in text
    # reference: the ten characters LaTeX reserves (the LaTeX Project's manual, from memory)
    assert latex_escape("&%$#_{}~^\\") == (
        r"\&\%\$\#\_\{\}\textasciitilde{}\textasciicircum{}\textbackslash{}"
    )


class _Collector(html.parser.HTMLParser):
    def __init__(self):
        super().__init__()
        self.tags, self.text = [], []

    def handle_starttag(self, tag, attrs):
        self.tags.append(tag)

    def handle_data(self, data):
        self.text.append(data)


def test_html_escapes_every_text():
    text = render_table(TABLE, "html")
    # reference: the standard library's HTML parser sees no script or b element
    parser = _Collector()
    parser.feed(text)
    assert "script" not in parser.tags and "b" not in parser.tags
    assert "strong" in parser.tags  # the best value
    assert "<script>alert(1)</script>" in "".join(parser.text)


def test_unknown_format_is_an_input_error():
    with pytest.raises(SpecError, match="--format: expected one of md, latex, html, plain"):
        render_table(TABLE, "docx")
