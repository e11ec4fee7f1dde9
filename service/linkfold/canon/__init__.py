"""The canonicaliser: a pure function from a raw URL and a ruleset to a canonical URL and its url key.

No I/O, no database, no network. Every stage that meets a URL calls :func:`canonicalize` (or a
:class:`Canonicaliser`, which adds a bounded cache). The algorithm, its switches and the rules-file
format are documented in docs/canonical-form.md.
"""

from __future__ import annotations

from ._parse import whatwg_href
from ._version import CANON_VERSION, PSL_VERSION
from .core import MAX_URL_LENGTH, Canonical, Canonicaliser, canonicalize
from .hosts import registered_domain
from .keys import url_key
from .resolve import resolve_reference
from .rules import SWITCHES, Ruleset, SiteRule, default_rules, load_rules, parse_rules

__all__ = [
    "CANON_VERSION",
    "MAX_URL_LENGTH",
    "PSL_VERSION",
    "SWITCHES",
    "Canonical",
    "Canonicaliser",
    "Ruleset",
    "SiteRule",
    "canonicalize",
    "default_rules",
    "load_rules",
    "parse_rules",
    "registered_domain",
    "resolve_reference",
    "url_key",
    "whatwg_href",
]
