"""Import redirects instead of fetching them: (short, expanded) pairs a platform export already holds.

Input: CSV or TSV with a header row, or JSON lines (one object a line); the two columns/keys are named
``short`` and ``expanded`` unless told otherwise; gzip-compressed files are read as they are. Each good
line becomes a ``redirect`` link from the short URL's canonical form to the expanded one's, with source
``import:<file name>``, and the short URL is marked ``resolved`` (``via`` ``imported``) unless it already
was. Both URLs are stored as raw and canonical URLs. The short URL then stands for the expanded one, or for
wherever that leads in turn (``store/finals.py``), from the same transaction on.

A bad line (not UTF-8, a CSV quote left open, not a JSON object, a missing value, a URL the
canonicaliser refuses) is skipped and reported with its line number and reason in the summary; it never
stops the import. Whole-file problems (no such file, no such column) stop it before anything is written.
Every line is parsed on its own, so line numbers are physical lines of the file (a quoted field spanning
lines is therefore refused as an open quote, which a file of two URLs a row never needs).
"""

from __future__ import annotations

import csv
import gzip
import json
from collections import Counter
from collections.abc import Iterator
from dataclasses import dataclass, field
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

from sqlalchemy.engine import Engine

from .._json import JSON_LIMITS, json_problem
from ..canon import Canonical, Canonicaliser
from ..errors import DumpFormatError, InputError, InvalidURL, MissingColumnError
from ..progress import SILENT, Progress
from ..store import evidence as ev
from ..store import finals
from ..store.conflicts import retrying
from ..store.rulesets import latest_ruleset
from ..store.runs import recording_run
from ..store.stats import refresh_statistics

FORMATS = ("csv", "tsv", "jsonl")
_SUFFIXES = {".csv": "csv", ".tsv": "tsv", ".tab": "tsv", ".jsonl": "jsonl", ".ndjson": "jsonl"}
GZIP_MAGIC = b"\x1f\x8b"  # RFC 1952 §2.3.1
MAX_PROBLEMS_KEPT = 1000  # reported one by one; beyond this only counted by reason
SOURCE_MAX = 255  # links.source width

#: The run log's name of this stage.
STAGE = "follow_import"


@dataclass(frozen=True)
class Problem:
    line: int
    reason: str
    detail: str


@dataclass
class ImportSummary:
    file: str
    lines_read: int = 0
    pairs: int = 0
    links: int = 0
    already_linked: int = 0
    same_url: int = 0  # both URLs have one canonical form: nothing to link
    settled: int = 0  # short URLs whose follow result the import set
    problems: list[Problem] = field(default_factory=list)
    problem_counts: Counter[str] = field(default_factory=Counter)
    run_id: int | None = None

    def add_problem(self, line: int, reason: str, detail: str) -> None:
        self.problem_counts[reason] += 1
        if len(self.problems) < MAX_PROBLEMS_KEPT:
            self.problems.append(Problem(line, reason, detail))

    def as_dict(self) -> dict[str, Any]:
        return {"file": self.file, "lines": self.lines_read, "pairs": self.pairs, "links": self.links,
                "already_linked": self.already_linked, "same_url": self.same_url, "settled": self.settled,
                "problems": dict(sorted(self.problem_counts.items())), "run_id": self.run_id}

    def lines(self) -> list[str]:
        out = [f"{self.file}: {self.lines_read:,} lines, {self.pairs:,} pairs, {self.links:,} redirect links written "
               f"(run {self.run_id})"]
        if self.already_linked:
            out.append(f"  already stored: {self.already_linked:,}")
        if self.same_url:
            out.append(f"  short and expanded URL are one canonical URL: {self.same_url:,}")
        out.append(f"  short URLs settled as resolved: {self.settled:,}")
        total = sum(self.problem_counts.values())
        if total:
            out.append(f"  lines skipped: {total:,} (" +
                       ", ".join(f"{k} {v:,}" for k, v in sorted(self.problem_counts.items())) + ")")
        return out


def _format_of(path: Path, fmt: str | None) -> str:
    if fmt is not None:
        if fmt not in FORMATS:
            raise DumpFormatError(f"{path}: unknown format {fmt!r} (use one of {', '.join(FORMATS)})")
        return fmt
    name = path.name.lower().removesuffix(".gz")
    for suffix, found in _SUFFIXES.items():
        if name.endswith(suffix):
            return found
    raise DumpFormatError(f"{path}: cannot tell the format from the name (known endings: "
                          f"{', '.join(sorted(_SUFFIXES))}, optionally followed by .gz)",
                          hint="pass --format csv|tsv|jsonl")


#: A line of a redirect table holds two URLs; a longer one is a problem of its line, read no further.
MAX_LINE_BYTES = 1 << 20


def _physical_lines(path: Path) -> Iterator[tuple[int, bytes | None]]:
    """(number, line without its end) for each line; ``None`` for a line past ``MAX_LINE_BYTES``, of which
    no more than that is ever held (a gzip'd line can inflate without end)."""
    try:
        with path.open("rb") as probe:
            gz = probe.read(2) == GZIP_MAGIC
        opener = gzip.open if gz else open
        with opener(path, "rb") as fh:
            number = 0
            while line := fh.readline(MAX_LINE_BYTES + 1):
                number += 1
                if len(line) > MAX_LINE_BYTES and not line.endswith(b"\n"):
                    while (rest := fh.readline(MAX_LINE_BYTES)) and not rest.endswith(b"\n"):
                        pass
                    yield number, None
                    continue
                yield number, line.rstrip(b"\r\n")
    except FileNotFoundError:
        raise InputError(f"{path}: no such file") from None
    except IsADirectoryError:
        raise InputError(f"{path}: is a folder, not a file") from None
    except (OSError, EOFError) as exc:  # unreadable, or a truncated gzip stream
        raise InputError(f"{path}: cannot be read ({exc})") from None


def _records(path: Path, fmt: str, short_col: str, expanded_col: str,
             summary: ImportSummary) -> Iterator[tuple[int, str, str]]:
    """(line, short, expanded) for each good line; problems go to ``summary``."""
    header: list[str] | None = None
    delimiter = "\t" if fmt == "tsv" else ","
    for number, raw in _physical_lines(path):
        summary.lines_read = number
        if raw is None:
            summary.add_problem(number, "line_too_long", f"longer than {MAX_LINE_BYTES:,} bytes")
            continue
        if number == 1 and raw.startswith(b"\xef\xbb\xbf"):
            raw = raw[3:]  # a UTF-8 byte order mark written by spreadsheet programs
        try:
            text = raw.decode("utf-8")
        except UnicodeDecodeError as exc:
            if header is None and fmt != "jsonl":
                raise DumpFormatError(f"{path}:{number}: the header is not UTF-8 ({exc.reason})") from None
            summary.add_problem(number, "not_utf8", f"byte {exc.start + 1} is not UTF-8 ({exc.reason})")
            continue
        if not text.strip():
            continue
        if fmt == "jsonl":
            try:
                obj = json.loads(text)
            except json.JSONDecodeError as exc:
                summary.add_problem(number, "bad_json", exc.msg)
                continue
            except JSON_LIMITS as exc:  # too deep, a number too long: this line's problem
                summary.add_problem(number, "bad_json", json_problem(exc))
                continue
            if not isinstance(obj, dict):
                summary.add_problem(number, "not_an_object", f"a JSON {type(obj).__name__}, not an object")
                continue
            values = [obj.get(short_col), obj.get(expanded_col)]
        else:
            try:
                fields = next(csv.reader([text], delimiter=delimiter, strict=True))
            except csv.Error as exc:
                summary.add_problem(number, "bad_csv", str(exc))
                continue
            if header is None:
                header = [f.strip() for f in fields]
                missing = [c for c in (short_col, expanded_col) if c not in header]
                if missing:
                    raise MissingColumnError(
                        f"{path}:{number}: no column {' or '.join(repr(m) for m in missing)} in the header "
                        f"(found: {', '.join(repr(h) for h in header) or 'nothing'})",
                        hint="name them with --short-column / --expanded-column")
                continue
            row = dict(zip(header, fields, strict=False))
            values = [row.get(short_col), row.get(expanded_col)]
        short, expanded = values
        if not isinstance(short, str) or not short.strip() or not isinstance(expanded, str) or not expanded.strip():
            which = short_col if not (isinstance(short, str) and short.strip()) else expanded_col
            summary.add_problem(number, "missing_value", f"no text in {which!r}")
            continue
        yield number, short.strip(), expanded.strip()
    if header is None and fmt != "jsonl":
        raise DumpFormatError(f"{path}: empty file (a header row naming {short_col!r} and {expanded_col!r} "
                              "is needed)")


def count_pending(engine: Engine, *, settings: Any = None) -> int:
    """Always 0: an import's work is the file it is given; nothing in the registry waits for it."""
    return 0


def import_redirects(engine: Engine, path: str | Path, *, fmt: str | None = None, short_column: str = "short",
                     expanded_column: str = "expanded", batch_size: int = 5000,
                     progress: Progress = SILENT, parent_run: int | None = None) -> ImportSummary:
    """Store the (short, expanded) pairs of ``path`` as redirect links (see the module doc). ``parent_run``
    is the run this one is a step of (a job's), recorded as its parent."""
    path = Path(path)
    kind = _format_of(path, fmt)
    summary = ImportSummary(file=path.name)
    source = f"import:{path.name}"[:SOURCE_MAX]
    with engine.begin() as conn:
        ruleset_id, rules = latest_ruleset(conn)
    canon = Canonicaliser(rules)
    records = _records(path, kind, short_column, expanded_column, summary)
    # Read the header (and fail on a missing column) before a run is recorded or anything written.
    first = next(records, None)
    progress.start(f"import {path.name}")
    with recording_run(engine, STAGE, parent_id=parent_run) as run:
        summary.run_id = run.id
        batch: list[tuple[int, str, Canonical, str, Canonical]] = []
        for item in ([first] if first else []), records:
            for number, short, expanded in item:
                pair = _canonical_pair(canon, number, short, expanded, summary)
                if pair is not None:
                    batch.append(pair)
                if len(batch) >= batch_size:
                    _write(engine, batch, source=source, ruleset_id=ruleset_id, run_id=run.id, summary=summary)
                    batch = []
                    run.counts = summary.as_dict()
                progress.advance(1)
        _write(engine, batch, source=source, ruleset_id=ruleset_id, run_id=run.id, summary=summary)
        run.counts = summary.as_dict()
        progress.finish()
    refresh_statistics(engine, ["canonical_urls"], changed={"links": summary.links,
                                                          "follow_results": summary.settled})
    return summary


def _canonical_pair(canon: Canonicaliser, number: int, short: str, expanded: str,
                    summary: ImportSummary) -> tuple[int, str, Canonical, str, Canonical] | None:
    summary.pairs += 1
    try:
        cs = canon(short)
    except InvalidURL as exc:
        summary.add_problem(number, f"short_{exc.reason}", exc.detail or exc.reason)
        return None
    try:
        ce = canon(expanded)
    except InvalidURL as exc:
        summary.add_problem(number, f"expanded_{exc.reason}", exc.detail or exc.reason)
        return None
    if cs.url_key == ce.url_key:
        summary.same_url += 1
        return None
    return number, short, cs, expanded, ce


def _write(engine: Engine, batch: list[tuple[int, str, Canonical, str, Canonical]], *, source: str,
           ruleset_id: int, run_id: int, summary: ImportSummary) -> None:
    if not batch:
        return
    stamp = datetime.now(UTC)

    def attempt() -> tuple[int, int, int]:
        # One transaction, run again whole if it loses to a concurrent writer: counts are kept only after.
        with engine.begin() as conn:
            urls = [(s, cs) for _n, s, cs, _e, _ce in batch] + [(e, ce) for _n, _s, _cs, e, ce in batch]
            ids = ev.register_urls(conn, urls, ruleset_id=ruleset_id, stamp=stamp)
            rows = [{"kind": "redirect", "src_id": ids[s].canonical_id, "dst_id": ids[e].canonical_id,
                     "status": None, "hop": 1, "source": source, "detail": {"line": n}, "run_id": run_id,
                     "created_at": stamp}
                    for n, s, _cs, e, _ce in batch]
            written = ev.add_links(conn, rows)
            before = finals.edges_of(conn, [ids[s].canonical_id for _n, s, _cs, _e, _ce in batch])
            outcomes = [ev.Outcome(canonical_id=ids[s].canonical_id, state="resolved", via="imported", at=stamp,
                                   final_id=ids[e].canonical_id, hops=1, detail=source)
                        for _n, s, _cs, e, _ce in batch]
            settled = ev.record_outcomes(conn, outcomes, run_id=run_id, replace="unresolved")
            finals.refresh_finals(conn, [o.canonical_id for o in outcomes], edges_before=before)
            return written, len({(r["src_id"], r["dst_id"]) for r in rows}) - written, settled

    written, already, settled = retrying(attempt, what="a batch of imported pairs")
    summary.links += written
    summary.already_linked += already
    summary.settled += settled


__all__ = ["FORMATS", "STAGE", "ImportSummary", "Problem", "count_pending", "import_redirects"]
