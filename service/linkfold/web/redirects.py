"""The one redirect loop: where one URL leads over the safe client; no database, one chain in, one out.

Following and fetching both walk a chain with :func:`follow_chain`; what they need differs in one switch,
``keep_body``:

* ``keep_body=False`` (following): HEAD first, because it costs the server nothing and a redirect needs
  no body. When the server refuses HEAD — any 4xx or 5xx other than 429/503, which the client already
  retried — the same URL is asked again with GET (after robots.txt allows it), since servers that
  mishandle HEAD answer with all kinds of errors (common practice, no source). A GET's body is never read.
* ``keep_body=True`` (fetching): every hop is a GET that robots.txt must allow first (RFC 9309), and the
  body of the final 2xx answer is kept in :attr:`Chain.reply`, cut at ``http_max_bytes`` and flagged
  ``truncated`` rather than refused (the start of an article is what extraction needs). When robots.txt
  says no, the address is checked first, so a refused address is stored as the guard's refusal rather than
  as a robots verdict (a robots.txt on a refused address is unreachable, which RFC 9309 §2.3.1.4 makes
  "disallow all").

The rest is the same in both modes. Redirects are 301, 302, 303, 307 and 308 (RFC 9110 §15.4); the chain
stops at the first other answer (2xx: resolved; anything else: failed). ``Location`` is resolved against
the URL that was requested by RFC 3986 §5.2 (RFC 9110 §10.2.2); the requested URL's fragment is not part
of that base (RFC 3986 §5.1 takes the base without it, §5.2.2 never copies it), and when the ``Location``
has no fragment of its own the requested URL's is kept (RFC 9110 §10.2.2). A chain stops as a ``loop``
when a redirect leads back to a URL already in it — URLs compared without fragments, since a fragment is
never sent (RFC 9110 §7.1) — and as ``too_many_hops`` when more than ``max_hops`` redirects would be
needed. A URL on a host the rules file lists in ``never_follow_hosts`` (the start or any hop) ends the
chain as refused before any request is sent to it.

The URLs requested are the raw hop URLs exactly as the chain produced them, never their canonical forms:
a canonical fold (http→https, dropped parameters) could name a URL that the server does not answer.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field
from datetime import UTC, datetime
from enum import StrEnum

import httpx

from ..errors import InvalidURL
from .client import Reply, SafeClient
from .failures import NEVER_FOLLOW_REASON, REDIRECT_STATUSES, REFUSALS, Failure, FetchError, classify
from .guard import AddressRefused, ResolveFailed, literal_address


class State(StrEnum):
    """Where a chain ended (stored in ``follow_results.state``; fetching stores ``resolved`` as ``fetched``)."""

    RESOLVED = "resolved"  # the chain ended in a 2xx answer
    FAILED = "failed"      # it ended anywhere else: see the failure class
    REFUSED = "refused"    # we chose not to go on: request-forgery guard, robots.txt, never_follow_hosts


@dataclass(frozen=True)
class Hop:
    """One redirect that was observed: ``src`` answered ``status`` with a Location naming ``dst``."""

    number: int  # 1-based
    src: str
    dst: str
    status: int
    method: str
    at: datetime


@dataclass(frozen=True)
class Chain:
    """Where one URL led. ``final_url`` is where the chain stopped (answered, failed or refused)."""

    start: str
    state: State
    final_url: str
    hops: tuple[Hop, ...] = ()
    failure: Failure | None = None
    detail: str | None = None
    status: int | None = None  # HTTP status of the last answer, when there was one
    retry_after: float | None = None  # seconds the server asked us to wait (429/503)
    reason: str | None = None  # a refusal's stable key (FetchError.reason)
    requests: int = 0
    at: datetime = field(default_factory=lambda: datetime.now(UTC))
    reply: Reply | None = None  # the final 2xx answer; its body only with keep_body


def defragment(url: str) -> str:
    """``url`` without its fragment: what is sent on the wire (RFC 9110 §7.1) and the base a reference is
    resolved against (RFC 3986 §5.1)."""
    return url.split("#", 1)[0]


def decode_location(reply: Reply) -> str | None:
    """The Location header as text. Servers send raw UTF-8 in it although RFC 9110 §5.5 asks for
    ASCII; httpx decodes header bytes as Latin-1, so we re-read the raw bytes as UTF-8 first."""
    for name, value in reply.headers.raw:
        if name.lower() == b"location":
            try:
                return value.decode("utf-8").strip()
            except UnicodeDecodeError:
                return value.decode("latin-1").strip()
    return None


def next_url(current: str, location: str) -> str:
    """The absolute URL a ``Location`` names, requested from ``current``.

    Raises :class:`InvalidURL` when it is not an http(s) URL with a host.
    """
    from ..canon import resolve_reference

    target = resolve_reference(defragment(current), location)
    if "#" not in target and "#" in current:
        target += "#" + current.split("#", 1)[1]  # RFC 9110 §10.2.2: the fragment is inherited
    try:
        parsed = httpx.URL(target)
    except httpx.InvalidURL as exc:
        raise InvalidURL("unparsable", str(exc)) from None
    if parsed.scheme not in {"http", "https"}:
        raise InvalidURL("not_http", f"Location leads to a {parsed.scheme or 'relative'}: URL")
    if not parsed.host:
        raise InvalidURL("no_host", "Location has no host")
    return target


async def _guard_check(client: SafeClient, url: str) -> None:
    """Raise the guard's refusal for ``url``'s host, if it has one.

    The client treats a robots.txt it cannot reach as "disallow all" (RFC 9309 §2.3.1.4), and a robots.txt
    on a refused address is unreachable, so without this a private address would be stored as a robots
    refusal. Asked only after robots.txt said no, so the common path resolves each name once.
    """
    parsed = httpx.URL(url)
    host = parsed.host
    port = parsed.port or (443 if parsed.scheme == "https" else 80)
    literal = literal_address(host)
    try:
        addresses = [str(literal)] if literal is not None else await client.backend.resolver(host, port)
        client.guard.check_all(host, addresses)
    except (AddressRefused, ResolveFailed) as exc:
        raise classify(exc, url) from None


async def _ask_headers(client: SafeClient, url: str) -> tuple[Reply, int]:
    """HEAD, then GET when HEAD is refused; no body read. Returns the reply and the requests made."""
    reply = await client.request("HEAD", url, read_body=False)
    requests = reply.attempts
    if reply.status >= 400 and reply.status not in (429, 503):
        await client.require_robots(url, context=f"HEAD answered {reply.status}; for the GET, ")
        reply = await client.request("GET", url, read_body=False)
        requests += reply.attempts
    return reply, requests


async def _ask_page(client: SafeClient, url: str) -> tuple[Reply, int]:
    """A GET that robots.txt allows, its body kept up to the cap. Returns the reply and the requests made."""
    if not await client.robots_allows(url):
        await _guard_check(client, url)  # a refused address is "refused", not a robots verdict
        await client.require_robots(url)  # raises, saying whether the file or its absence said no
    reply = await client.request("GET", url, truncate=True)
    return reply, reply.attempts


async def follow_chain(client: SafeClient, start: str, *, max_hops: int, keep_body: bool = False,
                       now: Callable[[], datetime] = lambda: datetime.now(UTC),
                       never_follow: Callable[[str], str | None] | None = None) -> Chain:
    """Follow ``start`` to where it leads (see the module doc for ``keep_body``); never raises for a
    single URL's failure.

    ``never_follow(url)`` names why a URL must not be asked (a host the rules file lists) or returns None;
    such a URL, the start or any hop, ends the chain as refused before any request is sent to it.
    """
    ask = _ask_page if keep_body else _ask_headers
    url = start
    visited = {defragment(url)}
    hops: list[Hop] = []
    requests = 0
    began = now()

    def stop(state: State, failure: Failure | None, detail: str | None, *, final: str,
             status: int | None = None, retry_after: float | None = None, reason: str | None = None,
             reply: Reply | None = None) -> Chain:
        return Chain(start=start, state=state, final_url=final, hops=tuple(hops), failure=failure,
                     detail=detail, status=status, retry_after=retry_after, reason=reason, requests=requests,
                     at=began, reply=reply)

    while True:
        why = never_follow(url) if never_follow is not None else None
        if why is not None:
            return stop(State.REFUSED, Failure.NEVER_FOLLOW, why, final=url, reason=NEVER_FOLLOW_REASON)
        try:
            reply, made = await ask(client, url)
        except FetchError as exc:
            state = State.REFUSED if exc.failure in REFUSALS else State.FAILED
            return stop(state, exc.failure, exc.detail, final=url, reason=exc.reason)
        except httpx.InvalidURL as exc:  # robots.txt's origin of a URL httpx cannot read
            return stop(State.FAILED, Failure.BAD_URL, str(exc), final=url)
        requests += made
        status = reply.status
        if status in REDIRECT_STATUSES:
            location = decode_location(reply)
            if not location:
                return stop(State.FAILED, Failure.BAD_LOCATION, f"HTTP {status} without a Location header",
                            final=url, status=status)
            try:
                target = next_url(url, location)
            except InvalidURL as exc:
                return stop(State.FAILED, Failure.BAD_LOCATION, f"Location {location[:200]!r}: {exc}",
                            final=url, status=status)
            hops.append(Hop(len(hops) + 1, url, target, status, reply.method, now()))
            if defragment(target) in visited:
                return stop(State.FAILED, Failure.LOOP, f"hop {len(hops)} leads back to {target[:200]}",
                            final=target, status=status)
            if len(hops) > max_hops:
                return stop(State.FAILED, Failure.TOO_MANY_HOPS, f"more than {max_hops} redirects",
                            final=target, status=status)
            visited.add(defragment(target))
            url = target
            continue
        if 200 <= status < 300:
            return stop(State.RESOLVED, None, None, final=url, status=status, reply=reply)
        if 400 <= status < 500:
            failure = Failure.HTTP_4XX
        elif 500 <= status < 600:
            failure = Failure.HTTP_5XX
        else:
            failure = Failure.HTTP_OTHER
        return stop(State.FAILED, failure, f"HTTP {status}", final=url, status=status,
                    retry_after=reply.retry_after)


__all__ = ["Chain", "Hop", "State", "decode_location", "defragment", "follow_chain", "next_url"]
