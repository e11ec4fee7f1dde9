"""Import redirects instead of fetching them: (short, expanded) pairs a platform export already holds.

Input: CSV or TSV with a header row, or JSON lines (one object a line); the two columns/keys are named
``short`` and ``expanded`` unless told otherwise; gzip-compressed files are read as they are. Each good
line becomes a ``redirect`` link from the short URL's canonical form to the expanded one's, with source
``import:<file name>``, and the short URL is marked ``resolved`` (``via`` ``imported``) unless it already
was. Both URLs are stored as raw and canonical URLs. The short URL then stands for the expanded one, or for
wherever that leads in turn (``store/finals.py``), from the same transaction on.

The file is read by the shared input readers (``linkfold.inputs``), with their rules and reason codes:
a bad line (``invalid_utf8``, ``malformed_csv``, ``field_count``/``missing_column``, ``bad_json``,
``line_too_long``), a missing value (``missing_value``) or a URL the canonicaliser refuses
(``short_<reason>``, ``expanded_<reason>``) is skipped and reported as a ``LineProblem`` in the summary; it
never stops the import. Whole-file problems (no such file, another encoding than UTF-8, no such column,
not JSON lines) stop it before anything is written. A quoted CSV field may span lines (RFC 4180); a
record is numbered by its first line.
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Iterator
from dataclasses import dataclass, field
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

from sqlalchemy.engine import Engine

from ..canon import Canonical, Canonicaliser
from ..errors import DumpFormatError, InputError, InvalidURL
from ..inputs import TABLE_FORMATS, DumpFormat, LineProblem, parse_format, parse_path, read_records, resolve
from ..progress import SILENT, Progress
from ..settings import Settings
from ..store import evidence as ev
from ..store import finals
from ..store.conflicts import retrying
from ..store.migrate import require_schema
from ..store.rulesets import latest_ruleset
from ..store.runs import recording_run
from ..store.stats import refresh_statistics

#: The formats of a file of redirect pairs.
FORMATS = tuple(f.value for f in TABLE_FORMATS)
MAX_PROBLEMS_KEPT = 1000  # reported one by one; beyond this only counted by reason
SOURCE_MAX = 255  # links.source width
#: A line of a redirect table holds two URLs; a longer one is a problem of its line, read no further.
MAX_LINE_BYTES = 1 << 20

#: The run log's name of this stage.
STAGE = "follow_import"


@dataclass
class ImportSummary:
    file: str
    lines_read: int = 0
    pairs: int = 0
    links: int = 0
    already_linked: int = 0
    same_url: int = 0  # both URLs have one canonical form: nothing to link
    settled: int = 0  # short URLs whose follow result the import set
    problems: list[LineProblem] = field(default_factory=list)
    problem_counts: Counter[str] = field(default_factory=Counter)
    run_id: int | None = None
    path: str = ""  # the file as given, as problems name it

    def add(self, problem: LineProblem) -> None:
        self.problem_counts[problem.reason] += 1
        if len(self.problems) < MAX_PROBLEMS_KEPT:
            self.problems.append(problem)

    def add_problem(self, line: int, reason: str, detail: str) -> None:
        self.add(LineProblem(self.path or self.file, line, reason, detail))

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


def _format_of(path: Path, fmt: str | None) -> DumpFormat:
    try:
        return parse_format(fmt, path, TABLE_FORMATS)
    except InputError as exc:
        raise DumpFormatError(str(exc), hint=exc.hint) from None


def _records(path: Path, fmt: DumpFormat, short_col: str, expanded_col: str,
             summary: ImportSummary) -> Iterator[tuple[int, str, str]]:
    """(line, short, expanded) for each good line; problems go to ``summary``."""
    reader = read_records(path, fmt, required=((short_col, "--short-column"), (expanded_col, "--expanded-column")),
                          max_line_bytes=MAX_LINE_BYTES)
    # In JSON lines a column is a path (``linkfold.inputs.paths``), as the reader checked it and as ingest
    # reads it; a path that reaches several values names no single URL.
    paths = {c: parse_path(c) for c in (short_col, expanded_col)} if fmt is DumpFormat.JSONL else None

    def value(values: dict[str, Any], column: str) -> Any:
        if paths is None:
            return values.get(column)
        got = resolve(paths[column], values).values
        return got[0] if len(got) == 1 else None

    for item in reader:
        summary.lines_read = reader.lines_read
        if isinstance(item, LineProblem):
            summary.add(item)
            continue
        short, expanded = value(item.values, short_col), value(item.values, expanded_col)
        if not isinstance(short, str) or not short.strip() or not isinstance(expanded, str) or not expanded.strip():
            which = short_col if not (isinstance(short, str) and short.strip()) else expanded_col
            summary.add_problem(item.line, "missing_value", f"no text in {which!r}")
            continue
        yield item.line, short.strip(), expanded.strip()
    summary.lines_read = reader.lines_read


def count_pending(engine: Engine, *, settings: Settings | None = None) -> int:
    """Always 0: an import's work is the file it is given; nothing in the registry waits for it."""
    return 0


def import_redirects(engine: Engine, path: str | Path, *, fmt: str | None = None, short_column: str = "short",
                     expanded_column: str = "expanded", batch_size: int = 5000,
                     progress: Progress = SILENT, parent_run: int | None = None) -> ImportSummary:
    """Store the (short, expanded) pairs of ``path`` as redirect links (see the module doc). ``parent_run``
    is the run this one is a step of (a job's), recorded as its parent."""
    require_schema(engine)
    path = Path(path)
    kind = _format_of(path, fmt)
    summary = ImportSummary(file=path.name, path=str(path))
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


__all__ = ["FORMATS", "STAGE", "ImportSummary", "count_pending", "import_redirects"]
