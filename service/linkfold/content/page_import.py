"""The page import stage: WARC files, page directories with a manifest, and page JSON lines, stored as pages.

The same ``pages`` rows as fetched pages (:mod:`.fetching`); the same bytes for the same canonical URL are
one page, so a rerun adds nothing. Its work arrives as files, so nothing waits for it in the registry:
:func:`count_pending` is 0 by definition, there for the stage contract (docs in DEVELOPERS.md, "How to add
a stage").
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from sqlalchemy.engine import Engine

from ..canon import Canonical, Canonicaliser
from ..errors import ConfigError, InputError, InvalidURL
from ..inputs import LineProblem
from ..progress import SILENT, Progress
from ..settings import Settings
from ..store import evidence as ev
from ..store import pages as sp
from ..store.conflicts import retrying
from ..store.migrate import require_schema
from ..store.rulesets import latest_ruleset
from ..store.runs import recording_run
from ..store.stats import refresh_statistics
from ..store.text import storable
from ._records import Problem, Problems, by_class, canonical_or_error
from .pages import DEFAULT_MAX_BYTES, MANIFEST_NAME, Page, ReadTally, read_pages

#: The run log's name of this stage.
STAGE = "import_pages"


@dataclass
class ImportSummary:
    """What one page import did. ``skipped`` counts records that are fine but are not pages for us."""

    files: int = 0
    read: int = 0
    stored: int = 0
    already_stored: int = 0
    skipped: Counter[str] = field(default_factory=Counter)
    problems: Problems = field(default_factory=Problems)
    run_id: int | None = None

    def as_dict(self) -> dict[str, Any]:
        return {"files": self.files, "read": self.read, "stored": self.stored,
                "already_stored": self.already_stored, "skipped": dict(sorted(self.skipped.items())),
                "problems": dict(sorted(self.problems.counts.items())), "run_id": self.run_id}

    def lines(self) -> list[str]:
        return [f"imported {self.read:,} pages from {self.files:,} input(s) (run {self.run_id})",
                f"  stored:         {self.stored:,}",
                f"  already stored: {self.already_stored:,}",
                f"  not pages:      {sum(self.skipped.values()):,}" + by_class(self.skipped),
                f"  problems:       {self.problems.total:,}" + by_class(self.problems.counts)]


def _portable_source(source: str, path: Path) -> str:
    """A page's source with the input's file name instead of its full path: where a file sat on one
    machine means nothing on another, and a home directory can name a person."""
    long, short = ((str(path / MANIFEST_NAME), f"{path.name}/{MANIFEST_NAME}") if path.is_dir()
                   else (str(path), path.name))
    return source.replace(long, short, 1)


class _PageWriter:
    def __init__(self, engine: Engine, canon: Canonicaliser, *, ruleset_id: int, run_id: int,
                 summary: ImportSummary) -> None:
        self.engine, self.canon, self.ruleset_id, self.run_id, self.summary = engine, canon, ruleset_id, run_id, summary

    def write(self, batch: Sequence[tuple[Page, str]]) -> None:
        urls: dict[str, Canonical] = {}
        for page, _source in batch:
            for u in {page.url, page.final_url}:
                found = canonical_or_error(self.canon, u)
                if isinstance(found, Canonical):
                    urls[u] = found
        new, rows = retrying(lambda: self._store(batch, urls), what="a batch of imported pages")
        self.summary.stored += new
        self.summary.already_stored += len(rows) - new

    def _store(self, batch: Sequence[tuple[Page, str]], urls: dict[str, Canonical]) -> tuple[int, list[Any]]:
        # One transaction, run again whole if it loses to a concurrent writer.
        with self.engine.begin() as conn:
            ids = ev.register_urls(conn, urls.items(), ruleset_id=self.ruleset_id)
            rows = []
            for page, source in batch:
                got = ids.get(page.url) or ids[storable(page.url)]
                final = ids.get(page.final_url) or ids.get(storable(page.final_url))
                rows.append(sp.page_row(canonical_id=got.canonical_id, requested_url=page.url,
                                        final_url=page.final_url,
                                        final_canonical_id=final.canonical_id if final else None,
                                        status=page.status, headers=dict(page.headers), body=page.body,
                                        truncated=False, source=source, fetched_at=page.fetched_at,
                                        run_id=self.run_id))
            new, _ids = sp.store_pages(conn, rows)
        return new, rows


def count_pending(engine: Engine, *, settings: Settings | None = None) -> int:
    """Always 0: an import's work is the files it is given; nothing in the registry waits for it."""
    return 0


def import_pages(engine: Engine, paths: Iterable[str | Path], *, settings: Settings | None = None,
                 max_bytes: int | None = None, batch_size: int | None = None,
                 progress: Progress = SILENT, parent_run: int | None = None) -> ImportSummary:
    """Store the pages of WARC files, page directories (with a ``pages.tsv`` manifest) and page JSONL.

    Each page is canonicalised by its URL (a canonical URL is created when new) and stored like a fetched
    page. A bad record is a :class:`Problem` (file, line or record, reason) and the rest goes on; a page
    whose URL the canonicaliser refuses is a problem ``url_<reason>``. A file that cannot be read as a whole
    raises :class:`~linkfold.errors.InputError` after everything read before it was stored.
    ``parent_run`` is the run this one is a step of (a job's), recorded as its parent.
    ``max_bytes`` (default: the ``http_max_bytes`` setting) is the body cap, as for fetched pages.
    """
    require_schema(engine)
    inputs = [Path(p) for p in paths]
    if not inputs:
        raise ConfigError("give at least one WARC file, page directory or JSONL file")
    for path in inputs:
        if not path.exists():
            raise InputError(f"{path}: no such file or directory")
    cap = max_bytes or (settings.http_max_bytes if settings is not None else DEFAULT_MAX_BYTES)
    size = max(1, batch_size or (settings.batch_size if settings is not None else 500))
    size = min(size, 500)  # a batch holds bodies in memory
    summary = ImportSummary()
    with engine.begin() as conn:
        ruleset_id, rules = latest_ruleset(conn)
    canon = Canonicaliser(rules, cache_size=settings.canon_cache_size if settings is not None else 65536)
    progress.start("pages load")
    with recording_run(engine, STAGE, parent_id=parent_run) as run:
        summary.run_id = run.id
        writer = _PageWriter(engine, canon, ruleset_id=ruleset_id, run_id=run.id, summary=summary)
        for path in inputs:
            summary.files += 1
            tally = ReadTally()
            batch: list[tuple[Page, str]] = []
            try:
                for item in read_pages(path, max_bytes=cap, tally=tally):
                    progress.advance(1)
                    if isinstance(item, LineProblem):
                        summary.problems.add(item)
                        continue
                    summary.read += 1
                    bad = next((c for c in (canonical_or_error(canon, item.url), canonical_or_error(canon, item.final_url))
                                if isinstance(c, InvalidURL)), None)
                    if bad is not None:
                        line = _line_of(item.source)
                        summary.problems.add(Problem(str(path), line, f"url_{bad.reason}", bad.detail or ""))
                        continue
                    batch.append((item, _portable_source(item.source, path)))
                    if len(batch) >= size:
                        writer.write(batch)
                        batch = []
                        run.counts = summary.as_dict()
            finally:
                # Whatever was read before a broken file (or Ctrl-C) stops the import is stored.
                if batch:
                    writer.write(batch)
                summary.skipped.update(tally.skipped)
                run.counts = summary.as_dict()
        progress.finish()
    refresh_statistics(engine, ["canonical_urls", "links"], changed={"pages": summary.stored})
    return summary


def _line_of(source: str) -> int | None:
    """The line (or record offset) at the end of a page source such as ``jsonl:f.jsonl:12``."""
    tail = source.rsplit(":", 1)[-1].rsplit("#", 1)[-1]
    return int(tail) if tail.isdigit() else None


__all__ = ["STAGE", "ImportSummary", "Problem", "count_pending", "import_pages"]
