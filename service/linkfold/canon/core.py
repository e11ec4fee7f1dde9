"""canonicalize(): a raw URL and a ruleset in, a canonical URL and its url key out. Pure: no I/O.

The steps, in order (each named as in ``Canonical.steps`` and switchable in the ruleset unless marked):

1. ``trim`` (always): leading and trailing whitespace, as dumps and pasted text carry it.
2. ``whatwg`` (always): the WHATWG parser's serialisation, which performs RFC 3986 §6.2.2.1 case
   normalisation of scheme and host, UTS #46 IDNA to ASCII, IP-literal serialisation, §6.2.3 default-port
   removal and "/" for an empty path, §6.2.2.3 dot-segment removal, percent-encoding of unsafe characters.
3. ``redirect_wrappers``, ``amp_cache``: URLs that stand for another URL are replaced by it (and that URL
   is canonicalised from the start).
4. host: ``drop_userinfo``, ``host_trailing_dot``, ``host_prefixes``, ``host_alias`` (site rule),
   then the scheme: ``https``.
5. path: ``session_ids`` (path parameters), ``percent_case``, ``percent_unreserved``, ``path_rewrite``
   (site rule), then ``amp``, ``print_view``, ``index_documents``, ``trailing_slash`` until none applies.
6. query: ``tracking_params``, ``session_ids``, ``amp``, ``print_view``, ``site_params`` (site rule),
   ``sort_params``, ``empty_query``. 7. fragment: ``fragment`` (dropped) unless ``hashbang``.
"""

from __future__ import annotations

import logging
import re
from functools import lru_cache
from typing import NamedTuple
from urllib.parse import unquote

from ..errors import InvalidURL
from . import _parse
from ._folds import _Folds, _percent
from ._hostplan import _HostPlan
from ._wrapped import _AMP_CACHE_PREFIXES, _amp_cache_target, _share_page
from .keys import url_key
from .rules import Ruleset, default_rules

log = logging.getLogger("linkfold")

#: Longest raw URL accepted, in characters. RFC 9110 §4.1 recommends that HTTP senders and recipients
#: support URIs of at least 8000 octets; a longer one is unlikely to be fetchable anywhere and is far more
#: likely to be a data blob or a paste accident than an article link.
MAX_URL_LENGTH = 8192

#: How many URL-in-URL layers (redirect wrapper, AMP cache) are unwrapped before the URL is refused
#: (reason ``too_deep``). Refusing rather than stopping keeps every accepted result a fixed point.
MAX_UNWRAP = 32


class _TooDeep(InvalidURL):
    """Raised through every layer of unwrapping, unlike an unusable target, which only stops one."""

# C0 controls, DEL and C1 controls: never part of a URL as typed, copied or logged by a browser.
_CONTROL = re.compile(r"[\x00-\x1f\x7f-\x9f]")
_SURROGATE = re.compile(r"[\ud800-\udfff]")
_UNWANTED = re.compile(r"[\x00-\x1f\x7f-\x9f\ud800-\udfff]")
_SCHEME = re.compile(r"^([A-Za-z][A-Za-z0-9+.\-]*):")
_AUTHORITY = re.compile(r"^[A-Za-z][A-Za-z0-9+.\-]*:[/\\]*([^/\\?#]*)")


class Canonical(NamedTuple):
    """The result of canonicalising one raw URL under one ruleset (immutable).

    A named tuple rather than a frozen dataclass: one is built for every URL of every bulk stage, and a
    tuple is built in a third of the time.
    """

    url: str
    url_key: str
    host: str
    domain: str | None
    outlet: str | None
    is_article: bool | None
    ruleset: str
    steps: tuple[str, ...]


class _Engine(_Folds):
    """A ruleset compiled for canonicalising: the host planner and the folds, run over a whole URL."""

    QUERY_CACHE = 50_000

    # --- the whole URL --------------------------------------------------------------------------------
    def run(self, raw: object, depth: int = 0) -> Canonical:
        # The fast lane: most raw URLs in a dump are already their own WHATWG serialisation (see
        # _parse.simple_match), so the checks and the parser of the slow lane have nothing to do for them.
        # Both lanes end in the same folds below; tests compare the lanes on generated URLs.
        fast: _HostPlan | None = None
        if type(raw) is str and len(raw) <= MAX_URL_LENGTH:
            m = _parse.simple_match(raw)
            if m is not None:
                scheme, host, port_given, path, query, fragment = m.groups()
                fast = self.fast_hosts.get(host)
                if fast is None and host not in self.fast_hosts:
                    fast = self.fast_plan(host)
                # _parse.plain_rest, inlined: this runs for nearly every URL.
                if fast is not None and ("/." in path or ("%2" in path and ("%2e" in path or "%2E" in path)) or (
                        port_given is not None and not _parse.plain_rest(scheme, port_given, path))):
                    fast = None
        parts: _parse.Parts | None
        if fast is not None:
            plan = fast
            parts = None
            steps: list[str] = []
            port = port_given or ""
        else:
            parts, steps = self._slow_parse(raw)
            plan = self.plan(parts.host, parts.host_type)
            scheme, host, port, path, query, fragment = (parts.scheme, parts.host, parts.port, parts.path,
                                                         parts.query, parts.fragment)
        sw = plan.sw

        # A wrapper's target is an absolute http(s) URL in a parameter value, written plainly or encoded:
        # without "=http" in the query there is nothing to unwrap (most URLs), so skip the patterns.
        if (query and sw.redirect_wrappers and "=http" in query.lower()) or (
                plan.amp_label is not None and sw.amp_cache and path.startswith(_AMP_CACHE_PREFIXES)):
            if parts is None:
                parts = _parse.Parts(raw, scheme, False, host, port, path, query, fragment,  # type: ignore[arg-type]
                                     _parse.HOST_NAME)
            inner = self._unwrap(parts, plan, depth)
            if inner is not None:
                step, result = inner
                return Canonical(result.url, result.url_key, result.host, result.domain, result.outlet,
                                 result.is_article, result.ruleset,
                                 tuple(dict.fromkeys((*steps, step, *result.steps))))

        if parts is not None and parts.userinfo:
            if sw.drop_userinfo:
                steps.append("drop_userinfo")
                userinfo = ""
            else:
                userinfo = parts.href[len(parts.scheme) + 3: parts.href.index("@", len(parts.scheme) + 3) + 1]
        else:
            userinfo = ""
        if plan.steps:
            steps.extend(plan.steps)
        host = plan.host
        site = plan.site

        if scheme == "http" and sw.https and not port:
            # Only without an explicit port: http://h:8080 and https://h:8080 are different services.
            scheme = "https"
            steps.append("https")

        if ";" in path or "%" in path or (site is not None and site.rewrites):
            path = self._path_edits(path, sw, site, host, steps)
        if path != "/":
            last = path[path.rfind("/") + 1:]
            if last in self.fold_last or self._may_fold(path, last):
                for _ in range(16):  # each fold shortens the path, so this ends; the bound is a safety net
                    new = self._fold_path(path, sw, steps)
                    if new == path:
                        break
                    path = new

        if query is not None:
            if query and site is None:
                folded = plan.queries.get(query)
                if folded is None:
                    query_steps: list[str] = []
                    folded = (self._query(query, plan, query_steps), tuple(query_steps))
                    if len(plan.queries) >= self.QUERY_CACHE:
                        plan.queries.clear()
                    plan.queries[query] = folded
                query = folded[0]
                if folded[1]:
                    steps.extend(folded[1])
            elif query:
                query = self._query(query, plan, steps)
            if not query and sw.empty_query:
                steps.append("empty_query")
                query = None

        if fragment is not None:
            if sw.hashbang and fragment.startswith("!"):
                fragment = _percent(fragment, sw.percent_unreserved, sw.percent_case)
            elif sw.fragment:
                steps.append("fragment")
                fragment = None

        url = f"{scheme}://{userinfo}{host}:{port}{path}" if port else f"{scheme}://{userinfo}{host}{path}"
        if query is not None:
            url = f"{url}?{query}" if fragment is None else f"{url}?{query}#{fragment}"
        elif fragment is not None:
            url = f"{url}#{fragment}"

        is_article: bool | None = None
        if plan.never_article:
            is_article = False  # listed in never_article_hosts: whatever the site's patterns say
        elif site is not None and site.article:
            target = path if query is None else f"{path}?{query}"
            is_article = any(p.search(target) for p in site.article)
        return Canonical(url, url_key(url), host, plan.domain, plan.outlet, is_article, self.rules.digest,
                         tuple(steps) if len(steps) < 2 else tuple(dict.fromkeys(steps)))

    def _slow_parse(self, raw: object) -> tuple[_parse.Parts, list[str]]:
        """The slow lane: every check on the raw text, then the WHATWG parser."""
        if not isinstance(raw, str):
            raise InvalidURL("not_text", f"expected text, got {type(raw).__name__}")
        if not raw:
            raise InvalidURL("empty", "the URL is empty")
        text = raw.strip()
        if not text:
            raise InvalidURL("whitespace", "the URL is only whitespace")
        if len(text) > MAX_URL_LENGTH:
            raise InvalidURL("too_long", f"{len(text)} characters; the limit is {MAX_URL_LENGTH}")
        bad = _UNWANTED.search(text)
        if bad:
            if _SURROGATE.match(bad.group()):
                raise InvalidURL("bad_unicode", "the text holds a lone surrogate (broken Unicode)")
            raise InvalidURL("control_chars", f"control character U+{ord(bad.group()):04X} at position "
                                              f"{bad.start() + 1}")
        if not text.startswith(("https://", "http://")):  # the usual case, without a regex
            m = _SCHEME.match(text)
            if m is None:
                raise InvalidURL("no_scheme", f"{_clip(text)} does not start with http:// or https://")
            scheme = m.group(1).lower()
            if scheme not in ("http", "https"):
                raise InvalidURL("not_http", f"scheme {scheme!r} is not http or https")
        parts = _parse.parse(text)
        if parts is None:
            raise _diagnose(text)
        if parts.scheme not in ("http", "https"):
            raise InvalidURL("not_http", f"scheme {parts.scheme!r} is not http or https")
        if not parts.host:
            raise InvalidURL("no_host", "the URL has no host")
        steps: list[str] = []
        if text != raw:
            steps.append("trim")
        if parts.href != text:
            steps.append("whatwg")
        return parts, steps

    # --- URLs that stand for another URL --------------------------------------------------------------
    def _unwrap(self, parts: _parse.Parts, plan: _HostPlan, depth: int) -> tuple[str, Canonical] | None:
        sw = plan.sw
        if depth >= MAX_UNWRAP and (sw.redirect_wrappers or sw.amp_cache):
            if self._unwrap_target(parts, plan) is not None:
                raise _TooDeep("too_deep", f"more than {MAX_UNWRAP} redirect wrappers or AMP caches nested")
            return None
        target = self._unwrap_target(parts, plan)
        if target is None:
            return None
        step, url = target
        try:
            return step, self.run(url, depth + 1)
        except _TooDeep:
            raise
        except InvalidURL:
            return None  # not a usable target: the wrapper is an ordinary URL

    def _unwrap_target(self, parts: _parse.Parts, plan: _HostPlan) -> tuple[str, str] | None:
        rules, sw = self.rules, plan.sw
        if sw.redirect_wrappers and parts.query:
            for wrapper in rules.wrappers:
                if wrapper.hosts and parts.host not in wrapper.hosts and plan.host not in wrapper.hosts \
                        and plan.domain not in wrapper.hosts:
                    continue
                if not wrapper.path.search(parts.path):
                    continue
                if not wrapper.hosts and _share_page(parts.path):
                    continue  # a share page names an article but is not it (see _share_page)
                for piece in parts.query.split("&"):
                    name, _, value = piece.partition("=")
                    if name.lower() in wrapper.params and value:
                        target = unquote(value).strip()
                        if (target[:7].lower() == "http://" or target[:8].lower() == "https://") \
                                and self._usable(target):
                            return "redirect_wrappers", target
        if sw.amp_cache and plan.amp_label is not None:
            cached = _amp_cache_target(parts, plan.amp_label)
            if cached is not None and self._usable(cached):
                return "amp_cache", cached
        return None

    def _usable(self, target: str) -> bool:
        """Whether a wrapped target is an http(s) URL at all (a wrapper around junk stays as it is)."""
        if len(target) > MAX_URL_LENGTH or _CONTROL.search(target) or _SURROGATE.search(target):
            return False
        parts = _parse.parse(target)
        return parts is not None and parts.scheme in ("http", "https") and bool(parts.host)


def _clip(text: str, n: int = 60) -> str:
    return repr(text if len(text) <= n else text[:n] + "…")


def _diagnose(text: str) -> InvalidURL:
    """A reason for a URL the parser refused, from a look at its authority."""
    m = _AUTHORITY.match(text)
    authority = m.group(1) if m else ""
    hostport = authority.rpartition("@")[2]
    if not hostport or hostport.startswith(":"):
        return InvalidURL("no_host", f"{_clip(text)} has no host")
    if hostport.startswith("["):
        host, _, rest = hostport.partition("]")
        port = rest[1:] if rest.startswith(":") else None
        host += "]"
    else:
        host, sep, port_text = hostport.rpartition(":")
        if not sep:
            host, port = hostport, None
        else:
            port = port_text
    if port is not None and port != "" and (not port.isdigit() or int(port) > 65535):
        return InvalidURL("bad_port", f"port {port[:20]!r} is not a number from 0 to 65535")
    if host:
        return InvalidURL("bad_host", f"host {host[:80]!r} is not a valid host name or address")
    return InvalidURL("unparsable", f"{_clip(text)} is not a URL the WHATWG URL parser accepts")


_ENGINES: dict[str, _Engine] = {}


def _engine(rules: Ruleset | None) -> _Engine:
    if rules is None:
        rules = default_rules()
    engine = _ENGINES.get(rules.digest)
    if engine is None:
        if len(_ENGINES) >= 16:
            _ENGINES.clear()
        engine = _ENGINES[rules.digest] = _Engine(rules)
    return engine


_DEFAULT_ENGINE: list[_Engine] = []


def canonicalize(raw: str, rules: Ruleset | None = None) -> Canonical:
    """The canonical form of ``raw`` under ``rules`` (default: the built-in ruleset).

    Raises :class:`~linkfold.errors.InvalidURL` with a reason code for anything that is not an http(s)
    URL, and never any other exception.
    """
    try:
        if rules is None:
            if not _DEFAULT_ENGINE:
                _DEFAULT_ENGINE.append(_engine(None))
            return _DEFAULT_ENGINE[0].run(raw)
        return _engine(rules).run(raw)
    except InvalidURL:
        raise
    except Exception as exc:  # a bug must not take a bulk stage down with it: report it per URL
        log.debug("canonicaliser failed on %r", raw, exc_info=True)
        raise InvalidURL("unparsable", f"could not be canonicalised ({type(exc).__name__})") from None


class Canonicaliser:
    """:func:`canonicalize` with a bounded LRU cache, for bulk stages (panels repeat URLs heavily).

    Refusals are cached too: a raw URL that failed once fails the same way without being parsed again.
    """

    def __init__(self, rules: Ruleset | None = None, *, cache_size: int = 65536) -> None:
        self.rules = rules if rules is not None else default_rules()
        engine = _Engine(self.rules)

        def one(raw: str) -> Canonical | InvalidURL:
            try:
                return engine.run(raw)
            except InvalidURL as exc:
                return exc
            except Exception as exc:
                log.debug("canonicaliser failed on %r", raw, exc_info=True)
                return InvalidURL("unparsable", f"could not be canonicalised ({type(exc).__name__})")

        self._cached = lru_cache(maxsize=cache_size)(one)

    def __call__(self, raw: str) -> Canonical:
        try:
            result = self._cached(raw)
        except TypeError:  # unhashable input: not text anyway
            raise InvalidURL("not_text", f"expected text, got {type(raw).__name__}") from None
        if isinstance(result, InvalidURL):
            # A fresh exception each time, so tracebacks do not pile up on one cached instance.
            raise InvalidURL(result.reason, result.detail)
        return result

    def cache_info(self):
        """Hits, misses and size of the cache (functools' CacheInfo)."""
        return self._cached.cache_info()
