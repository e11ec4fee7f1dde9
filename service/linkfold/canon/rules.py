"""Rulesets: the defaults kept as data, a lab's rules file laid over them, validated with line numbers.

A rules file is TOML (the format is described in docs/canonical-form.md). :func:`parse_rules` reads one,
checks every key, type and regular expression, and lays it over :func:`default_rules`: its ``[steps]``
switches win, its lists are added to the default lists, and its ``[site."host"]`` sections change the
behaviour for one outlet. The result is a :class:`Ruleset`, identified by a digest over its normalised
content, the canonicaliser version and the Public Suffix List version, so two labs with the same rules
and the same code get the same canonical URLs and can tell when they would not.
"""

from __future__ import annotations

import hashlib
import json
import re
import tomllib
from collections.abc import Mapping
from dataclasses import dataclass, field
from importlib import resources
from pathlib import Path
from types import MappingProxyType
from typing import Any

from ..errors import RulesError
from . import _tomlpos
from ._version import CANON_VERSION, PSL_VERSION
from .hosts import registered_domain

#: Every switchable step, in the order the canonicaliser applies them.
SWITCHES: tuple[str, ...] = (
    "redirect_wrappers",
    "amp_cache",
    "drop_userinfo",
    "host_trailing_dot",
    "host_prefixes",
    "https",
    "percent_case",
    "percent_unreserved",
    "session_ids",
    "amp",
    "print_view",
    "index_documents",
    "trailing_slash",
    "tracking_params",
    "sort_params",
    "empty_query",
    "fragment",
    "hashbang",
)

# The data tables of a rules file: table name -> {key: kind}. Kinds: "strs" (list of strings).
_DATA_TABLES: dict[str, tuple[str, ...]] = {
    "tracking": ("prefixes", "names"),
    "session": ("names",),
    "host_prefixes": ("labels",),
    "amp": ("first_segments", "last_segments", "name_suffixes", "query"),
    "amp_cache": ("suffixes",),
    "print_view": ("last_segments", "query"),
    "index_documents": ("names",),
}
_SITE_KEYS = ("outlet", "aliases", "keep_params", "drop_params", "drop_unlisted_params", "article", "rewrite")
#: Top-level lists of hosts. A listed host covers its subdomains too (an ad server's ``a1.``, ``a2.`` …).
HOST_LISTS = ("never_follow_hosts", "never_article_hosts")
_TOP_KEYS = ("name", "shortener_hosts", *HOST_LISTS, "steps", "redirect_wrapper", "site", *_DATA_TABLES)

_HOST_RE = re.compile(r"^(?=.{1,253}$)(?:[a-z0-9_](?:[a-z0-9_-]{0,61}[a-z0-9_])?\.)*"
                      r"[a-z0-9_](?:[a-z0-9_-]{0,61}[a-z0-9_])?$")


@dataclass(frozen=True, slots=True)
class Rewrite:
    """A path rewrite of a site: ``pattern`` (searched in the path) replaced by ``replace``."""

    pattern: re.Pattern[str]
    replace: str


@dataclass(frozen=True, slots=True)
class Wrapper:
    """A redirect wrapper: path pattern, the parameters that may hold the target, optional hosts."""

    path: re.Pattern[str]
    params: tuple[str, ...]
    hosts: frozenset[str]


@dataclass(frozen=True, slots=True)
class SiteRule:
    """The rules of one ``[site."host"]`` section."""

    host: str
    outlet: str | None = None
    aliases: tuple[str, ...] = ()
    keep_params: frozenset[str] = frozenset()
    drop_params: frozenset[str] = frozenset()
    drop_param_prefixes: tuple[str, ...] = ()
    drop_unlisted_params: bool = False
    article: tuple[re.Pattern[str], ...] = ()
    rewrites: tuple[Rewrite, ...] = ()
    switches: Mapping[str, bool] = field(default_factory=dict)


@dataclass(frozen=True, slots=True, eq=False)
class Ruleset:
    """A validated ruleset. Two rulesets are equal when their digests are."""

    name: str
    source: str
    digest: str
    shortener_hosts: frozenset[str]
    #: Hosts no request is ever sent to (follow stage); their subdomains too.
    never_follow_hosts: frozenset[str]
    #: Hosts whose URLs are never articles (ad servers, trackers, image and CDN hosts); their subdomains too.
    never_article_hosts: frozenset[str]
    switches: Mapping[str, bool]
    tracking_names: frozenset[str]
    tracking_prefixes: tuple[str, ...]
    session_names: frozenset[str]
    host_prefix_labels: frozenset[str]
    amp_first_segments: frozenset[str]
    amp_last_segments: frozenset[str]
    amp_name_suffixes: tuple[str, ...]
    amp_query: tuple[str, ...]
    amp_cache_suffixes: tuple[str, ...]
    print_last_segments: frozenset[str]
    print_query: tuple[str, ...]
    index_names: frozenset[str]
    wrappers: tuple[Wrapper, ...]
    sites: Mapping[str, SiteRule]
    #: The normalised content the digest is taken over (plain JSON-able data).
    normalised: Mapping[str, Any]
    #: Host (a site's own host or one of its aliases) -> the site's host, for lookups.
    site_hosts: Mapping[str, str]

    def __eq__(self, other: object) -> bool:
        return isinstance(other, Ruleset) and other.digest == self.digest

    def __hash__(self) -> int:
        return hash(self.digest)

    def __repr__(self) -> str:
        return f"Ruleset(name={self.name!r}, digest={self.digest[:12]}…, sites={len(self.sites)})"

    def __reduce__(self) -> tuple[Any, tuple[Any, ...]]:
        # A ruleset travels to executor workers (other processes, other machines) as its normalised
        # data and is rebuilt there once per digest: its read-only mappings cannot be pickled as they are.
        return (_revive, (self.digest, dict(self.normalised), self.source))

    def never_follows(self, host: str) -> bool:
        """Whether ``host`` (a canonical host) is listed in ``never_follow_hosts``, itself or as a subdomain."""
        return _listed(host, self.never_follow_hosts)

    def never_article(self, host: str) -> bool:
        """Whether ``host`` (a canonical host) is listed in ``never_article_hosts``, itself or as a subdomain."""
        return _listed(host, self.never_article_hosts)

    def site_for(self, host: str, domain: str | None) -> SiteRule | None:
        """The site rule for a host: exact host first, then its registered domain."""
        key = self.site_hosts.get(host)
        if key is None and domain is not None:
            key = self.site_hosts.get(domain)
        return None if key is None else self.sites[key]


def _listed(host: str, hosts: frozenset[str]) -> bool:
    if not hosts:
        return False
    if host in hosts:
        return True
    dot = host.find(".")
    while dot >= 0:
        if host[dot + 1:] in hosts:
            return True
        dot = host.find(".", dot + 1)
    return False


class _Checker:
    """Validates parsed TOML and raises RulesError naming the line of the offending key."""

    def __init__(self, text: str, source: str) -> None:
        self.text = text
        self.source = source

    def fail(self, path: tuple[str | int, ...], message: str, value: object = None) -> RulesError:
        where = ".".join(str(p) for p in path if not isinstance(p, int)) or "(top level)"
        line = _tomlpos.locate(self.text, path, value)
        return RulesError(f"{where}: {message}", source=self.source, line=line)

    def table(self, value: object, path: tuple[str | int, ...], allowed: tuple[str, ...]) -> dict:
        if not isinstance(value, dict):
            raise self.fail(path, f"must be a table, not {_kind(value)}")
        for key in value:
            if key not in allowed:
                raise self.fail((*path, key), f"unknown key {key!r} (expected one of: {', '.join(allowed)})")
        return value

    def strs(self, value: object, path: tuple[str | int, ...]) -> list[str]:
        if not isinstance(value, list):
            raise self.fail(path, f"must be a list of strings, not {_kind(value)}")
        for i, item in enumerate(value):
            if not isinstance(item, str):
                raise self.fail((*path, i), f"item {i + 1} must be a string, not {_kind(item)}")
            if not item.strip():
                raise self.fail((*path, i), f"item {i + 1} is empty", item)
        return value

    def boolean(self, value: object, path: tuple[str | int, ...]) -> bool:
        if not isinstance(value, bool):
            raise self.fail(path, f"must be true or false, not {_kind(value)}")
        return value

    def string(self, value: object, path: tuple[str | int, ...]) -> str:
        if not isinstance(value, str) or not value.strip():
            raise self.fail(path, f"must be a non-empty string, not {_kind(value)}")
        return value

    def regex(self, value: object, path: tuple[str | int, ...]) -> str:
        text = self.string(value, path)
        try:
            re.compile(text)
        except re.error as exc:
            raise self.fail(path, f"invalid regular expression {text!r}: {exc}", text) from None
        return text

    def host(self, value: object, path: tuple[str | int, ...]) -> str:
        text = self.string(value, path)
        host = normalise_rule_host(text)
        if host is None:
            raise self.fail(path, f"{text!r} is not a host name (write it like daily.example, without "
                                  "scheme, port or path)", text)
        return host


def _kind(value: object) -> str:
    return {bool: "a boolean", int: "a number", float: "a number", str: "a string", list: "a list",
            dict: "a table"}.get(type(value), type(value).__name__)


def normalise_rule_host(text: str) -> str | None:
    """A host as written in a rules file, in the form the canonicaliser compares with (or None)."""
    from ._parse import ascii_host

    host = ascii_host(text.strip().rstrip("."))
    if host is None or not _HOST_RE.match(host):
        return None
    return host


def _check_and_normalise(data: dict, chk: _Checker) -> dict[str, Any]:
    """The rules file's content, validated, as plain sorted data (lists de-duplicated in order)."""
    chk.table(data, (), _TOP_KEYS)
    out: dict[str, Any] = {}
    if "name" in data:
        out["name"] = chk.string(data["name"], ("name",)).strip()
    if "shortener_hosts" in data:
        out["shortener_hosts"] = [chk.host(h, ("shortener_hosts", i))
                                  for i, h in enumerate(chk.strs(data["shortener_hosts"], ("shortener_hosts",)))]
    for key in HOST_LISTS:
        if key in data:
            out[key] = [chk.host(h, (key, i)) for i, h in enumerate(chk.strs(data[key], (key,)))]
    if "steps" in data:
        steps = chk.table(data["steps"], ("steps",), SWITCHES)
        out["steps"] = {k: chk.boolean(v, ("steps", k)) for k, v in steps.items()}
    for table, keys in _DATA_TABLES.items():
        if table in data:
            body = chk.table(data[table], (table,), keys)
            out[table] = {k: _lower_if(table, k, chk.strs(v, (table, k))) for k, v in body.items()}
    if "redirect_wrapper" in data:
        wrappers = data["redirect_wrapper"]
        if not isinstance(wrappers, list):
            raise chk.fail(("redirect_wrapper",), "must be an array of tables ([[redirect_wrapper]])")
        out["redirect_wrapper"] = []
        for i, w in enumerate(wrappers):
            path = ("redirect_wrapper", i)
            chk.table(w, path, ("path", "params", "hosts"))
            if "path" not in w or "params" not in w:
                raise chk.fail(path, "a redirect wrapper needs both 'path' and 'params'")
            out["redirect_wrapper"].append({
                "path": chk.regex(w["path"], (*path, "path")),
                "params": chk.strs(w["params"], (*path, "params")),
                "hosts": [chk.host(h, (*path, "hosts", j))
                          for j, h in enumerate(chk.strs(w.get("hosts", []), (*path, "hosts")))],
            })
    if "site" in data:
        sites = chk.table(data["site"], ("site",), tuple(data["site"]) if isinstance(data["site"], dict) else ())
        out["site"] = {}
        for raw_host, body in sites.items():
            host = chk.host(raw_host, ("site", raw_host))
            if host in out["site"]:
                raise chk.fail(("site", raw_host), f"site {host!r} is given twice")
            out["site"][host] = _check_site(body, ("site", raw_host), chk)
    return out


def _lower_if(table: str, key: str, items: list[str]) -> list[str]:
    # Parameter and label names are compared case-insensitively; path markers keep their case because a
    # path's case is significant (RFC 3986 §6.2.2.1).
    if table in {"tracking", "session", "host_prefixes", "amp_cache"}:
        return [i.strip().lower() for i in items]
    return items


def _check_site(body: object, path: tuple[str | int, ...], chk: _Checker) -> dict[str, Any]:
    site = chk.table(body, path, (*_SITE_KEYS, *SWITCHES))
    out: dict[str, Any] = {}
    for key, value in site.items():
        where = (*path, key)
        if key in SWITCHES or key == "drop_unlisted_params":
            out[key] = chk.boolean(value, where)
        elif key == "outlet":
            out[key] = chk.string(value, where).strip()
        elif key == "aliases":
            out[key] = [chk.host(h, (*where, i)) for i, h in enumerate(chk.strs(value, where))]
        elif key in ("keep_params", "drop_params"):
            out[key] = chk.strs(value, where)
        elif key == "article":
            out[key] = [chk.regex(p, (*where, i)) for i, p in enumerate(chk.strs(value, where))]
        elif key == "rewrite":
            if not isinstance(value, list):
                raise chk.fail(where, "must be an array of tables ([[site.\"host\".rewrite]])")
            out[key] = []
            for i, rw in enumerate(value):
                rpath = (*where, i)
                chk.table(rw, rpath, ("pattern", "replace"))
                if "pattern" not in rw or "replace" not in rw:
                    raise chk.fail(rpath, "a rewrite needs both 'pattern' and 'replace'")
                pattern = chk.regex(rw["pattern"], (*rpath, "pattern"))
                replace = rw["replace"]
                if not isinstance(replace, str):
                    raise chk.fail((*rpath, "replace"), f"must be a string, not {_kind(replace)}")
                try:
                    # Compiles the template too, so a bad group reference fails here, not on some URL later.
                    re.compile(pattern).sub(replace, "")
                except (re.error, IndexError) as exc:
                    raise chk.fail((*rpath, "replace"), f"invalid replacement {replace!r}: {exc}",
                                   replace) from None
                if not replace.startswith("/") and not replace.startswith("\\"):
                    raise chk.fail((*rpath, "replace"), "a path rewrite must produce a path starting with '/'",
                                   replace)
                out[key].append({"pattern": pattern, "replace": replace})
    return out


def _dedupe(items: list[str]) -> list[str]:
    return list(dict.fromkeys(items))


def _merge(base: dict[str, Any], lab: dict[str, Any]) -> dict[str, Any]:
    """Lay a lab's rules over the defaults: switches win, lists extend, sites and wrappers add."""
    merged: dict[str, Any] = {
        "name": lab.get("name", base.get("name", "default")),
        "shortener_hosts": _dedupe(base.get("shortener_hosts", []) + lab.get("shortener_hosts", [])),
        "steps": {s: True for s in SWITCHES} | base.get("steps", {}) | lab.get("steps", {}),
    }
    for key in HOST_LISTS:
        # Only when given: a ruleset without these lists keeps the digest it had before they existed.
        hosts = _dedupe(base.get(key, []) + lab.get(key, []))
        if hosts:
            merged[key] = hosts
    for table, keys in _DATA_TABLES.items():
        merged[table] = {k: _dedupe(base.get(table, {}).get(k, []) + lab.get(table, {}).get(k, []))
                         for k in keys}
    wrappers = base.get("redirect_wrapper", []) + lab.get("redirect_wrapper", [])
    merged["redirect_wrapper"] = list({json.dumps(w, sort_keys=True): w for w in wrappers}.values())
    merged["site"] = {**base.get("site", {}), **lab.get("site", {})}
    return merged


def _digest(normalised: Mapping[str, Any]) -> str:
    # The name is a label for people, not a rule: renaming a file must not make it another ruleset.
    content = {k: v for k, v in normalised.items() if k != "name"}
    payload = json.dumps(content, sort_keys=True, ensure_ascii=False, separators=(",", ":"))
    h = hashlib.sha256()
    # The canonicaliser's and the Public Suffix List's versions are part of the identity: the same rules
    # under other code or another list can give other canonical URLs.
    h.update(f"linkfold-ruleset\n{CANON_VERSION}\n{PSL_VERSION}\n".encode())
    h.update(payload.encode("utf-8"))
    return h.hexdigest()


def _build(normalised: dict[str, Any], source: str, chk: _Checker) -> Ruleset:
    sites: dict[str, SiteRule] = {}
    site_hosts: dict[str, str] = {}
    for host, body in sorted(normalised["site"].items()):
        drops = [p.lower() for p in body.get("drop_params", [])]
        rule = SiteRule(
            host=host,
            outlet=body.get("outlet"),
            aliases=tuple(body.get("aliases", [])),
            keep_params=frozenset(p.lower() for p in body.get("keep_params", [])),
            drop_params=frozenset(p for p in drops if not p.endswith("*")),
            drop_param_prefixes=tuple(p[:-1] for p in drops if p.endswith("*")),
            drop_unlisted_params=body.get("drop_unlisted_params", False),
            article=tuple(re.compile(p) for p in body.get("article", [])),
            rewrites=tuple(Rewrite(re.compile(r["pattern"]), r["replace"]) for r in body.get("rewrite", [])),
            switches=MappingProxyType({k: v for k, v in body.items() if k in SWITCHES}),
        )
        sites[host] = rule
    for host, rule in sites.items():
        names = [host, *rule.aliases]
        folds = rule.switches.get("host_prefixes", normalised["steps"]["host_prefixes"])
        label, _, rest = host.partition(".")
        if folds and label in normalised["host_prefixes"]["labels"] and rest == registered_domain(host):
            # The canonical host of this site is the folded one; register it too, so that a canonical URL
            # meets the same site rule again when canonicalised twice (idempotence).
            names.append(rest)
        for name in names:
            owner = site_hosts.get(name)
            if owner is not None and owner != host:
                raise chk.fail(("site", host), f"host {name!r} is covered by both site {owner!r} and site "
                                               f"{host!r} (a host prefix folds onto it, or it is an alias "
                                               "twice); merge the sections or set host_prefixes = false",
                               None)
            site_hosts[name] = host
    amp, prt = normalised["amp"], normalised["print_view"]
    return Ruleset(
        name=normalised["name"],
        source=source,
        digest=_digest(normalised),
        shortener_hosts=frozenset(normalised["shortener_hosts"]),
        never_follow_hosts=frozenset(normalised.get("never_follow_hosts", ())),
        never_article_hosts=frozenset(normalised.get("never_article_hosts", ())),
        switches=MappingProxyType(dict(normalised["steps"])),
        tracking_names=frozenset(normalised["tracking"]["names"]),
        tracking_prefixes=tuple(normalised["tracking"]["prefixes"]),
        session_names=frozenset(normalised["session"]["names"]),
        host_prefix_labels=frozenset(normalised["host_prefixes"]["labels"]),
        amp_first_segments=frozenset(amp["first_segments"]),
        amp_last_segments=frozenset(amp["last_segments"]),
        amp_name_suffixes=tuple(amp["name_suffixes"]),
        amp_query=tuple(amp["query"]),
        amp_cache_suffixes=tuple(normalised["amp_cache"]["suffixes"]),
        print_last_segments=frozenset(prt["last_segments"]),
        print_query=tuple(prt["query"]),
        index_names=frozenset(normalised["index_documents"]["names"]),
        wrappers=tuple(Wrapper(re.compile(w["path"]), tuple(w["params"]), frozenset(w["hosts"]))
                       for w in normalised["redirect_wrapper"]),
        sites=MappingProxyType(sites),
        normalised=MappingProxyType(normalised),
        site_hosts=MappingProxyType(site_hosts),
    )


_REVIVED: dict[str, Ruleset] = {}


def _revive(digest: str, normalised: dict[str, Any], source: str) -> Ruleset:
    """A ruleset rebuilt from its normalised data (unpickling), built once per digest in a process."""
    rules = _REVIVED.get(digest)
    if rules is None:
        rules = _build(normalised, source, _Checker(source, "<pickled ruleset>"))
        if rules.digest != digest:  # the same data must give the same digest, or it is not the same ruleset
            raise RulesError("a ruleset changed in transit (its digest differs)", source="<pickled ruleset>")
        if len(_REVIVED) >= 64:
            _REVIVED.clear()
        _REVIVED[digest] = rules
    return rules


_TOML_POS = re.compile(r"\(at line (\d+), column \d+\)")


def _load_toml(text: str, source: str) -> dict:
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        message = str(exc)
        m = _TOML_POS.search(message)
        if m:
            line: int | None = int(m.group(1))
            message = message[: m.start()].rstrip()
        elif "end of document" in message:
            line = max(text.count("\n") + (0 if text.endswith("\n") else 1), 1)
        else:
            line = None
        raise RulesError(f"not valid TOML: {message}", source=source, line=line) from None


_DEFAULT_SOURCE: str | None = None
_DEFAULT_DATA: dict[str, Any] | None = None
_DEFAULT: Ruleset | None = None


def _default_data() -> tuple[str, dict[str, Any]]:
    global _DEFAULT_SOURCE, _DEFAULT_DATA
    if _DEFAULT_DATA is None:
        text = resources.files(__package__).joinpath("default_rules.toml").read_text(encoding="utf-8")
        chk = _Checker(text, "default_rules.toml")
        _DEFAULT_DATA = _check_and_normalise(_load_toml(text, chk.source), chk)
        _DEFAULT_SOURCE = text
    assert _DEFAULT_SOURCE is not None
    return _DEFAULT_SOURCE, _DEFAULT_DATA


def default_rules() -> Ruleset:
    """The built-in ruleset (``canon/default_rules.toml``), built once per process."""
    global _DEFAULT
    if _DEFAULT is None:
        text, data = _default_data()
        _DEFAULT = _build(_merge({}, data), text, _Checker(text, "default_rules.toml"))
    return _DEFAULT


def parse_rules(text: str, *, source: str = "<rules>") -> Ruleset:
    """Validate a lab rules file and lay it over the defaults. Raises RulesError naming source and line."""
    if not isinstance(text, str):
        raise RulesError("rules must be text", source=source)
    chk = _Checker(text, source)
    lab = _check_and_normalise(_load_toml(text, source), chk)
    _, base = _default_data()
    if "name" not in lab:
        lab["name"] = Path(source).stem if source and not source.startswith("<") else "rules"
    return _build(_merge(base, lab), text, chk)


def load_rules(path: str | Path) -> Ruleset:
    """Read and parse a rules file; errors name the file and line."""
    p = Path(path)
    try:
        raw = p.read_bytes()
    except OSError as exc:
        raise RulesError(f"cannot read rules file: {exc.strerror or exc}", source=str(p)) from None
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        line = raw[: exc.start].count(b"\n") + 1
        raise RulesError("rules file is not UTF-8 text", source=str(p), line=line) from None
    return parse_rules(text, source=str(p))
