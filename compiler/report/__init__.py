"""The simulation report: what ``dotseq simulate FILE -o DIR`` prints and
writes.

``summary_text(result)`` is the table printed on the terminal;
``write_report(result, "out/ramsey")`` writes ``report.md``,
``results.json`` and the figures atomically into a folder, and
``load_results("out/ramsey")`` reads the result back.  See
``docs/report.md`` for what every number means.
"""

from .data import load_results, results_json
from .errors import ReportError
from .text import render_markdown, summary_text
from .write import write_report

__all__ = ["summary_text", "write_report", "load_results", "results_json", "render_markdown",
           "ReportError"]
