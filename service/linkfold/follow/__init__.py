"""Following links: redirects, short links and wrapper URLs, resolved safely and politely.

* :func:`follow_links` — the ``linkfold follow`` stage: follow pending canonical URLs, store each
  redirect hop as a ``redirect`` link and each URL's outcome (resolved / failed / refused).
* :func:`import_redirects` — ``linkfold redirects load``: (short, expanded) pairs from a file.
* :func:`follow_report` — ``linkfold follow-report``: outcomes of the links a dataset holds, dead share.

The requests themselves — request-forgery guard, caps, per-host politeness, robots.txt, retries and the
redirect loop — are the shared layer :mod:`linkfold.web`, which page fetching uses too. See
docs/following.md.
"""

from __future__ import annotations

from .imports import ImportSummary, import_redirects
from .report import FollowReport, follow_report
from .stage import FollowSummary, follow_links

__all__ = [
    "FollowReport",
    "FollowSummary",
    "ImportSummary",
    "follow_links",
    "follow_report",
    "import_redirects",
]
