"""The manager's accuracy report (self-contained HTML) and the digests the flow posts as artifacts.

Names are imported on first use, so `dyadcast sql` and `dyadcast --help` do not pay for matplotlib.
"""

from __future__ import annotations

import importlib
from typing import Any

_EXPORTS = {
    "build_report": "dyadcast.report.build",
    "render": "dyadcast.report.build",
    "report_summary_markdown": "dyadcast.report.artifacts",
    "skill_table": "dyadcast.report.artifacts",
}
__all__ = sorted(_EXPORTS)


def __getattr__(name: str) -> Any:
    if name in _EXPORTS:
        return getattr(importlib.import_module(_EXPORTS[name]), name)
    raise AttributeError(f"module 'dyadcast.report' has no attribute {name!r}")
