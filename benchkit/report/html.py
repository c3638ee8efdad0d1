"""The self-contained HTML report: every table and plot (PNG, base64-embedded), the spec, the
environment, the dataset fingerprints and the cautions. All text from specs and data is escaped
with :func:`html.escape`; tables come from :func:`benchkit.report.render.render_table`, which
escapes every cell."""

from __future__ import annotations

import base64
import html
import json
from collections.abc import Mapping, Sequence
from pathlib import Path

from benchkit.report import cautions
from benchkit.report.render import render_table
from benchkit.report.tables import Table

_STYLE = """
body { font-family: system-ui, sans-serif; max-width: 72rem; margin: 1.5rem auto; padding: 0 1rem;
       color: #1a1a1a; line-height: 1.45; }
table { border-collapse: collapse; margin: 0.6rem 0; font-size: 0.9rem; }
th, td { border: 1px solid #c8c8c8; padding: 0.2rem 0.5rem; text-align: left; }
th { background: #f0f0f0; }
.note { font-size: 0.85rem; color: #444; margin: 0.2rem 0; }
.cautions { border-left: 4px solid #D55E00; background: #fff6ee; padding: 0.4rem 1rem; }
.decision { border-left: 4px solid #0072B2; background: #f2f8fc; padding: 0.4rem 1rem; }
pre { background: #f6f6f6; padding: 0.6rem; overflow-x: auto; font-size: 0.85rem; }
img { max-width: 100%; border: 1px solid #e0e0e0; }
figure { margin: 1rem 0; }
"""


def _key_value_table(pairs: Mapping, key_header: str, value_header: str) -> str:
    rows = "".join(
        f"<tr><td>{html.escape(str(k))}</td><td>{html.escape(_as_text(v))}</td></tr>"
        for k, v in pairs.items()
    )
    return (
        f"<table><thead><tr><th>{html.escape(key_header)}</th><th>{html.escape(value_header)}</th>"
        f"</tr></thead><tbody>{rows}</tbody></table>"
    )


def _as_text(value) -> str:
    return value if isinstance(value, str) else json.dumps(value, sort_keys=True, default=str)


def _figure(name: str, caption: str, png: Path) -> str:
    data = base64.b64encode(Path(png).read_bytes()).decode("ascii")
    return (
        f'<figure id="plot-{html.escape(name)}"><img alt="{html.escape(caption)}" '
        f'src="data:image/png;base64,{data}"><figcaption>{html.escape(caption)}</figcaption>'
        "</figure>"
    )


def _summary_section(summary: Sequence[Table]) -> str:
    if not summary:
        text = ("This run has no label-free threshold strategy (pot, quantile or alert-budget), "
                "so there is no decision summary; the tables below use the oracle threshold.")
        body = f"<p>{html.escape(text)}</p>"
    else:
        body = "".join(render_table(t, "html") for t in summary)
    return (
        '<section id="decision-summary" class="decision"><h2>Decision summary</h2>'
        f"{body}</section>"
    )


def build_html(
    title: str,
    tables: Sequence[Table],
    plots: Sequence[tuple[str, str, Path]],
    spec_toml: str,
    environment: Mapping,
    fingerprints: Mapping,
    remarks: Sequence[str] = (),
    summary: Sequence[Table] = (),
) -> str:
    """The report as one HTML document.

    Parameters
    ----------
    title : the experiment name (escaped).
    tables : tables in display order.
    plots : ``(name, caption, png_path)`` triples; the PNG bytes are embedded.
    spec_toml, environment, fingerprints : what the run recorded.
    remarks : extra lines for the top of the report (e.g. failed cells).
    summary : the decision summary tables, shown first (``id="decision-summary"``), before the
        cautions and every other table.
    """
    caution_items = "".join(f"<li>{html.escape(c)}</li>" for c in cautions.ALL)
    remark_items = "".join(f"<p>{html.escape(r)}</p>" for r in remarks)
    parts = [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        f"<title>benchkit report: {html.escape(title)}</title>",
        f"<style>{_STYLE}</style></head><body>",
        f"<h1>benchkit report: {html.escape(title)}</h1>",
        _summary_section(summary),
        f'<section class="cautions"><h2>Cautions</h2><ul>{caution_items}</ul></section>',
        remark_items,
        "<h2>Tables</h2>",
        *(render_table(t, "html") for t in tables),
        "<h2>Plots</h2>",
        *(_figure(name, caption, png) for name, caption, png in plots),
        "<h2>Experiment spec</h2>",
        f"<pre>{html.escape(spec_toml)}</pre>",
        "<h2>Environment</h2>",
        _key_value_table(environment, "item", "value"),
        "<h2>Dataset fingerprints (sha256)</h2>",
        _key_value_table(fingerprints, "dataset/entity", "fingerprint"),
        "</body></html>",
    ]
    return "\n".join(p for p in parts if p) + "\n"
