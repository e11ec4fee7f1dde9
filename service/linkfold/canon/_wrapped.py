"""URLs that stand for another URL, recognised by their shape alone: AMP-cache URLs (the host's first
label encodes the publisher host the path carries) and share pages (a form that takes an article's URL
as a parameter but is not the article). No list of real host names is needed. Pure: no I/O.
"""

from __future__ import annotations

from functools import lru_cache
from urllib.parse import unquote

from . import _parse
from ._idna import punycode_decode

#: AMP-cache path prefixes: content (/c/), viewer (/v/) and images (/i/); "s/" after one marks https.
_AMP_CACHE_PREFIXES = ("/c/", "/v/", "/i/")
_AMP_CACHE_FORMS = tuple((f"{p}s/", "https") for p in _AMP_CACHE_PREFIXES) + tuple(
    (p, "http") for p in _AMP_CACHE_PREFIXES)


@lru_cache(maxsize=4096)
def amp_cache_labels(origin: str) -> frozenset[str]:
    """The first host labels under which an AMP cache serves ``origin`` (a host name, ASCII).

    The cache form (common practice): every "-" of the origin host doubled, then every "." made "-", so
    that ``news.daily-example.test`` is served as ``news-daily--example-test.<cache host>``. For a host with
    IDNA labels the cache works on the Unicode form and encodes the resulting label again (from memory of
    the cache's published URL format), so both spellings are accepted. Labels that would pass 63
    characters are hashed by the caches instead; that form cannot be recognised by shape and stays as it is.
    """
    host = origin.lower()
    if host.endswith("."):
        host = host[:-1]
    forms = {host.replace("-", "--").replace(".", "-")}
    if "xn--" in host:
        labels = [punycode_decode(label[4:]) if label.startswith("xn--") else label for label in host.split(".")]
        if all(labels):
            ascii_label = _parse.ascii_host(".".join(labels).replace("-", "--").replace(".", "-"))  # type: ignore[arg-type]
            if ascii_label:
                forms.add(ascii_label)
    return frozenset(forms)


def _amp_cache_target(parts: _parse.Parts, label: str) -> str | None:
    """The publisher URL inside an AMP-cache URL, recognised by its shape alone: the path is
    ``/c/s/<origin host>/<path>`` (https; ``/c/<origin host>/…`` for http; ``/v/`` and ``/i/`` likewise)
    and the first label of the URL's own host is the dashed encoding of that origin host. No list of cache
    hosts is needed, and a path that merely looks like the form on an ordinary site is left alone."""
    path = parts.path
    for prefix, scheme in _AMP_CACHE_FORMS:
        if path.startswith(prefix):
            rest = path[len(prefix):]
            origin = rest.partition("/")[0]
            if "%" in origin:  # a Unicode host, percent-encoded by the parser in the path
                origin = _parse.ascii_host(unquote(origin)) or ""
            if not origin or label not in amp_cache_labels(origin):
                continue
            target = f"{scheme}://{rest}"
            if parts.query is not None:
                target += "?" + parts.query
            return target
    return None


#: Path segments (without an extension) that name a page for sharing or posting a link: such a page takes
#: the article's URL as a parameter, like a redirect wrapper, but it is a page of its own (a form), not the
#: article, so a generic wrapper never unwraps it. Common practice; see docs/canonical-form.md.
SHARE_SEGMENTS = frozenset({"share", "sharer", "sharing", "sharearticle", "shareurl", "intent", "submit",
                            "compose", "post", "bookmark", "bookmarks", "send", "pin",
                            "mail", "email", "messaging"})


def _share_page(path: str) -> bool:
    """Whether a path names a share page (any segment, extension aside, in :data:`SHARE_SEGMENTS`)."""
    return any(segment.partition(".")[0] in SHARE_SEGMENTS for segment in path.lower().split("/") if segment)
