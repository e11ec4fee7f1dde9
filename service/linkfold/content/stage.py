"""The content stages over the database: import pages, load documents, extract documents from pages.

Thin shells over the pure core of this package (readers, :func:`extract_document`, declared-canonical
placement) and the writes in :mod:`linkfold.store.pages`; fetching lives in :mod:`.fetching` and is
re-exported here. Every stage reads what is pending, writes in batches of ``batch_size`` (one transaction
each, so a killed stage resumes where it stopped), records a run with its counts, and returns a summary
with ``counts()`` (for scripts and the run log) and ``lines()`` (for people).

* :func:`import_pages` — WARC files, page directories with a manifest, page JSONL; the same ``pages``
  rows as fetched pages. The same bytes for the same canonical URL are one page, so a rerun adds nothing.
* :func:`load_documents` — documents extracted elsewhere (``documents load``); each record canonicalised
  by its URL, each bad line reported with its number; a reloaded record adds nothing.
* :func:`extract_pages` — pages without a document (or, with ``reextract``, without one under the current
  extractor version) become documents, usable or ``no_text`` with the reason; their declared canonicals
  become ``declared`` links (same outlet) or ``declared_cross`` links marked untrusted (another outlet).
* :func:`count_pending` — what the nightly job asks before it runs a stage.
"""

from __future__ import annotations

import hashlib
import json
import logging
from collections import Counter
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field, replace
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

from sqlalchemy.engine import Engine

from ..canon import Canonical, Canonicaliser, Ruleset
from ..errors import ConfigError, InputError, InvalidURL
from ..ingest.rows import storable
from ..inputs import DumpFormat, LineProblem, RecordProblem, read_records
from ..progress import SILENT, Progress
from ..store import evidence as ev
from ..store import pages as sp
from ..store.conflicts import retrying
from ..store.rulesets import latest_ruleset
from ..store.runs import recording_run
from ..store.stats import refresh_statistics
from .canonical_link import DeclaredLink, Relation, declared_link
from .documents import DOCUMENT_FIELDS, MAX_LINE_BYTES, document_from_record
from .extract import Document, extract_document, extractor_version
from .fetching import FetchSummary, fetch_pages
from .mediatype import is_html
from .pages import DEFAULT_MAX_BYTES, MANIFEST_NAME, Page, ReadTally, read_pages
from .text import text_hash
from .usable import DEFAULT_RULES, Unusable, UsableTextRules

log = logging.getLogger("linkfold")

#: Problems kept one by one in a summary (for the CLI to show); the rest are only counted.
KEPT_PROBLEMS = 200

#: Link kinds this stage writes. ``declared_cross`` is evidence, not proof: clustering does not take it
#: as "same article" (syndication partners name the origin as canonical).
DECLARED = "declared"
DECLARED_CROSS = "declared_cross"
LINK_SOURCE = "extract"


#: One input record that was not stored: the one problem shape of every input (linkfold.inputs).
Problem = LineProblem


@dataclass
class _Problems:
    counts: Counter[str] = field(default_factory=Counter)
    kept: list[Problem] = field(default_factory=list)

    def add(self, problem: Problem) -> None:
        self.counts[problem.reason] += 1
        if len(self.kept) < KEPT_PROBLEMS:
            self.kept.append(problem)

    @property
    def total(self) -> int:
        return sum(self.counts.values())


def _by_class(counts: Counter[str] | dict[str, int]) -> str:
    return (" (" + ", ".join(f"{k} {v:,}" for k, v in sorted(counts.items())) + ")") if counts else ""


def _canonical(canon: Canonicaliser, url: str) -> Canonical | InvalidURL:
    try:
        return canon(url)
    except InvalidURL as exc:
        return exc


# --- import ----------------------------------------------------------------------------------------------------
@dataclass
class ImportSummary:
    """What one page import did. ``skipped`` counts records that are fine but are not pages for us."""

    files: int = 0
    read: int = 0
    stored: int = 0
    already_stored: int = 0
    skipped: Counter[str] = field(default_factory=Counter)
    problems: _Problems = field(default_factory=_Problems)
    run_id: int | None = None

    def counts(self) -> dict[str, Any]:
        return {"files": self.files, "read": self.read, "stored": self.stored,
                "already_stored": self.already_stored, "skipped": dict(sorted(self.skipped.items())),
                "problems": dict(sorted(self.problems.counts.items())), "run_id": self.run_id}

    def lines(self) -> list[str]:
        return [f"imported {self.read:,} pages from {self.files:,} input(s) (run {self.run_id})",
                f"  stored:         {self.stored:,}",
                f"  already stored: {self.already_stored:,}",
                f"  not pages:      {sum(self.skipped.values()):,}" + _by_class(self.skipped),
                f"  problems:       {self.problems.total:,}" + _by_class(self.problems.counts)]


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
                found = _canonical(self.canon, u)
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


def import_pages(engine: Engine, paths: Iterable[str | Path], *, settings: Any = None,
                 max_bytes: int | None = None, batch_size: int | None = None,
                 progress: Progress = SILENT) -> ImportSummary:
    """Store the pages of WARC files, page directories (with a ``pages.tsv`` manifest) and page JSONL.

    Each page is canonicalised by its URL (a canonical URL is created when new) and stored like a fetched
    page. A bad record is a :class:`Problem` (file, line or record, reason) and the rest goes on; a page
    whose URL the canonicaliser refuses is a problem ``url_<reason>``. A file that cannot be read as a whole
    raises :class:`~linkfold.errors.InputError` after everything read before it was stored.
    ``max_bytes`` (default: the ``http_max_bytes`` setting) is the body cap, as for fetched pages.
    """
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
    progress.start("import-pages")
    with recording_run(engine, "import_pages") as run:
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
                    bad = next((c for c in (_canonical(canon, item.url), _canonical(canon, item.final_url))
                                if isinstance(c, InvalidURL)), None)
                    if bad is not None:
                        line = _line_of(item.source)
                        summary.problems.add(Problem(str(path), line, f"url_{bad.reason}", bad.detail or ""))
                        continue
                    batch.append((item, _portable_source(item.source, path)))
                    if len(batch) >= size:
                        writer.write(batch)
                        batch = []
                        run.counts = summary.counts()
            finally:
                # Whatever was read before a broken file (or Ctrl-C) stops the import is stored.
                if batch:
                    writer.write(batch)
                summary.skipped.update(tally.skipped)
                run.counts = summary.counts()
        progress.finish()
    refresh_statistics(engine, ["canonical_urls", "links"], changed={"pages": summary.stored})
    return summary


def _line_of(source: str) -> int | None:
    """The line (or record offset) at the end of a page source such as ``jsonl:f.jsonl:12``."""
    tail = source.rsplit(":", 1)[-1].rsplit("#", 1)[-1]
    return int(tail) if tail.isdigit() else None


# --- load documents -------------------------------------------------------------------------------------------
@dataclass
class LoadSummary:
    """What one ``documents load`` did."""

    read: int = 0
    stored: int = 0
    already_stored: int = 0
    usable: int = 0
    no_text: Counter[str] = field(default_factory=Counter)
    problems: _Problems = field(default_factory=_Problems)
    run_id: int | None = None

    def counts(self) -> dict[str, Any]:
        return {"read": self.read, "stored": self.stored, "already_stored": self.already_stored,
                "usable": self.usable, "no_text": dict(sorted(self.no_text.items())),
                "problems": dict(sorted(self.problems.counts.items())), "run_id": self.run_id}

    def lines(self) -> list[str]:
        return [f"loaded {self.read:,} documents (run {self.run_id})",
                f"  stored:         {self.stored:,} ({self.usable:,} usable, "
                f"{sum(self.no_text.values()):,} without usable text{_by_class(self.no_text)})",
                f"  already stored: {self.already_stored:,}",
                f"  problems:       {self.problems.total:,}" + _by_class(self.problems.counts)]


def _storable_record(obj: dict[str, Any]) -> dict[str, Any]:
    """The record's text fields as the database can hold them, before anything is computed from them.

    A JSON string may escape NUL and lone surrogates (RFC 8259 §7 allows both); PostgreSQL text holds
    neither, and a lone surrogate cannot even be encoded as UTF-8 for hashing. They become U+FFFD, as in
    raw URLs (``linkfold.ingest.rows.storable``).
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


def _storable_text(doc: Document) -> tuple[str | None, str | None, str | None, str | None]:
    """Title, text, text hash and author as the database can hold them.

    PostgreSQL text cannot hold NUL or lone surrogates (a JSON line can carry both); they become U+FFFD,
    and the hash is taken again so that it is always the SHA-256 of the text as stored.
    """
    text = storable(doc.text) if doc.text else None
    digest = doc.text_hash
    if digest is not None and text != doc.text:
        digest = text_hash(text or "")
    return (storable(doc.title) if doc.title else doc.title, text, digest,
            storable(doc.author) if doc.author else doc.author)


def _document_row(doc: Document, *, canonical_id: int, page_id: int | None, source: str, run_id: int,
                  record_sha256: str | None, at: datetime) -> dict[str, Any]:
    title, text, digest, author = _storable_text(doc)
    return {"canonical_id": canonical_id, "page_id": page_id, "title": title, "text": text,
            "text_hash": digest, "word_count": doc.word_count, "author": author,
            "published": doc.published, "published_source": doc.published_source, "language": doc.language,
            "declared_canonical": doc.declared_canonical, "og_url": doc.og_url, "amp_url": doc.amp_url,
            "status": doc.status.value,
            "unusable_reason": doc.unusable_reason.value if doc.unusable_reason else None,
            "extractor_version": doc.extractor_version, "source": source, "record_sha256": record_sha256,
            "created_at": at, "run_id": run_id}


def load_documents(engine: Engine, path: str | Path, *, settings: Any = None, batch_size: int | None = None,
                   rules: UsableTextRules = DEFAULT_RULES, now: datetime | None = None,
                   progress: Progress = SILENT) -> LoadSummary:
    """Load already-extracted documents from JSON lines (``url``, ``title``, ``text``; optional
    ``published``, ``author``, ``language``; docs/content.md).

    Each record's URL is canonicalised (a canonical URL is created when new); a bad line, or a URL the
    canonicaliser refuses (``url_<reason>``), is a numbered :class:`Problem` and the others still load.
    Documents get ``page_id`` NULL and ``source`` ``load:<file name>:<line>``. Raises
    :class:`~linkfold.errors.InputError` when the file cannot be read at all.
    """
    path = Path(path)
    size = max(1, batch_size or (settings.batch_size if settings is not None else 1000))
    size = min(size, 1000)  # a batch holds texts in memory
    moment = now or datetime.now(UTC)
    summary = LoadSummary()
    with engine.begin() as conn:
        ruleset_id, ruleset = latest_ruleset(conn)
    canon = Canonicaliser(ruleset, cache_size=settings.canon_cache_size if settings is not None else 65536)
    progress.start("documents load")
    with recording_run(engine, "load_documents") as run:
        summary.run_id = run.id
        batch: list[tuple[Document, Canonical, int]] = []

        def flush() -> None:
            if not batch:
                return
            def attempt() -> tuple[int, list[dict[str, Any]]]:
                # One transaction, run again whole if it loses to a concurrent writer.
                with engine.begin() as conn:
                    ids = ev.register_urls(conn, [(d.url, c) for d, c, _ in batch], ruleset_id=ruleset_id)
                    rows = [_document_row(d, canonical_id=(ids.get(d.url) or ids[storable(d.url)]).canonical_id,
                                          page_id=None, source=f"load:{path.name}:{line}", run_id=run.id,
                                          record_sha256=record_hash(d), at=moment) for d, _c, line in batch]
                    return sp.store_documents(conn, rows), rows

            new, rows = retrying(attempt, what="a batch of documents")
            summary.stored += new
            summary.already_stored += len(rows) - new
            run.counts = summary.counts()
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
                found = _canonical(canon, doc.url)
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
            run.counts = summary.counts()
            progress.finish()
    refresh_statistics(engine, ["canonical_urls"], changed={"documents": summary.stored})
    # Counted per record read, so a rerun reports what it read even though it stores nothing new.
    return summary


# --- extract -----------------------------------------------------------------------------------------------------
@dataclass
class ExtractSummary:
    """What one extraction run did."""

    extractor_version: str = ""
    reextract: bool = False
    selected: int = 0
    usable: int = 0
    no_text: Counter[str] = field(default_factory=Counter)
    stored: int = 0
    declared: Counter[str] = field(default_factory=Counter)  # self | same_outlet | cross_outlet | unparsable
    links: int = 0
    cross_links: int = 0
    run_id: int | None = None

    def counts(self) -> dict[str, Any]:
        return {"extractor_version": self.extractor_version, "reextract": self.reextract,
                "selected": self.selected, "usable": self.usable, "no_text": dict(sorted(self.no_text.items())),
                "stored": self.stored, "declared": dict(sorted(self.declared.items())), "links": self.links,
                "cross_links": self.cross_links, "run_id": self.run_id}

    def lines(self) -> list[str]:
        if not self.selected:
            return [f"extract: nothing pending for {self.extractor_version}"
                    + ("" if self.reextract else " (pages with older documents: --reextract)")]
        return [f"extracted {self.selected:,} pages with {self.extractor_version} (run {self.run_id})",
                f"  usable:  {self.usable:,}",
                f"  no text: {sum(self.no_text.values()):,}" + _by_class(self.no_text),
                f"  declared canonicals: {sum(self.declared.values()):,}" + _by_class(self.declared),
                f"  links written: {self.links:,} declared (same outlet), {self.cross_links:,} "
                f"declared_cross (another outlet, not trusted)"]


def _as_page(stored: sp.StoredPage) -> Page:
    return Page(url=stored.requested_url, final_url=stored.final_url, status=stored.status,
                headers=stored.headers, body=stored.body, fetched_at=stored.fetched_at, source=stored.source)


def _extract(stored: sp.StoredPage, rules: UsableTextRules) -> Document:
    page = _as_page(stored)
    doc = extract_document(page, rules=rules)
    # The fetch stage keeps no body of a response that is not HTML (nothing would read it), so the core
    # sees an empty body; the stored Content-Type still says why there is no text.
    if (doc.unusable_reason is Unusable.EMPTY and not page.body and page.content_type
            and not is_html(page.content_type, b"")):
        doc = replace(doc, unusable_reason=Unusable.NOT_HTML)
    return doc


class _DocWriter:
    def __init__(self, engine: Engine, canon: Canonicaliser, rules: Ruleset, *, ruleset_id: int, run_id: int,
                 version: str, text_rules: UsableTextRules, summary: ExtractSummary) -> None:
        self.engine, self.canon, self.rules = engine, canon, rules
        self.ruleset_id, self.run_id, self.version = ruleset_id, run_id, version
        self.text_rules, self.summary = text_rules, summary

    def extract(self, page_ids: Sequence[int]) -> None:
        s = self.summary
        with self.engine.connect() as conn:
            stored = sp.load_pages(conn, page_ids)
        done: list[tuple[sp.StoredPage, Document]] = []
        for page in stored:
            doc = _extract(page, self.text_rules)
            if doc.notes:
                log.debug("page %d: %s", page.id, "; ".join(doc.notes))
            done.append((page, doc))
            if doc.usable:
                s.usable += 1
            else:
                s.no_text[doc.unusable_reason.value if doc.unusable_reason else "unknown"] += 1
        at = datetime.now(UTC)
        placed = [(page, self._place(page, doc)) for page, doc in done]
        targets: dict[str, Canonical] = {}
        for _page, found in placed:
            if found is not None:
                targets[found[1]] = found[3]
        with self.engine.begin() as conn:
            rows = [_document_row(doc, canonical_id=page.document_canonical_id, page_id=page.id,
                                  source=f"page:{page.id}", run_id=self.run_id, record_sha256=None, at=at)
                    for page, doc in done]
            s.stored += sp.store_documents(conn, rows)
            ids = ev.register_urls(conn, targets.items(), ruleset_id=self.ruleset_id)
            doc_ids = sp.document_ids(conn, [p.id for p, _ in done], self.version)
            same, cross = [], []
            for page, found in placed:
                if found is None:
                    continue
                link, raw, via, _canonical_target = found
                target = ids.get(raw) or ids[storable(raw)]
                detail: dict[str, Any] = {"via": via, "page_id": page.id, "document_id": doc_ids.get(page.id),
                                          "declared_url": raw}
                row = {"src_id": page.document_canonical_id, "dst_id": target.canonical_id, "source": LINK_SOURCE,
                       "run_id": self.run_id, "created_at": at}
                if link.relation is Relation.CROSS_OUTLET:
                    # Recorded, not trusted blindly: syndication partners routinely name the origin.
                    detail |= {"trusted": False, "page_outlet": link.page_outlet, "target_outlet": link.target_outlet}
                    cross.append(row | {"kind": DECLARED_CROSS, "detail": detail})
                else:
                    same.append(row | {"kind": DECLARED, "detail": detail})
            s.links += ev.add_links(conn, same)
            s.cross_links += ev.add_links(conn, cross)

    def _place(self, page: sp.StoredPage, doc: Document) -> tuple[DeclaredLink, str, str, Canonical] | None:
        """The page's declared address placed against the page, when it names another canonical URL.

        rel=canonical first; og:url (the Open Graph protocol's "canonical URL of your object", from
        memory) only when the page names no canonical. Returns (placement, the URL as declared, which of
        the two it was, its canonical form).
        """
        raw, via = (doc.declared_canonical, "rel_canonical") if doc.declared_canonical else (doc.og_url, "og_url")
        if raw is None:
            return None
        try:
            link = declared_link(page.final_url, raw, self.rules)
            target = self.canon(raw)
        except InvalidURL:
            self.summary.declared["unparsable"] += 1
            return None
        assert link is not None
        self.summary.declared[link.relation.value] += 1
        if link.relation is Relation.SELF:
            return None
        return link, raw, via, target


def extract_pages(engine: Engine, *, settings: Any = None, reextract: bool = False, limit: int | None = None,
                  batch_size: int | None = None, rules: UsableTextRules = DEFAULT_RULES,
                  progress: Progress = SILENT, parent_id: int | None = None) -> ExtractSummary:
    """Turn stored pages into documents (see the module doc); returns the counts.

    Without ``reextract``: pages that have no document yet. With it: pages that have no document under
    the current extractor version (trafilatura's version and ``CONTENT_VERSION``), so after an upgrade one
    run brings every page up to date; the older documents are kept. ``limit`` stops after that many pages.
    """
    if limit is not None and limit <= 0:
        raise ConfigError(f"--limit must be a positive number (got {limit})")
    version = extractor_version()
    summary = ExtractSummary(extractor_version=version, reextract=reextract)
    size = max(1, min(batch_size or (settings.batch_size if settings is not None else 100), 100))
    with engine.begin() as conn:
        ruleset_id, ruleset = latest_ruleset(conn)
        total = sp.count_extract_pending(conn, version=version, reextract=reextract)
    total = min(total, limit) if limit is not None else total
    summary.selected = 0
    if total == 0:
        return summary
    canon = Canonicaliser(ruleset, cache_size=settings.canon_cache_size if settings is not None else 65536)
    progress.start("extract", total=total)
    with recording_run(engine, "extract", parent_id=parent_id) as run:
        summary.run_id = run.id
        writer = _DocWriter(engine, canon, ruleset, ruleset_id=ruleset_id, run_id=run.id, version=version,
                            text_rules=rules, summary=summary)
        after = 0
        try:
            while summary.selected < total:
                with engine.connect() as conn:
                    ids = sp.select_extract_pending(conn, version=version, reextract=reextract, after_id=after,
                                                    limit=min(size, total - summary.selected))
                if not ids:
                    break
                writer.extract(ids)
                after = ids[-1]
                summary.selected += len(ids)
                progress.advance(len(ids))
                run.counts = summary.counts()
        finally:
            run.counts = summary.counts()
            progress.finish()
    refresh_statistics(engine, ["canonical_urls"], changed={"documents": summary.stored,
                                                          "links": summary.links + summary.cross_links})
    return summary


# --- pending work ------------------------------------------------------------------------------------------------
def count_pending(engine: Engine, *, now: datetime | None = None) -> dict[str, int]:
    """Work waiting for each content stage: ``fetch`` (canonical URLs to fetch, failed ones only when due),
    ``extract`` (pages without a document) and ``reextract`` (pages without a document under the current
    extractor version, which ``extract --reextract`` would do)."""
    version = extractor_version()
    with engine.connect() as conn:
        return {"fetch": sp.count_fetch_pending(conn, now=now),
                "extract": sp.count_extract_pending(conn, version=version),
                "reextract": sp.count_extract_pending(conn, version=version, reextract=True)}


__all__ = [
    "DECLARED",
    "DECLARED_CROSS",
    "ExtractSummary",
    "FetchSummary",
    "ImportSummary",
    "LoadSummary",
    "Problem",
    "count_pending",
    "extract_pages",
    "fetch_pages",
    "import_pages",
    "load_documents",
    "record_hash",
]

