"""robots.txt as RFC 9309 (Robots Exclusion Protocol) defines it: parsing and matching, no I/O.

We parse it ourselves rather than with the standard library's ``urllib.robotparser`` because that parser
applies the first rule that matches in file order and knows neither ``*`` nor ``$``, while RFC 9309
§2.2.2 says the *longest* matching rule wins (``allow`` on a tie) and §2.2.3 defines both special
characters. A site that writes ``Allow: /news/`` before ``Disallow: /news/private/`` would otherwise be
read the wrong way round.

What the HTTP status of the robots file means (§2.3.1) is decided by the caller
(:meth:`linkfold.web.client.SafeClient.robots_rules`); this module turns a file's text into a
:class:`RobotRules` and answers ``allows(path)``.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field

#: RFC 9309 §2.5: a crawler SHOULD parse at least 500 kibibytes; we read that much and no more.
ROBOTS_MAX_BYTES = 500 * 1024

_UNRESERVED = frozenset(b"ABCDEFGHIJKLMNOPQRSTUVWXYZabcdefghijklmnopqrstuvwxyz0123456789-._~")  # RFC 3986 §2.3
_PCT = re.compile(rb"%([0-9A-Fa-f]{2})")


def _normalise_octets(text: str, *, is_pattern: bool) -> str:
    """Bring a path or a pattern to one comparable form (RFC 9309 §2.2.2).

    Octets outside US-ASCII are percent-encoded (as UTF-8); a percent-encoded octet of an unreserved
    character is decoded; other percent-encodings keep their meaning with upper-case hex digits
    (RFC 3986 §6.2.2.1 case normalisation). In a pattern ``*`` and ``$`` are special; in a path they are
    literal, so they are encoded (§2.2.3: a pattern matches them verbatim only as ``%2A`` / ``%24``).
    """
    raw = text.encode("utf-8")

    def decode(match: re.Match[bytes]) -> bytes:
        octet = int(match.group(1), 16)
        if octet in _UNRESERVED:
            return bytes([octet])
        return b"%" + match.group(1).upper()

    raw = _PCT.sub(decode, raw)
    out = bytearray()
    for octet in raw:
        if octet >= 0x80 or octet <= 0x20 or octet == 0x7F or (not is_pattern and octet in b"*$"):
            out += b"%%%02X" % octet
        else:
            out.append(octet)
    return out.decode("ascii")


@dataclass(frozen=True)
class Rule:
    allow: bool
    pattern: str  # normalised; may contain ``*`` and a final ``$``
    line: int

    @property
    def regex(self) -> re.Pattern[str]:
        return _compile(self.pattern)

    def length(self) -> int:
        # RFC 9309 §2.2.2: "the most specific match found MUST be used. The most specific match is the
        # match that has the most octets." We count the pattern's octets, special characters included,
        # which is how the examples of §5 read.
        return len(self.pattern)


_CACHE: dict[str, re.Pattern[str]] = {}


def _compile(pattern: str) -> re.Pattern[str]:
    compiled = _CACHE.get(pattern)
    if compiled is None:
        anchored = pattern.endswith("$")
        body = pattern[:-1] if anchored else pattern
        regex = ".*".join(re.escape(part) for part in body.split("*"))
        compiled = re.compile(regex + ("$" if anchored else ""), re.DOTALL)
        if len(_CACHE) < 4096:
            _CACHE[pattern] = compiled
    return compiled


@dataclass(frozen=True)
class RobotRules:
    """The rules that apply to one product token, ready to answer :meth:`allows`."""

    rules: tuple[Rule, ...] = ()
    #: How the rules were obtained, for messages: ``file``, or why everything is allowed or disallowed.
    basis: str = "file"

    @classmethod
    def allow_all(cls, basis: str = "allow_all") -> RobotRules:
        return cls((), basis)

    @classmethod
    def disallow_all(cls, basis: str = "disallow_all") -> RobotRules:
        return cls((Rule(False, "/", 0),), basis)

    def allows(self, path: str) -> bool:
        """May the path (with its query) be fetched? ``path`` as sent in the request target."""
        target = _normalise_octets(path or "/", is_pattern=False)
        if target == "/robots.txt":
            return True  # §2.2.2: "The /robots.txt URI is implicitly allowed."
        best: Rule | None = None
        for rule in self.rules:
            if not rule.pattern:
                continue  # an empty value matches nothing (e.g. "Disallow:" allows everything)
            if rule.regex.match(target) is None:
                continue
            if best is None or rule.length() > best.length() or (
                    rule.length() == best.length() and rule.allow and not best.allow):
                best = rule  # §2.2.2: longest match; "allow" SHOULD win on equivalent rules
        return True if best is None else best.allow


@dataclass
class _Group:
    agents: list[str] = field(default_factory=list)
    rules: list[Rule] = field(default_factory=list)


_LINE = re.compile(r"^\s*([A-Za-z-]+)\s*:\s*(.*?)\s*$")


def parse_robots(text: str, product: str) -> RobotRules:
    """The rules of ``text`` that apply to ``product`` (the crawler's product token, e.g. ``linkfold``).

    RFC 9309 §2.2.1: groups whose user-agent matches the product token case-insensitively are combined;
    without one, the ``*`` groups apply; without those, everything is allowed. Lines that do not parse
    and unknown keys (``sitemap`` …) are ignored, as §2.2.4 and the robustness of §2.3 ask.
    """
    token = product.lower()
    groups: list[_Group] = []
    current: _Group | None = None
    last_was_agent = False
    for number, line in enumerate(text.splitlines(), start=1):
        line = line.split("#", 1)[0]
        match = _LINE.match(line)
        if match is None:
            continue
        key, value = match.group(1).lower(), match.group(2)
        if key == "user-agent":
            if current is None or not last_was_agent:
                current = _Group()
                groups.append(current)
            current.agents.append(value.strip().lower())
            last_was_agent = True
        elif key in {"allow", "disallow"}:
            last_was_agent = False
            if current is None:
                continue  # a rule before any user-agent line belongs to no group (§2.1)
            current.rules.append(Rule(key == "allow", _normalise_octets(value, is_pattern=True), number))
        else:
            # Other records (sitemap, crawl-delay, …) do not end a user-agent run's group.
            continue
    mine = [g for g in groups if token in g.agents]
    if not mine:
        mine = [g for g in groups if "*" in g.agents]
    return RobotRules(tuple(rule for g in mine for rule in g.rules), "file")


__all__ = ["ROBOTS_MAX_BYTES", "RobotRules", "Rule", "parse_robots"]
