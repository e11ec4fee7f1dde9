"""Reading an outlet list file: a CSV of domains or hosts, outlet names and lab-defined attributes.

Pure: no database, no network. :func:`parse_outlet_list` checks every line and raises
:class:`~linkfold.errors.OutletListError` naming the file, the line and the reason, so nothing is stored
from a file with a single bad line. :func:`rule_conflicts` compares the entries with a ruleset's site
outlet names (the rules file and the list must agree: one name for one outlet). The format is in
docs/outlets.md.
"""

from __future__ import annotations

import csv
import hashlib
import io
import re
from dataclasses import dataclass, field
from typing import Any

from ..canon import Ruleset, SiteRule, canonicalize, registered_domain
from ..errors import InvalidURL, OutletListError

#: The header names of the two required columns (any case); ``host`` may stand for ``domain``.
MATCH_COLUMNS = ("domain", "host")
OUTLET_COLUMN = "outlet"
#: Names an attribute column may not take: the columns ``linkfold outlets`` adds beside the attributes.
RESERVED = frozenset({"domain", "host", "outlet", "matches", "listed", "datasets", "sightings", "units", "urls",
                      "articles", "stories"})
#: How many problems one refused load reports (the first is the error's message).
MAX_PROBLEMS = 20

# A number in a cell is stored as a number when written plainly: "007" is a code, not seven.
_INT = re.compile(r"^-?(?:0|[1-9]\d{0,17})$")
_FLOAT = re.compile(r"^-?(?:0|[1-9]\d*)\.\d+$")
# What may be written in the domain column before the canonicaliser reads it: a host name, nothing else.
_HOSTLIKE = re.compile(r"^[^\s/\\:@?#\[\]]+$")


@dataclass(frozen=True, slots=True)
class OutletEntry:
    """One line of a list: ``match`` is the host as the canonicaliser writes it (lower case, ASCII, its
    ``www.``-style prefix folded like URL hosts), ``written`` the cell as given."""

    match: str
    outlet: str
    attributes: dict[str, Any]
    line_no: int
    written: str


@dataclass(frozen=True, slots=True)
class OutletList:
    """A parsed list file: its entries in file order, attribute columns, and the SHA-256 of its bytes."""

    source: str
    sha256: str
    columns: tuple[str, ...]
    entries: tuple[OutletEntry, ...]
    outlets: dict[str, dict[str, Any]] = field(default_factory=dict)


@dataclass(frozen=True, slots=True)
class RuleConflict:
    """An entry whose host the ruleset names with another outlet (``rules_host``: the site's host)."""

    line_no: int
    match: str
    listed: str
    rules: str
    rules_host: str
    #: True when the site lies under the entry's registered domain (rather than covering the entry's host).
    under: bool = False

    def reason(self) -> str:
        where = "" if self.rules_host == self.match else f" (its site {self.rules_host!r})"
        return (f"{self.match!r}{where} is outlet {self.rules!r} in the ruleset in force, "
                f"{self.listed!r} in this list")


def _cell_value(text: str) -> Any:
    text = text.strip()
    if not text:
        return None
    if _INT.match(text):
        return int(text)
    if _FLOAT.match(text):
        return float(text)
    return text


def _match_of(cell: str, rules: Ruleset | None) -> tuple[str | None, str]:
    """The host a domain cell stands for as canonical URLs store it, or (None, why not)."""
    text = cell.strip()
    if not text:
        return None, "empty domain"
    if not _HOSTLIKE.match(text):
        return None, f"not a domain: {text!r} (write a host name only, without scheme, port or path)"
    try:
        host = canonicalize(f"http://{text}/", rules).host
    except InvalidURL as exc:
        return None, f"not a domain: {text!r} ({exc.detail or exc.reason})"
    if registered_domain(host) is None:
        return None, f"not a domain: {text!r} (no registered domain: an IP address, a single label or a public suffix)"
    return host, ""


def parse_outlet_list(data: bytes, *, source: str, rules: Ruleset | None = None) -> OutletList:
    """Parse and check an outlet list file's bytes; ``rules`` is the ruleset whose host folds apply."""
    digest = hashlib.sha256(data).hexdigest()
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        line = data[:exc.start].count(b"\n") + 1
        raise OutletListError(f"not UTF-8 (byte {exc.start + 1})", source=source, line=line) from None
    if "\x00" in text:
        raise OutletListError("not a text file (NUL byte)", source=source,
                              line=text[:text.index("\x00")].count("\n") + 1)
    reader = csv.reader(io.StringIO(text, newline=""), strict=True)
    problems: list[tuple[int | None, str]] = []
    try:
        header = next(reader, None)
        while header is not None and not any(h.strip() for h in header):
            header = next(reader, None)
        if header is None:
            raise OutletListError("empty file: a header line naming the columns 'domain' and 'outlet' is required",
                                  source=source, line=1)
        header_line = reader.line_num
        names = [h.strip().lower() for h in header]
        _check_header(names, source, header_line)
        match_col = next(i for i, n in enumerate(names) if n in MATCH_COLUMNS)
        outlet_col = names.index(OUTLET_COLUMN)
        attr_cols = [(i, header[i].strip()) for i in range(len(names)) if i not in (match_col, outlet_col)]
        entries: list[OutletEntry] = []
        seen: dict[str, int] = {}
        for row in reader:
            line = reader.line_num
            if not any(cell.strip() for cell in row):
                continue
            if len(row) != len(header):
                problems.append((line, f"{len(row)} cells, the header has {len(header)}"))
                continue
            outlet = row[outlet_col].strip()
            if not outlet:
                problems.append((line, "empty outlet name"))
                continue
            if len(outlet) > 255:
                problems.append((line, "outlet name longer than 255 characters"))
                continue
            match, why = _match_of(row[match_col], rules)
            if match is None:
                problems.append((line, why))
                continue
            if match in seen:
                same = "" if match == row[match_col].strip().lower() else f" ({row[match_col].strip()!r} folds to it)"
                problems.append((line, f"duplicate domain {match!r}{same}: already on line {seen[match]}"))
                continue
            seen[match] = line
            attrs = {name: _cell_value(row[i]) for i, name in attr_cols}
            entries.append(OutletEntry(match, outlet, attrs, line, row[match_col].strip()))
    except csv.Error as exc:
        problems.append((reader.line_num, f"not valid CSV: {exc}"))
    outlets = _outlet_attributes(entries, problems)
    if problems:
        _raise(problems, source)
    return OutletList(source, digest, tuple(name for _i, name in attr_cols), tuple(entries), outlets)


def _check_header(names: list[str], source: str, line: int) -> None:
    def fail(reason: str) -> None:
        raise OutletListError(reason, source=source, line=line,
                              hint="the header names a 'domain' (or 'host') column and an 'outlet' column; "
                                   "any other column is an attribute")

    matches = [n for n in names if n in MATCH_COLUMNS]
    missing = [n for n in ("domain", OUTLET_COLUMN) if not (matches if n == "domain" else n in names)]
    if missing:
        fail("missing column " + " and ".join(repr(n) for n in missing))
    if len(matches) > 1:
        fail("give one of the columns 'domain' and 'host', not both")
    for i, name in enumerate(names):
        if not name:
            fail(f"column {i + 1} has no name")
        if names.index(name) != i:
            fail(f"column {name!r} appears twice")
        if name in RESERVED and name not in MATCH_COLUMNS and name != OUTLET_COLUMN:
            fail(f"column {name!r} is a name the outlets table uses for its counts: rename the attribute")


def _outlet_attributes(entries: list[OutletEntry], problems: list[tuple[int | None, str]]) -> dict[str, dict[str, Any]]:
    """Attributes per outlet: the lines of one outlet (a group of domains) agree where both give a value; a
    value left empty on one line is taken from another."""
    out: dict[str, dict[str, Any]] = {}
    origin: dict[tuple[str, str], int] = {}
    for e in entries:
        have = out.setdefault(e.outlet, {})
        for name, value in e.attributes.items():
            if value is None:
                have.setdefault(name, None)
                continue
            if have.get(name) is None:
                have[name] = value
                origin[(e.outlet, name)] = e.line_no
            elif have[name] != value:
                problems.append((e.line_no, f"outlet {e.outlet!r} has {name} = {value!r} here and "
                                            f"{have[name]!r} on line {origin[(e.outlet, name)]}"))
    return out


def _raise(problems: list[tuple[int | None, str]], source: str) -> None:
    problems.sort(key=lambda p: p[0] or 0)
    first_line, first = problems[0]
    more = len(problems) - 1
    raise OutletListError(first, source=source, line=first_line, problems=tuple(problems[:MAX_PROBLEMS]),
                          hint=f"and {more} more problem{'s' if more != 1 else ''}; nothing was stored"
                          if more else "nothing was stored")


def rule_conflicts(entries: tuple[OutletEntry, ...], rules: Ruleset) -> list[RuleConflict]:
    """Entries whose URLs the ruleset gives another outlet name: the site covering the entry's host (its own
    section, or its registered domain's), and, for an entry that names a registered domain, every site
    under that domain not listed on a line of its own (the list's domain entry would otherwise rename it)."""
    listed = {e.match for e in entries}
    site_hosts: dict[str, SiteRule] = {}
    for rule in rules.sites.values():
        if rule.outlet:
            try:
                site_hosts[canonicalize(f"http://{rule.host}/", rules).host] = rule
            except InvalidURL:
                continue
    out: list[RuleConflict] = []
    for e in entries:
        site = rules.site_for(e.match, registered_domain(e.match))
        if site is not None and site.outlet and site.outlet != e.outlet:
            out.append(RuleConflict(e.line_no, e.match, e.outlet, site.outlet, site.host))
        if registered_domain(e.match) == e.match:
            for host, sub in sorted(site_hosts.items()):
                if (host.endswith("." + e.match) and host not in listed and sub is not site
                        and sub.outlet != e.outlet):
                    out.append(RuleConflict(e.line_no, e.match, e.outlet, str(sub.outlet), host, under=True))
    return out


__all__ = [
    "MATCH_COLUMNS",
    "OUTLET_COLUMN",
    "OutletEntry",
    "OutletList",
    "RuleConflict",
    "parse_outlet_list",
    "rule_conflicts",
]
