"""Everything canonicalisation decides from the host alone, computed once per host and ruleset.

A ruleset's switches, overridden by a site rule, give each host its :class:`_Switches`; a host's
:class:`_HostPlan` carries them with the host's folded name, registered domain, outlet, site rule and
the verdicts on query-parameter names. :class:`_Planner` is the part of the canonicalising engine
(:mod:`linkfold.canon.core`) that builds and caches the plans; the path and query folds
(:mod:`linkfold.canon._folds`) and the whole-URL steps build on it. Pure: no I/O.
"""

from __future__ import annotations

from dataclasses import dataclass

from ..errors import InvalidURL
from . import _parse
from .hosts import host_problem, registered_domain
from .rules import SWITCHES, Ruleset, SiteRule


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


class _Planner:
    """A ruleset compiled for canonicalising: marker tables, and the per-host plan cache."""

    HOST_CACHE = 100_000

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
