"""The documents load stage: documents extracted elsewhere, from JSON lines (``linkfold documents load``).

Each record is canonicalised by its URL, each bad line reported with its number; a reloaded record adds
nothing (its identity is :func:`record_hash`). Its work arrives as a file, so :func:`count_pending` is 0 by
definition, there for the stage contract.
"""

from __future__ import annotations

import hashlib
import json
from collections import Counter
from dataclasses import dataclass, field
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

from sqlalchemy.engine import Engine

from ..canon import Canonical, Canonicaliser
from ..errors import InvalidURL
from ..inputs import DumpFormat, LineProblem, RecordProblem, read_records
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
from ._records import Problem, Problems, by_class, canonical_or_error, document_row
from .documents import DOCUMENT_FIELDS, MAX_LINE_BYTES, document_from_record
from .extract import Document
from .usable import DEFAULT_RULES, UsableTextRules

#: The run log's name of this stage.
STAGE = "load_documents"


@dataclass
class LoadSummary:
    """What one ``documents load`` did."""

    read: int = 0
    stored: int = 0
    already_stored: int = 0
    usable: int = 0
    no_text: Counter[str] = field(default_factory=Counter)
    problems: Problems = field(default_factory=Problems)
    run_id: int | None = None

    def as_dict(self) -> dict[str, Any]:
        return {"read": self.read, "stored": self.stored, "already_stored": self.already_stored,
                "usable": self.usable, "no_text": dict(sorted(self.no_text.items())),
                "problems": dict(sorted(self.problems.counts.items())), "run_id": self.run_id}

    def lines(self) -> list[str]:
        return [f"loaded {self.read:,} documents (run {self.run_id})",
                f"  stored:         {self.stored:,} ({self.usable:,} usable, "
                f"{sum(self.no_text.values()):,} without usable text{by_class(self.no_text)})",
                f"  already stored: {self.already_stored:,}",
                f"  problems:       {self.problems.total:,}" + by_class(self.problems.counts)]


def _storable_record(obj: dict[str, Any]) -> dict[str, Any]:
    """The record's text fields as the database can hold them, before anything is computed from them.

    A JSON string may escape NUL and lone surrogates (RFC 8259 §7 allows both); PostgreSQL text holds
    neither, and a lone surrogate cannot even be encoded as UTF-8 for hashing. They become U+FFFD, as in
    raw URLs (``linkfold.store.text.storable``).
    """
    out = dict(obj)
    for name in DOCUMENT_FIELDS:
        value = out.get(name)
        if isinstance(value, str):
            out[name] = storable(value)
        elif isinstance(value, list):
            out[name] = [storable(v) if isinstance(v, str) else v for v in value]
    return out


def record_hash(doc: Document) -> str:
    """Identity of a loaded document: SHA-256 of its fields as stored, so loading a file twice adds
    nothing while a corrected record (another title, a fixed date) is stored as a new document."""
    fields = [doc.url, doc.title, doc.text, doc.published.isoformat() if doc.published else None, doc.author,
              doc.language]
    return hashlib.sha256(json.dumps(fields, ensure_ascii=False).encode("utf-8")).hexdigest()


def count_pending(engine: Engine, *, settings: Settings | None = None) -> int:
    """Always 0: a load's work is the file it is given; nothing in the registry waits for it."""
    return 0


def load_documents(engine: Engine, path: str | Path, *, settings: Settings | None = None, batch_size: int | None = None,
                   rules: UsableTextRules = DEFAULT_RULES, now: datetime | None = None,
                   progress: Progress = SILENT, parent_run: int | None = None) -> LoadSummary:
    """Load already-extracted documents from JSON lines (``url``, ``title``, ``text``; optional
    ``published``, ``author``, ``language``; docs/content.md).

    Each record's URL is canonicalised (a canonical URL is created when new); a bad line, or a URL the
    canonicaliser refuses (``url_<reason>``), is a numbered :class:`Problem` and the others still load.
    Documents get ``page_id`` NULL and ``source`` ``load:<file name>:<line>``. Raises
    :class:`~linkfold.errors.InputError` when the file cannot be read at all.
    """
    require_schema(engine)
    path = Path(path)
    size = max(1, batch_size or (settings.batch_size if settings is not None else 1000))
    size = min(size, 1000)  # a batch holds texts in memory
    moment = now or datetime.now(UTC)
    summary = LoadSummary()
    with engine.begin() as conn:
        ruleset_id, ruleset = latest_ruleset(conn)
    canon = Canonicaliser(ruleset, cache_size=settings.canon_cache_size if settings is not None else 65536)
    progress.start("documents load")
    with recording_run(engine, STAGE, parent_id=parent_run) as run:
        summary.run_id = run.id
        batch: list[tuple[Document, Canonical, int]] = []

        def flush() -> None:
            if not batch:
                return
            def attempt() -> tuple[int, list[dict[str, Any]]]:
                # One transaction, run again whole if it loses to a concurrent writer.
                with engine.begin() as conn:
                    ids = ev.register_urls(conn, [(d.url, c) for d, c, _ in batch], ruleset_id=ruleset_id)
                    rows = [document_row(d, canonical_id=(ids.get(d.url) or ids[storable(d.url)]).canonical_id,
                                          page_id=None, source=f"load:{path.name}:{line}", run_id=run.id,
                                          record_sha256=record_hash(d), at=moment) for d, _c, line in batch]
                    return sp.store_documents(conn, rows), rows

            new, rows = retrying(attempt, what="a batch of documents")
            summary.stored += new
            summary.already_stored += len(rows) - new
            run.counts = summary.as_dict()
            batch.clear()

        try:
            for item in read_records(path, DumpFormat.JSONL, max_line_bytes=MAX_LINE_BYTES):
                progress.advance(1)
                if isinstance(item, LineProblem):
                    summary.problems.add(item)
                    continue
                number = item.line
                try:
                    doc = document_from_record(_storable_record(item.values), now=moment, rules=rules)
                except RecordProblem as bad:
                    summary.problems.add(bad.at(str(path), number))
                    continue
                found = canonical_or_error(canon, doc.url)
                if isinstance(found, InvalidURL):
                    summary.problems.add(Problem(str(path), number, f"url_{found.reason}", found.detail or ""))
                    continue
                summary.read += 1
                if doc.usable:
                    summary.usable += 1
                else:
                    summary.no_text[doc.unusable_reason.value if doc.unusable_reason else "unknown"] += 1
                batch.append((doc, found, number))
                if len(batch) >= size:
                    flush()
        finally:
            flush()
            run.counts = summary.as_dict()
            progress.finish()
    refresh_statistics(engine, ["canonical_urls"], changed={"documents": summary.stored})
    # Counted per record read, so a rerun reports what it read even though it stores nothing new.
    return summary


__all__ = ["STAGE", "LoadSummary", "Problem", "count_pending", "load_documents", "record_hash"]
