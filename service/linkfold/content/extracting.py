"""The extraction stage: stored pages become documents, and their declared canonicals become links.

Pages without a document (or, with ``reextract``, without one under the current extractor version) become
documents, usable or ``no_text`` with the reason; their declared canonicals become ``declared`` links
(same outlet) or ``declared_cross`` links marked untrusted (another outlet). A thin shell over the pure
:func:`~linkfold.content.extract_document` and the writes of :mod:`linkfold.store.pages`.

The extraction itself, the heavy part, goes through the executor (:mod:`linkfold.executor`): this process
reads a batch of pages, hands their bytes to a worker (or extracts them itself, in process), and writes
each batch's documents as it comes back, in order, while the next batches are being extracted. Only this
process writes, one batch per transaction, so an interrupted run resumes where the written batches end.
"""

from __future__ import annotations

import logging
from collections import Counter, deque
from collections.abc import Iterator, Sequence
from dataclasses import dataclass, field
from datetime import UTC, datetime
from typing import Any

from sqlalchemy.engine import Engine

from ..canon import Canonical, Canonicaliser, Ruleset
from ..errors import ConfigError, InvalidURL
from ..executor import Executor, executor_for
from ..progress import SILENT, Progress
from ..settings import Settings
from ..store import evidence as ev
from ..store import pages as sp
from ..store.migrate import require_schema
from ..store.rulesets import latest_ruleset
from ..store.runs import recording_run
from ..store.stats import refresh_statistics
from ..store.text import storable
from ._records import by_class, document_row
from .batch import ExtractJob, extract_batch
from .canonical_link import DeclaredLink, Relation, declared_link
from .extract import Document, extractor_version
from .pages import Page
from .usable import DEFAULT_RULES, UsableTextRules

log = logging.getLogger("linkfold")

#: The run log's name of this stage.
STAGE = "extract"

#: Link kinds this stage writes. ``declared_cross`` is evidence, not proof: clustering does not take it
#: as "same article" (syndication partners name the origin as canonical).
DECLARED = "declared"
DECLARED_CROSS = "declared_cross"
LINK_SOURCE = "extract"


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

    def as_dict(self) -> dict[str, Any]:
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
                f"  no text: {sum(self.no_text.values()):,}" + by_class(self.no_text),
                f"  declared canonicals: {sum(self.declared.values()):,}" + by_class(self.declared),
                f"  links written: {self.links:,} declared (same outlet), {self.cross_links:,} "
                f"declared_cross (another outlet, not trusted)"]


def _as_page(stored: sp.StoredPage) -> Page:
    return Page(url=stored.requested_url, final_url=stored.final_url, status=stored.status,
                headers=stored.headers, body=stored.body, fetched_at=stored.fetched_at, source=stored.source)


class _DocWriter:
    def __init__(self, engine: Engine, canon: Canonicaliser, rules: Ruleset, *, ruleset_id: int, run_id: int,
                 version: str, text_rules: UsableTextRules, summary: ExtractSummary) -> None:
        self.engine, self.canon, self.rules = engine, canon, rules
        self.ruleset_id, self.run_id, self.version = ruleset_id, run_id, version
        self.text_rules, self.summary = text_rules, summary

    def write(self, stored: Sequence[sp.StoredPage], docs: Sequence[Document]) -> None:
        """Store one batch's documents (extracted wherever the executor ran them) and their links."""
        s = self.summary
        done = list(zip(stored, docs, strict=True))
        for page, doc in done:
            if doc.notes:
                log.debug("page %d: %s", page.id, "; ".join(doc.notes))
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
            rows = [document_row(doc, canonical_id=page.document_canonical_id, page_id=page.id,
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


def count_pending(engine: Engine, *, settings: Settings | None = None, reextract: bool = False) -> int:
    """Pages without a document (with ``reextract``: without one under the current extractor version)."""
    with engine.connect() as conn:
        return sp.count_extract_pending(conn, version=extractor_version(), reextract=reextract)


def extract_pages(engine: Engine, *, settings: Settings | None = None, reextract: bool = False, limit: int | None = None,
                  batch_size: int | None = None, rules: UsableTextRules = DEFAULT_RULES,
                  progress: Progress = SILENT, parent_run: int | None = None,
                  executor: Executor | None = None) -> ExtractSummary:
    """Turn stored pages into documents (see the module doc); returns the counts.

    ``executor`` runs the extraction (default: the one the settings ``executor`` and ``workers`` choose for
    this much work, closed again at the end; a job passes its own to share it between stages).

    Without ``reextract``: pages that have no document yet. With it: pages that have no document under
    the current extractor version (trafilatura's version and ``CONTENT_VERSION``), so after an upgrade one
    run brings every page up to date; the older documents are kept. ``limit`` stops after that many pages.
    """
    require_schema(engine)
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
    with recording_run(engine, STAGE, parent_id=parent_run) as run:
        summary.run_id = run.id
        writer = _DocWriter(engine, canon, ruleset, ruleset_id=ruleset_id, run_id=run.id, version=version,
                            text_rules=rules, summary=summary)
        in_flight: deque[list[sp.StoredPage]] = deque()

        def jobs() -> Iterator[ExtractJob]:
            # Reads ahead of what is written by at most the executor's window; ids only grow, so a batch
            # read here is never read again by this run.
            after, read = 0, 0
            while read < total:
                with engine.connect() as conn:
                    ids = sp.select_extract_pending(conn, version=version, reextract=reextract, after_id=after,
                                                    limit=min(size, total - read))
                    stored = sp.load_pages(conn, ids) if ids else []
                if not ids:
                    return
                after, read = ids[-1], read + len(ids)
                in_flight.append(stored)
                yield ExtractJob([_as_page(p) for p in stored], rules=rules)

        owned = executor is None
        runner = executor or executor_for(settings, work=total)
        log.info("extract: %d pages on %s (%d at a time)", total, runner.form, runner.workers)
        try:
            for docs in runner.map(extract_batch, jobs()):
                stored = in_flight.popleft()
                writer.write(stored, docs)
                summary.selected += len(stored)
                progress.advance(len(stored))
                run.counts = summary.as_dict()
        finally:
            if owned:
                runner.close()
            run.counts = summary.as_dict()
            progress.finish()
    refresh_statistics(engine, ["canonical_urls"], changed={"documents": summary.stored,
                                                          "links": summary.links + summary.cross_links})
    return summary


__all__ = ["DECLARED", "DECLARED_CROSS", "LINK_SOURCE", "STAGE", "ExtractSummary", "count_pending",
           "extract_pages"]
