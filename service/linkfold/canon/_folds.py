"""The path and query folds of canonicalisation: percent-encoding, session IDs, site rewrites, AMP and
print views, index documents, trailing slashes, tracking and site parameters, parameter order.

:class:`_Folds` adds them to the host planner (:mod:`linkfold.canon._hostplan`); the canonicalising
engine (:mod:`linkfold.canon.core`) runs them in the order docs/canonical-form.md gives. Pure: no I/O.
"""

from __future__ import annotations

import re
from functools import lru_cache

from ..errors import InvalidURL
from . import _parse
from ._hostplan import _HostPlan, _Planner, _Switches
from .rules import SiteRule

_PCT = re.compile(r"%([0-9A-Fa-f]{2})")
# RFC 3986 §2.3 unreserved characters.
_UNRESERVED = frozenset("ABCDEFGHIJKLMNOPQRSTUVWXYZabcdefghijklmnopqrstuvwxyz0123456789-._~")

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


def _first(item: tuple[str, str]) -> str:
    return item[0]


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



class _Folds(_Planner):
    """The host planner with the path and query folds."""

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
