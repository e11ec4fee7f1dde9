"""Documents whose text was extracted elsewhere: the ``documents load`` JSON-lines format.

Other projects script against this format, so its name and fields are kept stable:

* ``url`` (required): the document's address, an absolute http(s) URL;
* ``title`` (required, may be empty) and ``text`` (required): strings;
* ``published`` (optional): a time by the one rule of every input (``linkfold.inputs.times``: RFC 3339 /
  ISO 8601 text or epoch seconds/milliseconds; no offset means UTC; a bare date is midnight UTC),
  converted to UTC; a time after the moment of loading is refused (``bad_time``);
* ``author`` (optional): a string, or a list of strings joined with "; ";
* ``language`` (optional): a BCP 47 tag (``en``, ``en-GB``) or POSIX locale (``en_GB``); its primary
  language subtag is kept.

Other fields are ignored. Text is normalised exactly as extracted text is, so a loaded document and an
extracted one with the same text get the same ``text_hash``, and the same usable-text rules apply (with
no page to look at, only the text's length and wording count).
"""

from __future__ import annotations

from collections.abc import Iterator
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

from ..inputs import BadTime, DumpFormat, LineProblem, Reason, RecordProblem, parse_time, read_records
from .extract import Document
from .page_meta import primary_language
from .pages import ReadTally, check_page_url
from .text import CONTENT_VERSION, count_words, normalise_text, text_hash
from .usable import DEFAULT_RULES, Status, UsableTextRules, classify

DOCUMENT_FIELDS = ("url", "title", "text", "published", "author", "language")

#: A bad line of a documents file: the one problem shape of every input (file, line, reason, message).
DocumentProblem = LineProblem

#: The largest document line read, in bytes (a JSON-escaped text of 10 MB is far beyond any article).
MAX_LINE_BYTES = 64 * 1024 * 1024

LOADED_VERSION = f"loaded/content {CONTENT_VERSION}"


def _text_field(obj: dict[str, Any], name: str, *, required: bool) -> str | None:
    if name not in obj or obj[name] is None:
        if required:
            raise RecordProblem("missing_field", f"no {name!r}")
        return None
    value = obj[name]
    if not isinstance(value, str):
        raise RecordProblem("bad_field", f"{name!r} must be a string, not {type(value).__name__}")
    return value


def document_from_record(obj: dict[str, Any], *, now: datetime | None = None,
                         rules: UsableTextRules = DEFAULT_RULES) -> Document:
    """Validate one loaded record and turn it into a :class:`Document`; raises :class:`RecordProblem`."""
    url = _text_field(obj, "url", required=True)
    why = check_page_url(url)
    if why:
        raise RecordProblem("bad_url", why)
    assert url is not None
    title = _text_field(obj, "title", required=True)
    raw_text = _text_field(obj, "text", required=True)
    assert title is not None and raw_text is not None

    published = None
    raw_published = obj.get("published")
    if raw_published is not None and not (isinstance(raw_published, str) and not raw_published.strip()):
        try:
            published = parse_time(raw_published)
        except BadTime as exc:
            raise RecordProblem(Reason.BAD_TIME, f"published: {exc}") from None
        moment = now or datetime.now(UTC)
        if published > moment:
            # The value is not repeated (a problem keeps no field of a parsed record).
            raise RecordProblem(Reason.BAD_TIME, "published lies after the moment of loading")

    author_in = obj.get("author")
    if author_in is None or isinstance(author_in, str):
        author = (author_in or "").strip() or None
    elif isinstance(author_in, list) and all(isinstance(a, str) for a in author_in):
        author = "; ".join(a.strip() for a in author_in if a.strip()) or None
    else:
        raise RecordProblem("bad_field", "'author' must be a string or a list of strings")

    language = None
    raw_language = _text_field(obj, "language", required=False)
    if raw_language is not None and raw_language.strip():
        language = primary_language(raw_language)
        if language is None:
            raise RecordProblem("bad_field", f"'language' {raw_language!r} is not a BCP 47 tag")

    text = normalise_text(raw_text)
    words = count_words(text)
    reason = classify(text=text, word_count=words, tree=None, not_free=False, video=False, rules=rules)
    clean_title = normalise_text(title).replace("\n", " ") or None
    return Document(
        url=url.strip(), title=clean_title, text=text, text_hash=text_hash(text) if reason is None else None,
        word_count=words, author=author, published=published,
        published_source="loaded" if published else None, language=language, declared_canonical=None,
        og_url=None, amp_url=None, is_amp=False,
        status=Status.USABLE if reason is None else Status.NO_TEXT, unusable_reason=reason,
        extractor_version=LOADED_VERSION,
    )


def read_documents(path: str | Path, *, tally: ReadTally | None = None, now: datetime | None = None,
                   rules: UsableTextRules = DEFAULT_RULES) -> Iterator[Document | LineProblem]:
    """Documents from a JSON-lines file (gzip'd or not), with a numbered problem per bad line.

    ``tally.pages`` counts the documents read. Raises :class:`~linkfold.errors.InputError` when the file
    cannot be read at all or is not JSON lines.
    """
    path = Path(path)
    tally = tally if tally is not None else ReadTally()
    moment = now or datetime.now(UTC)
    for item in read_records(path, DumpFormat.JSONL, max_line_bytes=MAX_LINE_BYTES):
        if isinstance(item, LineProblem):
            tally.problems[item.reason] += 1
            yield item
            continue
        try:
            doc = document_from_record(item.values, now=moment, rules=rules)
        except RecordProblem as bad:
            tally.problems[bad.reason] += 1
            yield bad.at(str(path), item.line)
            continue
        tally.pages += 1
        yield doc
