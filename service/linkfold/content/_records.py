"""What the content stages share: a problem with an input record, and a document as a row.

Private to :mod:`linkfold.content`: the page import, the documents load and extraction each report bad
records the same way and write documents the same way, and none of those stages imports another.
"""

from __future__ import annotations

from collections import Counter
from dataclasses import dataclass, field
from datetime import datetime
from typing import Any

from ..canon import Canonical, Canonicaliser
from ..errors import InvalidURL
from ..inputs import LineProblem
from ..store.text import storable
from .extract import Document
from .text import text_hash

#: Problems kept one by one in a summary (for the CLI to show); the rest are only counted.
KEPT_PROBLEMS = 200


#: One input record that was not stored: the one problem shape of every input (linkfold.inputs).
Problem = LineProblem


@dataclass
class Problems:
    counts: Counter[str] = field(default_factory=Counter)
    kept: list[Problem] = field(default_factory=list)

    def add(self, problem: Problem) -> None:
        self.counts[problem.reason] += 1
        if len(self.kept) < KEPT_PROBLEMS:
            self.kept.append(problem)

    @property
    def total(self) -> int:
        return sum(self.counts.values())


def by_class(counts: Counter[str] | dict[str, int]) -> str:
    return (" (" + ", ".join(f"{k} {v:,}" for k, v in sorted(counts.items())) + ")") if counts else ""


def canonical_or_error(canon: Canonicaliser, url: str) -> Canonical | InvalidURL:
    try:
        return canon(url)
    except InvalidURL as exc:
        return exc


def storable_text(doc: Document) -> tuple[str | None, str | None, str | None, str | None]:
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


def document_row(doc: Document, *, canonical_id: int, page_id: int | None, source: str, run_id: int,
                 record_sha256: str | None, at: datetime) -> dict[str, Any]:
    title, text, digest, author = storable_text(doc)
    return {"canonical_id": canonical_id, "page_id": page_id, "title": title, "text": text,
            "text_hash": digest, "word_count": doc.word_count, "author": author,
            "published": doc.published, "published_source": doc.published_source, "language": doc.language,
            "declared_canonical": doc.declared_canonical, "og_url": doc.og_url, "amp_url": doc.amp_url,
            "state": doc.status.value,
            "reason": doc.unusable_reason.value if doc.unusable_reason else None,
            "extractor_version": doc.extractor_version, "source": source, "record_sha256": record_sha256,
            "created_at": at, "run_id": run_id}


__all__ = ["KEPT_PROBLEMS", "Problem", "Problems", "by_class", "canonical_or_error", "document_row",
           "storable_text"]
