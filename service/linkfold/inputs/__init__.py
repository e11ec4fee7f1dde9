"""Reading input files: one opener, one set of readers, one time parser, one style of problem.

Every command that brings data in reads its files through this package: ``ingest`` (dumps),
``redirects load`` (redirect pairs), ``pages load`` (the page manifest and page JSON lines) and
``documents load``. What that buys a lab is one set of rules, documented once in docs/ingest.md:

* :func:`open_input` / :func:`inspect_file` — gzip recognised by its magic number (RFC 1952) and
  inflated a bounded piece at a time (a gzip bomb costs no memory), UTF-16/UTF-32 and binary files
  refused as a whole, a UTF-8 byte order mark skipped;
* :class:`PhysicalLines` — lines of at most ``max_line_bytes``, a longer one a ``line_too_long``
  problem of its own line, never held whole;
* :class:`DumpReader` and :func:`read_records` — CSV (RFC 4180), TSV (IANA), JSON lines (with the
  limits of ``linkfold._json``) and plain URL lists, streaming, with the fast lanes ingest relies on;
* :func:`parse_time` — the one time rule (:mod:`.times`);
* :class:`LineProblem` and :class:`Reason` — the one shape of a problem with a line, and its codes.

Layering: this package sits below the stages and above ``canon``; it never touches the database.
"""

from __future__ import annotations

from .lines import PhysicalLine, PhysicalLines, physical_lines
from .opening import (
    DEFAULT_MAX_LINE_BYTES,
    GZIP_ERRORS,
    GZIP_MAGIC,
    TABLE_FORMATS,
    DumpFormat,
    DumpStream,
    FileFacts,
    foreign_encoding,
    guess_format,
    inspect_file,
    open_binary,
    open_input,
    parse_format,
)
from .paths import JsonPath, parse_path, resolve
from .problems import UNPARSED, LineProblem, Reason, RecordProblem, excerpt
from .reading import DumpReader, Record, RecordReader, read_records
from .records import MISSING, DumpRow, ReadOptions, RowBlock
from .times import BadTime, is_bare_date, parse_time

__all__ = [
    "DEFAULT_MAX_LINE_BYTES",
    "GZIP_ERRORS",
    "GZIP_MAGIC",
    "MISSING",
    "TABLE_FORMATS",
    "UNPARSED",
    "BadTime",
    "DumpFormat",
    "DumpReader",
    "DumpRow",
    "DumpStream",
    "FileFacts",
    "JsonPath",
    "LineProblem",
    "PhysicalLine",
    "PhysicalLines",
    "ReadOptions",
    "Reason",
    "Record",
    "RecordProblem",
    "RecordReader",
    "RowBlock",
    "excerpt",
    "foreign_encoding",
    "guess_format",
    "inspect_file",
    "is_bare_date",
    "open_binary",
    "open_input",
    "parse_format",
    "parse_path",
    "parse_time",
    "physical_lines",
    "read_records",
    "resolve",
]
