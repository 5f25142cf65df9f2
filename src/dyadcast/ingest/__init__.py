"""Drops → warehouse: validate every inbox file, load it exactly once as a vintage, or quarantine it.

Importing this package is cheap; Great Expectations is imported on the first file that needs validating.
"""

from dyadcast.ingest.inbox import inbox_files, ingest_file, ingest_inbox
from dyadcast.ingest.kinds import KINDS, Kind, kind_of
from dyadcast.ingest.summary import FileOutcome, IngestSummary

__all__ = ["KINDS", "FileOutcome", "IngestSummary", "Kind", "inbox_files", "ingest_file", "ingest_inbox", "kind_of"]
