"""Presentation: the terminal, the report, the figures and publishing of outputs.

This package formats the run record (``RunResult.to_dict()``, the merged JSON) and each
stage's ``to_dict()``; it imports no stage and no stage imports it. Nothing here computes
a z-value, interval, t, p, significance mark, premium or impact: it shows what the record
carries, at the level the record states.

- :mod:`~hedgekit.present.document`: the record as sections of tables and text (shared).
- :mod:`~hedgekit.present.terminal`: rich tables (plain text when piped).
- :mod:`~hedgekit.present.report`: HTML and Markdown from Jinja2 templates.
- :mod:`~hedgekit.present.plots`: matplotlib figures, PNG bytes.
- :mod:`~hedgekit.present.publish`: all-or-none publishing, formula-safe CSV.
"""

from __future__ import annotations

from .publish import (
           StagedOutput,
           atomic_write_csv,
           atomic_write_text,
           build_tables,
           csv_text,
           publish_tables,
)
from .report import build_report, publish_report

__all__ = ["StagedOutput", "atomic_write_csv", "atomic_write_text", "build_report", "build_tables",
           "csv_text", "publish_report", "publish_tables"]
