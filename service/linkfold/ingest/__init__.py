"""Ingest, lookup and export: dumps in, provenance and sightings stored, the linkage table out.

``ingest_dump`` loads CSV, TSV, JSON-lines and plain URL-list dumps (gzip or not) into a dataset;
``lookup`` answers what the registry knows about URLs or url keys; ``export_dataset`` writes a
dataset's linkage table. The reference is docs/ingest.md.
"""

from __future__ import annotations

from ..inputs import DEFAULT_MAX_LINE_BYTES, DumpFormat, Reason, guess_format, parse_path, parse_time
from ..store.lookup import LOOKUP_FIELDS, is_url_key, lookup
from .export import EXPORT_FORMATS, ExportSummary, export_dataset
from .load import DEFAULT_BATCH_SIZE, ingest_dump
from .summary import FileOutcome, FileSummary, IngestSummary

__all__ = [
    "DEFAULT_BATCH_SIZE",
    "DEFAULT_MAX_LINE_BYTES",
    "EXPORT_FORMATS",
    "LOOKUP_FIELDS",
    "DumpFormat",
    "ExportSummary",
    "FileOutcome",
    "FileSummary",
    "IngestSummary",
    "Reason",
    "export_dataset",
    "guess_format",
    "ingest_dump",
    "is_url_key",
    "lookup",
    "parse_path",
    "parse_time",
]
