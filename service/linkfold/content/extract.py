"""From a stored page to a document: main text, title, author, date, language, declared URLs.

The main text comes from trafilatura with precision favoured and comments excluded, so reader comments,
navigation and related-link lists stay out of the text that duplicate detection compares. Everything
trafilatura does not report — the date's source, the declared canonical, paywall and consent signals, the
declared language — is read from the same parsed tree by our own code. A page that yields no usable
text still yields a :class:`Document`, with ``status`` ``no_text`` and the reason, so nothing is dropped
silently.
"""

from __future__ import annotations

import logging
import re
from dataclasses import dataclass, field, replace
from datetime import UTC, date, datetime, timedelta
from typing import Any

import lxml.html
from lxml.etree import ParserError

from .canonical_link import read_declared_urls
from .charset import decode_with, sniff_encoding
from .mediatype import is_html
from .page_meta import read_page_meta
from .pages import Page
from .text import CONTENT_VERSION, count_words, normalise_text, text_hash
from .usable import DEFAULT_RULES, Status, Unusable, UsableTextRules, classify

log = logging.getLogger("linkfold")

# UTC offsets in civil use run from -12:00 to +14:00 (tz database; from memory). A bare date is therefore
# possible at a given instant when that date has begun somewhere on Earth: its midnight minus 14 hours.
_EARLIEST_OFFSET = timedelta(hours=14)

# Options of every trafilatura call, part of what extractor_version stands for. Tables are left out:
# old layouts put the whole page, navigation included, in one table, and data tables add little for
# duplicate detection. Comments are left out and precision favoured (see the PITFALLS notes).
EXTRACTION_OPTIONS: dict[str, Any] = {
    "favor_precision": True,
    "include_comments": False,
    "include_tables": False,
    "include_images": False,
    "include_links": False,
    "include_formatting": False,
    "deduplicate": False,
    "with_metadata": True,
}

# The same parser settings trafilatura uses for its own trees, so that handing it ours changes nothing.
_PARSER = lxml.html.HTMLParser(collect_ids=False, default_doctype=False, encoding="utf-8",
                               remove_comments=True, remove_pis=True)

# Dates in URL paths: /2026/09/10/, /2026-09-10-, /20260910/ (a separator used twice or none at all).
_URL_DATE = re.compile(r"(?<!\d)((?:19|20)\d{2})([/_-]?)(0[1-9]|1[0-2])\2(0[1-9]|[12]\d|3[01])(?!\d)")


def extractor_version() -> str:
    """``trafilatura <version>/content <CONTENT_VERSION>``: what a document's text depends on."""
    import trafilatura

    return f"trafilatura {trafilatura.__version__}/content {CONTENT_VERSION}"


@dataclass(frozen=True)
class Document:
    """What extraction (or a loaded file) says about one page.

    ``text`` is normalised (:func:`~linkfold.content.text.normalise_text`); ``text_hash`` is the hex
    SHA-256 of its UTF-8 bytes, set only for usable documents (only they take part in duplicate
    detection). ``published`` is UTC; ``published_source`` is ``json-ld``, ``meta``, ``microdata``,
    ``url``, ``guessed`` (trafilatura's date search over the page), or ``loaded`` for documents loaded
    from a file. ``declared_canonical`` and ``og_url`` are absolute URLs as declared, not canonicalised.
    ``notes`` say what was seen and set aside (a date after the fetch time, conflicting canonicals…).
    """

    url: str
    title: str | None
    text: str
    text_hash: str | None
    word_count: int
    author: str | None
    published: datetime | None
    published_source: str | None
    language: str | None
    declared_canonical: str | None
    og_url: str | None
    amp_url: str | None
    is_amp: bool
    status: Status
    unusable_reason: Unusable | None
    extractor_version: str
    encoding: str | None = None
    notes: tuple[str, ...] = field(default_factory=tuple)

    @property
    def usable(self) -> bool:
        return self.status is Status.USABLE


def _unusable(page: Page, reason: Unusable, version: str, notes: list[str],
              encoding: str | None = None) -> Document:
    return Document(url=page.final_url, title=None, text="", text_hash=None, word_count=0, author=None,
                    published=None, published_source=None, language=None, declared_canonical=None,
                    og_url=None, amp_url=None, is_amp=False, status=Status.NO_TEXT, unusable_reason=reason,
                    extractor_version=version, encoding=encoding, notes=tuple(notes))


def possible_at(value: datetime, date_only: bool, reference: datetime) -> bool:
    """Whether a publication time ``value`` can be true of a page fetched at ``reference`` (UTC)."""
    if date_only:
        return value - _EARLIEST_OFFSET <= reference
    return value <= reference


def url_date(url: str) -> date | None:
    """The date written in a URL's path (``/2026/09/10/``, ``/20260910/``…), if any and valid."""
    path = url.split("?", 1)[0].split("#", 1)[0]
    path = path.split("://", 1)[-1]
    path = path[path.find("/"):] if "/" in path else ""
    for m in _URL_DATE.finditer(path):
        try:
            return date(int(m.group(1)), int(m.group(3)), int(m.group(4)))
        except ValueError:
            continue
    return None


def _choose_date(candidates: list[tuple[datetime, bool, str, str]], reference: datetime,
                 notes: list[str]) -> tuple[datetime | None, str | None]:
    for value, date_only, source, raw in candidates:
        if possible_at(value, date_only, reference):
            return value, source
        notes.append(f"date {raw} ({source}) is after the fetch time {reference.isoformat()}; ignored")
    return None, None


def parse_page(text: str) -> Any:
    """An lxml tree of decoded HTML (raises ``lxml.etree.ParserError`` when there is no document)."""
    return lxml.html.document_fromstring(text.encode("utf-8", errors="surrogatepass"), parser=_PARSER)


def extract_document(page: Page, *, fetched_at: datetime | None = None, min_words: int | None = None,
                     rules: UsableTextRules = DEFAULT_RULES, now: datetime | None = None) -> Document:
    """Extract one page. Never raises for a bad page: the result says ``no_text`` and why.

    ``fetched_at`` overrides the page's own fetch time as the latest believable publication time; without
    either, ``now`` (default: the current time) is used. ``min_words`` overrides ``rules.min_words``.
    """
    if min_words is not None:
        rules = replace(rules, min_words=min_words, short_words=max(rules.short_words, min_words))
    version = extractor_version()
    notes: list[str] = []
    reference = fetched_at or page.fetched_at or now or datetime.now(UTC)
    if reference.tzinfo is None:
        reference = reference.replace(tzinfo=UTC)

    if not page.body.strip():
        return _unusable(page, Unusable.EMPTY, version, ["the body is empty"])
    if not is_html(page.content_type, page.body):
        return _unusable(page, Unusable.NOT_HTML, version, [f"content type {page.content_type!r}"])
    choice = sniff_encoding(page.body, page.content_type)
    if choice.name == "replacement":
        return _unusable(page, Unusable.BROKEN, version,
                         [f"declared charset is one browsers refuse to decode ({choice.source})"],
                         encoding=choice.name)
    html = decode_with(choice.name, page.body)
    if not html.strip():
        return _unusable(page, Unusable.EMPTY, version, ["no text after decoding"], encoding=choice.name)
    try:
        tree = parse_page(html)
    except (ParserError, ValueError) as exc:
        return _unusable(page, Unusable.BROKEN, version, [f"HTML parser: {exc}"], encoding=choice.name)

    declared = read_declared_urls(tree, page.final_url, dict(page.headers))
    meta = read_page_meta(tree, dict(page.headers))
    notes.extend(declared.notes)
    notes.extend(meta.notes)

    result, failed = _run_trafilatura(tree, page.final_url, notes)
    text = normalise_text(result.text or "") if result is not None else ""
    words = count_words(text)

    candidates = [(c.value, c.date_only, c.source, c.raw) for c in meta.dates]
    guessed = getattr(result, "date", None) if result is not None else None
    if guessed:
        try:
            day = date.fromisoformat(guessed[:10])
        except ValueError:
            notes.append(f"unreadable guessed date {guessed!r}")
        else:
            source = "url" if url_date(page.final_url) == day else "guessed"
            candidates.append((datetime(day.year, day.month, day.day, tzinfo=UTC), True, source, guessed))
    published, published_source = _choose_date(candidates, reference, notes)

    reason = classify(text=text, word_count=words, tree=tree, not_free=meta.not_free, video=meta.video,
                      rules=rules)
    if reason is not None and failed:
        reason = Unusable.BROKEN  # the library gave up on this page: say so rather than "empty"
    title = (getattr(result, "title", None) if result is not None else None) or meta.meta.get("og:title") \
        or meta.title
    author = getattr(result, "author", None) if result is not None else None
    return Document(
        url=page.final_url,
        title=normalise_text(title).replace("\n", " ") if title else None,
        text=text,
        text_hash=text_hash(text) if reason is None else None,
        word_count=words,
        author=author or None,
        published=published,
        published_source=published_source,
        language=meta.language,
        declared_canonical=declared.canonical,
        og_url=declared.og_url,
        amp_url=declared.amp_url,
        is_amp=declared.is_amp,
        status=Status.USABLE if reason is None else Status.NO_TEXT,
        unusable_reason=reason,
        extractor_version=version,
        encoding=choice.name,
        notes=tuple(notes),
    )


#: The loggers of the extractor and the libraries it calls.
EXTRACTOR_LOGGERS = ("trafilatura", "htmldate", "courlan", "justext")


class _AsDebug(logging.Handler):
    """Passes the extractor's records on to ``linkfold.extractor`` at debug level.

    trafilatura reports every page it finds no article in ("discarding data", "empty HTML tree") at warning
    or error level. For us that is an outcome, not a problem: the page gets its ``no_text`` reason, counted
    in the stage summary, so its messages belong at debug level (``-vv``), never in a cron job's mail.
    """

    def emit(self, record: logging.LogRecord) -> None:
        if _EXTRACTOR_LOG.isEnabledFor(logging.DEBUG):
            _EXTRACTOR_LOG.debug("%s: %s", record.name, record.getMessage())


_EXTRACTOR_LOG = logging.getLogger("linkfold.extractor")
_AS_DEBUG = _AsDebug()


def quiet_extractor_logs() -> None:
    """Route the extractor's log records through :class:`_AsDebug` (idempotent; done at first use)."""
    for name in EXTRACTOR_LOGGERS:
        logger = logging.getLogger(name)
        if _AS_DEBUG not in logger.handlers:
            logger.addHandler(_AS_DEBUG)
        logger.propagate = False


def _run_trafilatura(tree: Any, url: str, notes: list[str]) -> tuple[Any, bool]:
    """(trafilatura's document or None, whether it failed with an exception)."""
    import trafilatura

    quiet_extractor_logs()

    # No max_date: given one, the date search turns a date after it into the first day of its month
    # (2026-09-10 becomes 2026-09-01), a guess that passes any later check. Its default upper bound is
    # today; our own rule against the fetch time (possible_at) is applied to what it returns.
    params = {"original_date": True, "extensive_search": True}
    try:
        # The URL must be passed: without it metadata extraction can discard a document whose own URL it
        # cannot find in the markup (PITFALLS.md, trafilatura 2.x).
        doc = trafilatura.bare_extraction(tree, url=url, date_extraction_params=params, **EXTRACTION_OPTIONS)
    except Exception as exc:  # a library failure on one hostile page must not stop a batch
        log.debug("trafilatura failed on %s", url, exc_info=True)
        notes.append(f"text extraction failed: {type(exc).__name__}: {exc}")
        return None, True
    return doc, False
