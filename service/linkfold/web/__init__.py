"""Talking HTTP safely and politely: the shared layer below the stages that request URLs.

Nothing here knows about stages or tables; following (:mod:`linkfold.follow`) and fetching
(:mod:`linkfold.content.fetching`) are thin stages over it. One idea per module:

* :mod:`.guard` — the request-forgery guard: which addresses may be contacted (resolvers too);
* :mod:`.transport` — the guarded httpx transport: every connection passes the guard first;
* :mod:`.config` — :class:`ClientConfig`, what the client reads from the settings;
* :mod:`.failures` — the stored failure classes (:class:`Failure`) and :class:`FetchError`;
* :mod:`.refusals` — what each refusal reason means, for people;
* :mod:`.retry` — Retry-After, backoff within a run, :func:`next_attempt` across runs;
* :mod:`.pacing` — per-host and global request slots, the per-host delay;
* :mod:`.robots` — robots.txt parsing and matching (RFC 9309), no I/O;
* :mod:`.client` — :class:`SafeClient`: one request with caps and retries, robots.txt per origin;
* :mod:`.redirects` — the one redirect loop, :func:`follow_chain` (``keep_body`` for fetching);
* :mod:`.runner` — what a requesting stage does around it: many chains at once, batches, counts.

See docs/following.md.
"""

from __future__ import annotations

from .client import Reply, SafeClient
from .config import ClientConfig
from .failures import NEVER_FOLLOW_REASON, REFUSALS, Failure, FetchError, classify
from .guard import AddressGuard, AddressRefused, ResolveFailed, Resolver, StaticResolver, system_resolver
from .redirects import Chain, Hop, State, follow_chain, next_url
from .refusals import explain_refusal, refusal_class
from .retry import next_attempt
from .runner import due_again, never_follow_check, request_url, run_chains, tally

__all__ = [
    "NEVER_FOLLOW_REASON",
    "REFUSALS",
    "AddressGuard",
    "AddressRefused",
    "Chain",
    "ClientConfig",
    "Failure",
    "FetchError",
    "Hop",
    "Reply",
    "ResolveFailed",
    "Resolver",
    "SafeClient",
    "State",
    "StaticResolver",
    "classify",
    "due_again",
    "explain_refusal",
    "follow_chain",
    "never_follow_check",
    "next_attempt",
    "next_url",
    "refusal_class",
    "request_url",
    "run_chains",
    "system_resolver",
    "tally",
]
