"""Pages: the stored form of one fetched or imported HTML response, and the readers that produce them.

Three input formats are read (see docs/content.md for each in full):

* **WARC** files (gzip'd or not): ``response`` records of http(s) URLs and ``resource`` records;
* a **directory of HTML files** described by a tab-separated manifest (our format, ``pages.tsv``);
* **JSONL** with one ``{"url": …, "html": …}`` object per line (gzip'd or not).

The manifest and JSONL are read through the shared input readers (``linkfold.inputs``: opener, lines,
reason codes, the one time rule); WARC through warcio. Every reader is a generator of :class:`Page` and
:class:`PageProblem` values. A problem with one record
(bad JSON, missing field, body over the size cap…) is yielded and reading goes on; a problem with the
file as a whole (missing, not the format it claims, truncated archive) raises :class:`InputError` after
everything before it has been yielded, so what a caller already stored stays stored. Records that are
fine but are not pages for us (images, redirects, WARC request records) are counted in a
:class:`ReadTally`, not reported one by one.

Only the response headers listed in :data:`KEPT_HEADERS` are kept: cookies and the rest can identify the
person whose browsing an archive came from, and extraction does not need them.
"""

from __future__ import annotations

import logging
from collections import Counter
from collections.abc import Iterator, Mapping
from dataclasses import dataclass, field, replace
from datetime import datetime
from pathlib import Path, PurePosixPath
from typing import IO, Any

import ada_url

from ..errors import InputError, MissingColumnError
from ..inputs import (
    GZIP_ERRORS,
    BadTime,
    DumpFormat,
    LineProblem,
    Reason,
    RecordProblem,
    open_input,
    parse_time,
    read_records,
)
from .mediatype import is_html, parse_content_type

log = logging.getLogger("linkfold")

# What extraction and the later stages use: the type and charset, the declared language, the validators
# for re-fetching, and Link (RFC 8288), which can carry rel="canonical" (RFC 6596 §3).
KEPT_HEADERS = ("content-type", "content-language", "last-modified", "etag", "link")

DEFAULT_MAX_BYTES = 5_000_000  # the same default as the http_max_bytes setting

MANIFEST_NAME = "pages.tsv"
MANIFEST_COLUMNS = ("file", "url", "final_url", "status", "fetched_at", "content_type")
_REQUIRED_MANIFEST = ("file", "url")


@dataclass(frozen=True)
class Page:
    """One HTML response, fetched or imported.

    ``url`` is the URL the page was asked for, exactly as given; ``final_url`` the one it was served from
    (after redirects; the same when unknown). ``status`` is the HTTP status or None when the input does
    not say (a bare file). ``fetched_at`` is UTC or None. ``source`` says where the page came from:
    ``warc:<file>#<offset>``, ``dir:<manifest>:<line>``, ``jsonl:<file>:<line>`` or, for fetched pages,
    whatever the fetcher records.
    """

    url: str
    final_url: str
    status: int | None
    headers: Mapping[str, str]
    body: bytes
    fetched_at: datetime | None
    source: str

    @property
    def content_type(self) -> str | None:
        return self.headers.get("content-type")


#: A record that could not be read as a page: the one problem shape of every input (file, line, reason,
#: message; ``line`` is the 1-based line of a manifest or JSONL, a WARC record's number). Reasons: those
#: of the shared readers (``bad_json``, ``invalid_utf8``, ``line_too_long``, ``field_count``,
#: ``missing_column``, ``bad_time``; docs/ingest.md) and the page's own: ``missing_field``, ``bad_field``,
#: ``bad_url``, ``bad_status``, ``too_large``, ``bad_body``, ``missing_file``, ``outside_dir``.
PageProblem = LineProblem


@dataclass
class ReadTally:
    """Counts of what readers saw; pass one in to get them (the same tally may span several files)."""

    pages: int = 0
    problems: Counter[str] = field(default_factory=Counter)
    skipped: Counter[str] = field(default_factory=Counter)

    def summary(self) -> dict[str, Any]:
        return {"pages": self.pages, "problems": dict(sorted(self.problems.items())),
                "skipped": dict(sorted(self.skipped.items()))}


def keep_headers(headers: Mapping[str, str] | list[tuple[str, str]]) -> dict[str, str]:
    """The headers worth keeping, names lower-cased; repeated ones joined with ", " (RFC 9110 §5.3)."""
    items = headers.items() if isinstance(headers, Mapping) else headers
    kept: dict[str, str] = {}
    for name, value in items:
        key = name.strip().lower()
        if key in KEPT_HEADERS:
            kept[key] = f"{kept[key]}, {value.strip()}" if key in kept else value.strip()
    return kept


def check_page_url(url: Any) -> str | None:
    """Why ``url`` cannot be a page URL (an absolute http(s) URL by the WHATWG parser), or None."""
    if not isinstance(url, str) or not url.strip():
        return "empty URL"
    try:
        parsed = ada_url.URL(url.strip())
    except ValueError:
        return f"not a URL: {url[:200]!r}"
    if parsed.protocol not in ("http:", "https:"):
        return f"not an http(s) URL: {url[:200]!r}"
    return None


_Reject = RecordProblem


class _Skip(Exception):
    def __init__(self, reason: str) -> None:
        super().__init__(reason)
        self.reason = reason


def _status(value: Any) -> int | None:
    if value is None or value == "":
        return None
    try:
        status = int(value)
    except (TypeError, ValueError):
        raise _Reject("bad_status", f"not an HTTP status: {value!r}") from None
    if not 100 <= status <= 599:
        raise _Reject("bad_status", f"not an HTTP status: {value!r}")
    return status


def _fetched_at(value: Any) -> datetime | None:
    if value is None or (isinstance(value, str) and not value.strip()):
        return None
    try:
        return parse_time(value)  # the one time rule of every input (linkfold.inputs.times)
    except BadTime as exc:
        raise _Reject(Reason.BAD_TIME, f"fetched_at: {exc}") from None


def _finish(*, url: Any, final_url: Any, status: Any, headers: dict[str, str], body: bytes,
            fetched_at: Any, source: str, max_bytes: int) -> Page:
    """The checks every reader shares, in the order that gives the most useful reason."""
    why = check_page_url(url)
    if why:
        raise _Reject("bad_url", why)
    if final_url is None or final_url == "":
        final_url = url
    else:
        why = check_page_url(final_url)
        if why:
            raise _Reject("bad_url", f"final_url: {why}")
    code = _status(status)
    when = _fetched_at(fetched_at)
    if len(body) > max_bytes:
        raise _Reject("too_large", f"body over the cap of {max_bytes:,} bytes")
    if code is not None and not 200 <= code <= 299:
        raise _Skip("http_status")
    if not is_html(headers.get("content-type"), body):
        raise _Skip("not_html")
    return Page(url=url.strip(), final_url=final_url.strip(), status=code, headers=headers, body=body,
                fetched_at=when, source=source)


def _read_capped(stream: IO[bytes], max_bytes: int) -> bytes:
    # One byte past the cap is enough to know the body is too large, without holding all of it.
    return stream.read(max_bytes + 1)


# --- WARC ---------------------------------------------------------------------------------------------

def read_warc(path: str | Path, *, max_bytes: int = DEFAULT_MAX_BYTES,
              tally: ReadTally | None = None) -> Iterator[Page | PageProblem]:
    """Pages from the ``response`` and ``resource`` records of a WARC file (gzip'd or not).

    ``url`` and ``final_url`` are the record's WARC-Target-URI, ``fetched_at`` its WARC-Date, headers
    and status come from the HTTP response warcio parses (``resource`` records have no status; their
    WARC Content-Type is the page's). Transfer and content encodings are undone by warcio.
    """
    # Imported here so that the pure parts of the package do not pay for warcio at import time.
    from warcio.archiveiterator import ArchiveIterator
    from warcio.exceptions import ArchiveLoadFailed

    path = Path(path)
    tally = tally if tally is not None else ReadTally()
    try:
        fh = path.open("rb")
    except FileNotFoundError:
        raise InputError(f"{path}: no such file") from None
    except OSError as exc:
        raise InputError(f"{path}: cannot open: {exc.strerror or exc}") from None
    number = 0
    offset = 0
    with fh:
        records = ArchiveIterator(fh)
        try:
            for record in records:
                number += 1
                offset = records.offset
                source = f"warc:{path}#{offset}"
                if not str(record.format).startswith("warc"):
                    # warcio also reads the older ARC format, and takes any line of text for an ARC
                    # header; only WARC is an input here.
                    raise InputError(f"{path}: record {number} (offset {offset}) is not a WARC record",
                                     hint="expected a file starting with WARC/1.0 or WARC/1.1")
                if not record.rec_type:
                    raise InputError(f"{path}: record {number} (offset {offset}) has no WARC-Type: "
                                     "the archive ends or breaks inside a record header")
                outcome: Page | _Skip | _Reject
                try:
                    outcome = _warc_page(record, source=source, max_bytes=max_bytes)
                except (_Skip, _Reject) as exc:
                    outcome = exc
                # warcio hands out a cut-off last record as if it were whole; the block's declared
                # Content-Length (WARC 1.1 §5.2) tells. Checked before anything of it is passed on.
                missing = _drain(record)
                if missing:
                    raise InputError(f"{path}: archive ends inside record {number} (offset {offset}): "
                                     f"{missing:,} bytes of its block are missing")
                if isinstance(outcome, _Skip):
                    tally.skipped[outcome.reason] += 1
                elif isinstance(outcome, _Reject):
                    tally.problems[outcome.reason] += 1
                    yield LineProblem(str(path), number, outcome.reason, outcome.message)
                else:
                    tally.pages += 1
                    yield outcome
            # A gzip member cut short yields no record and no error from warcio: whatever lies between
            # the end of the last whole record and the end of the file was not read.
            end = records.offset
            size = path.stat().st_size
            if end < size and fh.tell() >= size:
                raise InputError(f"{path}: {size - end:,} bytes after offset {end} are not a whole "
                                 "record (the archive is truncated or its compression is broken)")
        except ArchiveLoadFailed as exc:
            where = f"record {number + 1}" if number else "the start"
            raise InputError(f"{path}: not a readable WARC at {where} (after offset {offset}): {exc}") from None
        except (*GZIP_ERRORS, OSError) as exc:
            raise InputError(f"{path}: archive ends or breaks inside record {number} "
                             f"(offset {offset}): {exc}") from None


def _drain(record: Any) -> int:
    """Read the rest of a record's block; the number of bytes its Content-Length promised but not given."""
    stream = record.raw_stream
    while stream.read(1 << 16):
        pass
    return max(int(getattr(stream, "limit", 0) or 0), 0)


def _warc_page(record: Any, *, source: str, max_bytes: int) -> Page:
    rec_type = record.rec_type
    if rec_type not in ("response", "resource"):
        raise _Skip(f"warc_{rec_type}")
    target = record.rec_headers.get_header("WARC-Target-URI")
    if not target:
        raise _Reject("missing_field", "record has no WARC-Target-URI")
    # Some writers wrap the target URI in angle brackets, the way WARC-Record-ID is written; the brackets
    # are not part of the URI.
    target = target.strip()
    if target.startswith("<") and target.endswith(">"):
        target = target[1:-1]
    if not target.lower().startswith(("http:", "https:")):
        raise _Skip("not_http")  # dns:, whois:, urn: … records describe no page
    warc_date = record.rec_headers.get_header("WARC-Date")
    if rec_type == "response":
        if record.http_headers is None:
            raise _Reject("bad_body", "response record without an HTTP response head")
        status: Any = record.http_headers.get_statuscode()
        headers = keep_headers(record.http_headers.headers)
    else:
        status = None
        ctype = record.rec_headers.get_header("Content-Type")
        headers = keep_headers({"content-type": ctype} if ctype else {})
    if status and not str(status).isdigit():
        raise _Reject("bad_status", f"not an HTTP status: {status!r}")
    try:
        body = _read_capped(record.content_stream(), max_bytes)
    except (*GZIP_ERRORS, OSError, ValueError) as exc:
        raise _Reject("bad_body", f"cannot decode the body: {exc}") from None
    return _finish(url=target, final_url=target, status=status, headers=headers, body=body,
                   fetched_at=warc_date, source=source, max_bytes=max_bytes)


# --- JSONL --------------------------------------------------------------------------------------------

JSONL_FIELDS = ("url", "html", "final_url", "status", "fetched_at", "headers")


def read_page_jsonl(path: str | Path, *, max_bytes: int = DEFAULT_MAX_BYTES,
                    tally: ReadTally | None = None) -> Iterator[Page | PageProblem]:
    """Pages from JSON lines: ``url`` and ``html`` required; ``final_url``, ``status``, ``fetched_at``
    (ISO 8601) and ``headers`` (an object of strings) optional. Other fields are ignored.

    ``html`` is text that was already decoded, so the page's bytes are its UTF-8 encoding and its
    Content-Type says ``charset=utf-8`` whatever the original header or ``<meta charset>`` said.
    """
    path = Path(path)
    tally = tally if tally is not None else ReadTally()
    # A JSON-escaped body can be up to six times its size ("\\u00e9").
    for item in read_records(path, DumpFormat.JSONL, max_line_bytes=6 * max_bytes + 65536):
        if isinstance(item, LineProblem):
            tally.problems[item.reason] += 1
            yield item
            continue
        number = item.line
        source = f"jsonl:{path}:{number}"
        try:
            page = _jsonl_page(item.values, source=source, max_bytes=max_bytes)
        except _Skip as skip:
            tally.skipped[skip.reason] += 1
            continue
        except _Reject as bad:
            tally.problems[bad.reason] += 1
            yield bad.at(str(path), number)
            continue
        tally.pages += 1
        yield page


def _jsonl_page(obj: dict[str, Any], *, source: str, max_bytes: int) -> Page:
    for name in ("url", "html"):
        if name not in obj or obj[name] is None:
            raise _Reject("missing_field", f"no {name!r}")
    html = obj["html"]
    if not isinstance(html, str):
        raise _Reject("bad_field", f"'html' must be a string, not {type(html).__name__}")
    headers_in = obj.get("headers") or {}
    if not isinstance(headers_in, dict) or not all(isinstance(v, str) for v in headers_in.values()):
        raise _Reject("bad_field", "'headers' must be an object of strings")
    headers = keep_headers(headers_in)
    media = parse_content_type(headers.get("content-type"))
    essence = media.essence if media else "text/html"
    headers["content-type"] = f"{essence}; charset=utf-8"
    body = html.encode("utf-8", errors="surrogatepass")
    return _finish(url=obj["url"], final_url=obj.get("final_url"), status=obj.get("status"),
                   headers=headers, body=body, fetched_at=obj.get("fetched_at"), source=source,
                   max_bytes=max_bytes)


# --- directory + manifest -----------------------------------------------------------------------------

_SUFFIX_TYPES = {".html": "text/html", ".htm": "text/html", ".xhtml": "application/xhtml+xml"}


def read_page_dir(path: str | Path, *, max_bytes: int = DEFAULT_MAX_BYTES,
                  tally: ReadTally | None = None) -> Iterator[Page | PageProblem]:
    """Pages from HTML files listed in a manifest.

    ``path`` is the manifest itself or a directory holding ``pages.tsv``. The manifest is UTF-8,
    tab-separated, with a header line naming its columns: ``file`` and ``url`` required, ``final_url``,
    ``status``, ``fetched_at`` and ``content_type`` optional; blank lines and lines starting with ``#``
    are ignored. ``file`` is relative to the manifest's directory and may not leave it; a file may be
    gzip'd. Without ``content_type`` the file's bytes decide (``.html``/``.htm`` mean text/html with the
    charset sniffed from the page).
    """
    path = Path(path)
    manifest = path / MANIFEST_NAME if path.is_dir() else path
    if not manifest.is_file():
        raise InputError(f"{manifest}: no such manifest",
                         hint=f"a page directory needs a {MANIFEST_NAME} listing file<TAB>url")
    base = manifest.parent
    tally = tally if tally is not None else ReadTally()
    reader = read_records(manifest, DumpFormat.TSV, comments=True)
    try:
        reader.check()
        names = _manifest_header(reader.columns, manifest, reader.lines_read)
    except BaseException:
        reader.close()  # iterating closes it; a refused header must too
        raise
    for item in reader:
        if isinstance(item, LineProblem):
            tally.problems[item.reason] += 1
            yield replace(item, file=str(path))  # every problem names the input as given
            continue
        number = item.line
        source = f"dir:{manifest}:{number}"
        try:
            page = _dir_page(item.values, names, base=base, source=source, max_bytes=max_bytes)
        except _Skip as skip:
            tally.skipped[skip.reason] += 1
            continue
        except _Reject as bad:
            tally.problems[bad.reason] += 1
            yield bad.at(str(path), number)
            continue
        tally.pages += 1
        yield page


def _manifest_header(cells: list[str], manifest: Path, number: int) -> dict[str, str]:
    """Our name of each column (its header cell, trimmed, in lower case) -> the cell as written."""
    names = tuple(c.strip().lower() for c in cells)
    unknown = [n for n in names if n not in MANIFEST_COLUMNS]
    if unknown:
        raise InputError(f"{manifest}:{number}: unknown manifest column(s): {', '.join(unknown)}",
                         hint=f"columns are {', '.join(MANIFEST_COLUMNS)}")
    dupes = sorted({n for n in names if names.count(n) > 1})
    if dupes:
        raise InputError(f"{manifest}:{number}: repeated manifest column(s): {', '.join(dupes)}")
    missing = [n for n in _REQUIRED_MANIFEST if n not in names]
    if missing:
        raise MissingColumnError(f"{manifest}:{number}: manifest header lacks {', '.join(missing)}",
                                 hint="first line: file<TAB>url")
    return dict(zip(names, cells, strict=True))


def _dir_page(values: dict[str, str], names: dict[str, str], *, base: Path, source: str,
              max_bytes: int) -> Page:
    # The shared reader refused a line of the wrong width already (field_count / missing_column).
    row = {name: values[cell].strip() for name, cell in names.items()}
    name = row["file"]
    if not name:
        raise _Reject("missing_field", "no file")
    rel = PurePosixPath(name.replace("\\", "/"))
    if rel.is_absolute() or ".." in rel.parts or (rel.parts and ":" in rel.parts[0]):
        raise _Reject("outside_dir", f"{name!r} is not a path inside the manifest's directory")
    file = base.joinpath(*rel.parts)
    try:
        with open_input(file, text=False) as fh:
            body = _read_capped(fh, max_bytes)
    except InputError:
        raise _Reject("missing_file", f"{name}: no such file or not readable") from None
    except (*GZIP_ERRORS, OSError) as exc:
        raise _Reject("bad_body", f"{name}: {exc}") from None
    ctype = row.get("content_type") or None
    if ctype is None:
        stem = file.name[:-3] if file.name.endswith(".gz") else file.name
        ctype = _SUFFIX_TYPES.get(Path(stem).suffix.lower())
    if ctype is not None and parse_content_type(ctype) is None:
        raise _Reject("bad_field", f"content_type {ctype!r} is not a media type")
    headers = {"content-type": ctype} if ctype else {}
    return _finish(url=row["url"], final_url=row.get("final_url"), status=row.get("status"),
                   headers=headers, body=body, fetched_at=row.get("fetched_at"), source=source,
                   max_bytes=max_bytes)


# --- any of them --------------------------------------------------------------------------------------

def detect_page_format(path: str | Path) -> str:
    """``warc``, ``jsonl`` or ``dir`` for an input path, by what it holds rather than by its name."""
    path = Path(path)
    if path.is_dir():
        return "dir"
    if not path.exists():
        raise InputError(f"{path}: no such file or directory")
    with open_input(path, text=False) as fh:
        try:
            head = fh.read(512)
        except GZIP_ERRORS as exc:
            raise InputError(f"{path}: compressed data is broken: {exc}") from None
    if head.startswith(b"WARC/"):
        return "warc"
    stripped = head.lstrip(b"\xef\xbb\xbf \t\r\n")
    if stripped.startswith(b"{"):
        return "jsonl"
    lines = [ln for ln in stripped.split(b"\n") if ln.strip() and not ln.lstrip().startswith(b"#")]
    first = lines[0].lower() if lines else b""
    if b"\t" in first and b"file" in first and b"url" in first:
        return "dir"
    raise InputError(f"{path}: neither a WARC file, JSON lines, nor a {MANIFEST_NAME} manifest",
                     hint="import pages from .warc(.gz), .jsonl(.gz) or a directory with a manifest")


def read_pages(path: str | Path, *, max_bytes: int = DEFAULT_MAX_BYTES,
               tally: ReadTally | None = None) -> Iterator[Page | PageProblem]:
    """Pages from any supported input, its format found by :func:`detect_page_format`."""
    kind = detect_page_format(path)
    reader = {"warc": read_warc, "jsonl": read_page_jsonl, "dir": read_page_dir}[kind]
    log.info("reading pages from %s as %s", path, kind)
    return reader(path, max_bytes=max_bytes, tally=tally)
