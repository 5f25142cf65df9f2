"""The manager's accuracy report (self-contained HTML) and the digests the flow posts as artifacts."""

from dyadcast.report.artifacts import report_summary_markdown, skill_table
from dyadcast.report.build import build_report, render

__all__ = ["build_report", "render", "report_summary_markdown", "skill_table"]
