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
from dataclasses import dataclass
from functools import lru_cache
from typing import NamedTuple
from urllib.parse import unquote

from ..errors import InvalidURL
from . import _parse
from ._idna import punycode_decode
from .hosts import host_problem, registered_domain
from .keys import url_key
from .rules import SWITCHES, Ruleset, SiteRule, default_rules

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
_PCT = re.compile(r"%([0-9A-Fa-f]{2})")
# RFC 3986 §2.3 unreserved characters.
_UNRESERVED = frozenset("ABCDEFGHIJKLMNOPQRSTUVWXYZabcdefghijklmnopqrstuvwxyz0123456789-._~")
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


@lru_cache(maxsize=4096)
def _pct_fix(hexpair: str, decode: bool, upper: bool) -> str:
    ch = chr(int(hexpair, 16))
    if decode and ch in _UNRESERVED:
        return ch
    return "%" + (hexpair.upper() if upper else hexpair)


def _percent(text: str, decode: bool, upper: bool) -> str:
    """RFC 3986 §6.2.2.1 (hex digits in upper case) and §6.2.2.2 (decode unreserved characters only)."""
    if "%" not in text:
        return text
    return _PCT.sub(lambda m: _pct_fix(m.group(1), decode, upper), text)


class _Switches:
    """Effective switches for one host: the ruleset's, overridden by its site rule."""

    __slots__ = SWITCHES
    # One annotation per switch, for the type checker (tests check they match SWITCHES).
    redirect_wrappers: bool
    amp_cache: bool
    drop_userinfo: bool
    host_trailing_dot: bool
    host_prefixes: bool
    https: bool
    percent_case: bool
    percent_unreserved: bool
    session_ids: bool
    amp: bool
    print_view: bool
    index_documents: bool
    trailing_slash: bool
    tracking_params: bool
    sort_params: bool
    empty_query: bool
    fragment: bool
    hashbang: bool

    def __init__(self, rules: Ruleset, site: SiteRule | None) -> None:
        over = site.switches if site is not None else {}
        for name in SWITCHES:
            setattr(self, name, over.get(name, rules.switches[name]))


@dataclass(frozen=True, slots=True)
class _HostPlan:
    """Everything that depends on the host alone, computed once per host and ruleset."""

    host: str
    domain: str | None
    outlet: str | None
    site: SiteRule | None
    sw: _Switches
    steps: tuple[str, ...]
    #: The host's first label when it could be an AMP cache's encoding of a publisher host (it has a dash
    #: and more labels follow), else None; the path says whether it is (see _amp_cache_target).
    amp_label: str | None
    #: Query-parameter verdicts for this host's switches (shared by every host with the same switches).
    verdicts: dict[str, str | tuple[tuple[str, frozenset[str] | None], ...] | None]
    #: Whole queries already folded under these switches, for hosts without a site rule: query strings
    #: repeat far more than URLs do (the same campaign tags ride on every article of a mailing).
    queries: dict[str, tuple[str, tuple[str, ...]]]
    #: Whether the ruleset lists the host in ``never_article_hosts`` (ad servers, trackers, CDNs).
    never_article: bool = False


def _query_markers(items: tuple[str, ...]) -> dict[str, frozenset[str] | None]:
    """"name" (any value) and "name=value" markers as name -> values (None: any value)."""
    out: dict[str, set[str] | None] = {}
    for item in items:
        name, eq, value = item.partition("=")
        if not eq:
            out[name] = None
        elif name not in out or out[name] is not None:
            out.setdefault(name, set()).add(value)  # type: ignore[union-attr]
    return {k: (None if v is None else frozenset(v)) for k, v in out.items()}


def _marker_hit(markers: dict[str, frozenset[str] | None], name: str, value: str) -> bool:
    if name not in markers:
        return False
    values = markers[name]
    return values is None or value in values


class _Engine:
    """A ruleset compiled for canonicalising: marker tables, and the per-host plan cache."""

    HOST_CACHE = 100_000
    QUERY_CACHE = 50_000

    def __init__(self, rules: Ruleset) -> None:
        self.rules = rules
        self.amp_query = _query_markers(rules.amp_query)
        self.print_query = _query_markers(rules.print_query)
        self.hosts: dict[str, _HostPlan | str] = {}
        # Hosts the fast lane has looked at: their plan, or None when the host needs the parser (an IDNA
        # label, an IPv4-like last label) or is refused (the slow lane then says why, in its words).
        self.fast_hosts: dict[str, _HostPlan | None] = {}
        # One _Switches and one verdict table per distinct combination of switches: every host without a
        # site rule shares the ruleset's.
        self.switch_sets: dict[tuple[bool, ...], tuple[_Switches, dict, dict]] = {}
        self.fold_last = rules.amp_last_segments | rules.print_last_segments | rules.index_names | {""}
        self.fold_first = rules.amp_first_segments
        self.amp_suffixes = rules.amp_name_suffixes

    # --- host -----------------------------------------------------------------------------------------
    def plan(self, host: str, host_type: int) -> _HostPlan:
        plan = self.hosts.get(host)
        if plan is None:
            plan = self._plan(host, host_type)
            if len(self.hosts) >= self.HOST_CACHE:
                self.hosts.clear()  # a crude bound; hosts repeat so heavily that refilling is cheap
            self.hosts[host] = plan
        if isinstance(plan, str):
            raise InvalidURL("bad_host", plan)
        return plan

    def fast_plan(self, host: str) -> _HostPlan | None:
        """The plan of a host the fast pattern matched, or None when the URL must take the slow lane."""
        plan: _HostPlan | None = None
        if _parse.plain_host(host):
            known = self.hosts.get(host)
            if known is None:
                known = self._plan(host, _parse.HOST_NAME)
                if len(self.hosts) >= self.HOST_CACHE:
                    self.hosts.clear()
                self.hosts[host] = known
            if not isinstance(known, str):
                plan = known
        if len(self.fast_hosts) >= self.HOST_CACHE:
            self.fast_hosts.clear()
        self.fast_hosts[host] = plan
        return plan

    def _switches(self, site: SiteRule | None) -> tuple[_Switches, dict, dict]:
        sw = _Switches(self.rules, site)
        signature = tuple(getattr(sw, name) for name in SWITCHES)
        known = self.switch_sets.get(signature)
        if known is None:
            known = self.switch_sets[signature] = (sw, {}, {})
        return known

    def _verdict(self, name: str, sw: _Switches) -> str | tuple[tuple[str, frozenset[str] | None], ...] | None:
        """What the ruleset's own lists say of a query parameter name, before its value is seen: the
        step that drops it whatever its value, the (step, values) markers that drop it for some
        values, or None (kept, unless the site drops it). Site keep/drop lists are applied around this."""
        low = name.lower()
        rules = self.rules
        if sw.tracking_params and (low in rules.tracking_names or low.startswith(rules.tracking_prefixes)):
            return "tracking_params"
        if sw.session_ids and low in rules.session_names:
            return "session_ids"
        conditional: list[tuple[str, frozenset[str] | None]] = []
        for step, on, markers in (("amp", sw.amp, self.amp_query), ("print_view", sw.print_view, self.print_query)):
            if on and name in markers:
                values = markers[name]
                if values is None:
                    if not conditional:
                        return step
                    conditional.append((step, None))  # any value, after the earlier markers
                    return tuple(conditional)
                conditional.append((step, values))
        return tuple(conditional) if conditional else None

    def _plan(self, host: str, host_type: int) -> _HostPlan | str:
        rules = self.rules
        steps: list[str] = []
        if host_type != _parse.HOST_NAME:
            sw, verdicts, queries = self._switches(None)
            return _HostPlan(host, None, None, None, sw, (), None, verdicts, queries)
        # Sites are written without the root dot, so the dot goes before the site is looked up; the site
        # may still keep it (host_trailing_dot = false) below.
        # Only one dot is the root: "a.example.." has an empty label before it (RFC 1034 §3.1).
        stripped = host[:-1] if host.endswith(".") else host
        problem = host_problem(stripped)
        if problem:
            return problem
        domain = registered_domain(stripped)
        site = rules.site_for(stripped, domain)
        sw, verdicts, queries = self._switches(site)
        if stripped != host:
            if sw.host_trailing_dot:
                steps.append("host_trailing_dot")
                host = stripped
            else:
                domain = registered_domain(host)
        host = self._fold_prefix(host, domain, sw, steps)
        if site is not None and host != site.host:
            for alias in site.aliases:
                if host == alias or host.endswith("." + alias):
                    host = host[: len(host) - len(alias)] + site.host
                    domain = registered_domain(host)
                    steps.append("host_alias")
                    # The site may be written with a prefix (www.…) that folds too.
                    host = self._fold_prefix(host, domain, sw, steps)
                    break
        outlet = site.outlet if site is not None and site.outlet else domain
        first, dot, _rest = stripped.partition(".")
        amp_label = first if dot and "-" in first else None
        return _HostPlan(host, domain, outlet, site, sw, tuple(steps), amp_label, verdicts, queries,
                         rules.never_article(host))

    def _fold_prefix(self, host: str, domain: str | None, sw: _Switches, steps: list[str]) -> str:
        if sw.host_prefixes and domain is not None:
            label, _, rest = host.partition(".")
            if rest == domain and label in self.rules.host_prefix_labels:
                steps.append("host_prefixes")
                return rest
        return host

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

    # --- path -----------------------------------------------------------------------------------------
    def _path_edits(self, path: str, sw: _Switches, site: SiteRule | None, host: str, steps: list[str]) -> str:
        """Session-ID path parameters, percent-encoding, site rewrites: the edits before the folds."""
        rules = self.rules
        if ";" in path and sw.session_ids:
            new = _drop_path_sessions(path, rules.session_names)
            if new != path:
                steps.append("session_ids")
                path = new
        if "%" in path:
            new = _percent(path, sw.percent_unreserved, sw.percent_case)
            if new != path:
                steps.append("percent_case" if new.upper() == path.upper() else "percent_unreserved")
                path = new
        if site is not None and site.rewrites:
            for rw in site.rewrites:
                new = rw.pattern.sub(rw.replace, path, count=1)
                if new != path:
                    path = _reparse_path(new, host, sw)
                    steps.append("path_rewrite")
        return path

    def _may_fold(self, path: str, last: str) -> bool:
        """Whether some path fold could apply, once the last segment alone did not say so (most article
        paths carry no marker at all)."""
        if self.fold_first:
            end = path.find("/", 1)
            if (path[1:] if end < 0 else path[1:end]) in self.fold_first:
                return True
        for suffix in self.amp_suffixes:  # noqa: SIM110 (cheaper than any() over a generator)
            if suffix in last:
                return True
        return False

    def _fold_path(self, path: str, sw: _Switches, steps: list[str]) -> str:
        rules = self.rules
        if path == "/":
            return path
        head, _, last = path.rpartition("/")
        if sw.amp:
            first = path[1:].partition("/")[0]
            if first in rules.amp_first_segments:
                steps.append("amp")
                return path[len(first) + 1:] or "/"
            if last in rules.amp_last_segments:
                steps.append("amp")
                return head + "/"
            for suffix in rules.amp_name_suffixes:
                if last.endswith(suffix) and len(last) > len(suffix):
                    steps.append("amp")
                    return f"{head}/{last[: -len(suffix)]}"
                cut = last.rfind(suffix + ".")
                if cut > 0:
                    steps.append("amp")
                    return f"{head}/{last[:cut]}{last[cut + len(suffix):]}"
        if sw.print_view and last in rules.print_last_segments:
            steps.append("print_view")
            return head + "/"
        if sw.index_documents and last in rules.index_names:
            steps.append("index_documents")
            return head + "/"
        if sw.trailing_slash and last == "":
            steps.append("trailing_slash")
            return path.rstrip("/") or "/"
        if sw.amp and path.endswith("/") and path[:-1].rpartition("/")[2] in rules.amp_last_segments:
            steps.append("amp")
            return path[:-1].rpartition("/")[0] + "/"
        return path

    # --- query ----------------------------------------------------------------------------------------
    def _query(self, query: str, plan: _HostPlan, steps: list[str]) -> str:
        sw, site, verdicts = plan.sw, plan.site, plan.verdicts
        kept: list[tuple[str, str]] = []
        for piece in query.split("&"):
            if not piece:
                if sw.empty_query:
                    steps.append("empty_query")
                    continue
                kept.append(("", piece))
                continue
            if "%" in piece:
                new = _percent(piece, sw.percent_unreserved, sw.percent_case)
                if new != piece:
                    steps.append("percent_case" if new.upper() == piece.upper() else "percent_unreserved")
                    piece = new
            name, _, value = piece.partition("=")
            if site is not None and site.keep_params and name.lower() in site.keep_params:
                kept.append((name, piece))
                continue
            if name in verdicts:
                verdict = verdicts[name]
            else:
                verdict = self._verdict(name, sw)
                if len(verdicts) >= self.HOST_CACHE:
                    verdicts.clear()  # arbitrary names are unbounded; the common ones come straight back
                verdicts[name] = verdict
            if verdict is not None:
                if isinstance(verdict, str):
                    steps.append(verdict)
                    continue
                dropped = False
                for step, values in verdict:
                    if values is None or value in values:
                        steps.append(step)
                        dropped = True
                        break
                if dropped:
                    continue
            if site is not None:
                low = name.lower()
                if site.drop_unlisted_params or low in site.drop_params or (
                        site.drop_param_prefixes and low.startswith(site.drop_param_prefixes)):
                    steps.append("site_params")
                    continue
            kept.append((name, piece))
        if sw.sort_params and len(kept) > 1:
            ordered = sorted(kept, key=_first)  # sorted() is stable: repeated names keep their order
            if ordered != kept:
                steps.append("sort_params")
                kept = ordered
        return "&".join(piece for _, piece in kept)


def _first(item: tuple[str, str]) -> str:
    return item[0]


def _clip(text: str, n: int = 60) -> str:
    return repr(text if len(text) <= n else text[:n] + "…")


def _drop_path_sessions(path: str, names: frozenset[str]) -> str:
    """Remove ";name=value" path parameters whose name is a session-ID name (RFC 3986 §3.3 parameters)."""
    out = []
    for segment in path.split("/"):
        if ";" in segment:
            base, *params = segment.split(";")
            params = [p for p in params if p.partition("=")[0].lower() not in names]
            segment = ";".join([base, *params])
        out.append(segment)
    return "/".join(out)


def _reparse_path(path: str, host: str, sw: _Switches) -> str:
    """A rewritten path, serialised the way the parser would (so the result stays a fixed point)."""
    path = path.replace("?", "%3F").replace("#", "%23")
    if not path.startswith("/"):
        path = "/" + path
    parts = _parse.parse(f"http://{host}{path}")
    if parts is None or parts.query is not None or parts.fragment is not None:
        raise InvalidURL("bad_rewrite", f"a path rewrite produced {path!r}, which is not a path")
    return _percent(parts.path, sw.percent_unreserved, sw.percent_case)


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
