"""Extraction of a batch of pages as one pure task, for the executor.

Extraction is the heaviest pure work of a nightly run (about nine tenths of it on real pages). A worker
gets the pages (bytes and headers) by value and returns their documents; nothing in it reads or writes
the database, so the coordinating process stores the results exactly as if it had extracted them itself.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field, replace
from datetime import datetime

from .extract import Document, extract_document, quiet_extractor_logs
from .mediatype import is_html
from .pages import Page
from .usable import DEFAULT_RULES, Unusable, UsableTextRules


@dataclass(frozen=True)
class ExtractJob:
    """Pages to extract and the rules to judge their text by (``now`` pins the clock for reruns)."""

    pages: Sequence[Page]
    rules: UsableTextRules = DEFAULT_RULES
    min_words: int | None = None
    now: datetime | None = None
    fetched_at: Sequence[datetime | None] = field(default_factory=tuple)


def extract_page(page: Page, *, rules: UsableTextRules = DEFAULT_RULES, min_words: int | None = None,
                 fetched_at: datetime | None = None, now: datetime | None = None) -> Document:
    """One stored or imported page's document, as the extraction stage stores it."""
    doc = extract_document(page, fetched_at=fetched_at, min_words=min_words, rules=rules, now=now)
    # The fetch stage keeps no body of a response that is not HTML (nothing would read it), so the core
    # sees an empty body; the stored Content-Type still says why there is no text.
    if (doc.unusable_reason is Unusable.EMPTY and not page.body and page.content_type
            and not is_html(page.content_type, b"")):
        doc = replace(doc, unusable_reason=Unusable.NOT_HTML)
    return doc


def extract_batch(job: ExtractJob) -> list[Document]:
    """One document per page, in order; a page without usable text gives a document that says why."""
    # A worker process starts with the extraction library's own log handlers: route them as the
    # coordinating process does, so a worker never prints.
    quiet_extractor_logs()
    times = list(job.fetched_at) or [None] * len(job.pages)
    return [extract_page(page, rules=job.rules, min_words=job.min_words, fetched_at=when, now=job.now)
            for page, when in zip(job.pages, times, strict=True)]
