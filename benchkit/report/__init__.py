"""Reports of a results folder: comparison tables, plots, a self-contained HTML page, and the
scorecard that ``benchkit verify`` re-runs and compares.

``write_all(out)`` writes ``OUT/tables/*``, ``OUT/plots/*.png``, ``OUT/report.html`` and
``OUT/scorecard.json``.
"""

from benchkit.report.build import build_tables, write_all
from benchkit.report.render import FORMATS, render_table, render_tables
from benchkit.report.scorecard import build_scorecard, load_scorecard, write_scorecard
from benchkit.report.verify import VerifyResult, differences_table, verify_scorecard

__all__ = [
    "FORMATS",
    "VerifyResult",
    "build_scorecard",
    "build_tables",
    "differences_table",
    "load_scorecard",
    "render_table",
    "render_tables",
    "verify_scorecard",
    "write_all",
    "write_scorecard",
]
