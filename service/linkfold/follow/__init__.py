"""Following links: redirects, short links and wrapper URLs, resolved safely and politely.

* :func:`follow_links` — the ``linkfold follow`` stage: follow pending canonical URLs, store each
  redirect hop as a ``redirect`` link and each URL's outcome (resolved / failed / refused).
* :func:`import_redirects` — ``linkfold follow --import``: (short, expanded) pairs from a file.
* :func:`follow_report` — ``linkfold follow-report``: outcomes of the links a dataset holds, dead share.
* :class:`SafeClient` — the HTTP client shared with page fetching: request-forgery guard, caps,
  per-host politeness, robots.txt, retries. See docs/following.md.
"""

from __future__ import annotations

from .chain import Chain, Hop, State, follow_chain
from .client import ClientConfig, Failure, FetchError, Reply, SafeClient
from .guard import AddressGuard, AddressRefused, ResolveFailed, StaticResolver, system_resolver
from .imports import ImportSummary, import_redirects
from .report import FollowReport, explain_refusal, follow_report
from .stage import FollowSummary, follow_links, next_attempt

__all__ = [
    "AddressGuard",
    "AddressRefused",
    "Chain",
    "ClientConfig",
    "Failure",
    "FetchError",
    "FollowReport",
    "FollowSummary",
    "Hop",
    "ImportSummary",
    "Reply",
    "ResolveFailed",
    "SafeClient",
    "State",
    "StaticResolver",
    "explain_refusal",
    "follow_chain",
    "follow_links",
    "follow_report",
    "import_redirects",
    "next_attempt",
    "system_resolver",
]
