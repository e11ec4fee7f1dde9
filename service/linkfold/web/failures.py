"""Why one URL could not be asked or answered: the stored failure classes and refusal reasons.

Every single-URL failure is a :class:`FetchError` with a stable :class:`Failure` class, which the stages
store as text (``follow_results.failure``, ``fetch_results.failure``), so the values never change. A
refusal (we chose not to ask) also carries a ``reason`` key (``private``, ``loopback`` … from the guard,
``robots_file``, ``robots_unavailable``, ``never_follow_hosts``) that :mod:`.refusals` explains.
"""

from __future__ import annotations

import ssl
from enum import StrEnum

import httpx

from .guard import AddressRefused, ResolveFailed

REDIRECT_STATUSES = frozenset({301, 302, 303, 307, 308})  # RFC 9110 §15.4.2–§15.4.9
RETRY_STATUSES = frozenset({429, 503})  # RFC 6585 §4, RFC 9110 §15.6.4: both may carry Retry-After


class Failure(StrEnum):
    """Why one URL could not be fetched or followed; stored as text, so keep the values stable."""

    DNS = "dns"                      # the name does not resolve
    CONNECT = "connect"              # connection refused, reset, or broken mid-response
    TIMEOUT = "timeout"              # no complete answer within http_timeout
    TLS = "tls"                      # TLS handshake failure (protocol, cipher, a connection cut in it)
    TLS_CERTIFICATE = "tls_certificate"  # the server's certificate failed the check (issuer, name, dates)
    PROTOCOL = "protocol"            # the server did not speak valid HTTP/1.1
    TOO_LARGE = "too_large"          # the body is over http_max_bytes
    REFUSED = "refused"              # the request-forgery guard refused the address
    ROBOTS = "robots"                # robots.txt disallows the GET
    NEVER_FOLLOW = "never_follow"    # the rules file lists the host in never_follow_hosts: not asked
    BAD_URL = "bad_url"              # not a fetchable http(s) URL
    HTTP_4XX = "http_4xx"            # the chain ended in a client error
    HTTP_5XX = "http_5xx"            # the chain ended in a server error (after retries)
    HTTP_OTHER = "http_other"        # 1xx or a 3xx we do not follow (300, 304, 305 …)
    LOOP = "loop"                    # a redirect led back to a URL already in the chain
    TOO_MANY_HOPS = "too_many_hops"  # more than max_hops redirects
    BAD_LOCATION = "bad_location"    # a redirect without a usable Location header


#: The refusal reason (``FetchError.reason``) of a URL on a host the rules file lists in never_follow_hosts.
NEVER_FOLLOW_REASON = "never_follow_hosts"

#: Failures that a retry in the same run may cure (a later --retry-failed may cure any of them).
TRANSIENT = frozenset({Failure.CONNECT, Failure.TIMEOUT})

#: The failure classes that are our refusals rather than the server's or the network's failures.
REFUSALS = frozenset({Failure.REFUSED, Failure.ROBOTS, Failure.NEVER_FOLLOW})


class FetchError(Exception):
    """One request failed; ``failure`` is the stored class, ``detail`` a short text for people, and
    ``reason`` a stable key for a refusal (``private``, ``loopback`` … from the guard, ``robots_file``,
    ``robots_unavailable``), so refusals can be counted and explained (:func:`.refusals.explain_refusal`)."""

    def __init__(self, failure: Failure, detail: str, *, url: str | None = None,
                 reason: str | None = None) -> None:
        super().__init__(f"{failure.value}: {detail}")
        self.failure = failure
        self.detail = detail
        self.url = url
        self.reason = reason


def _tls_failure(exc: BaseException) -> Failure | None:
    """``TLS_CERTIFICATE`` when a certificate check failed anywhere in the exception's chain, ``TLS`` for
    any other TLS error, else None."""
    seen: set[int] = set()
    cur: BaseException | None = exc
    found = None
    while cur is not None and id(cur) not in seen:
        if isinstance(cur, ssl.SSLCertVerificationError | ssl.CertificateError):
            return Failure.TLS_CERTIFICATE
        if isinstance(cur, ssl.SSLError):
            found = Failure.TLS
        seen.add(id(cur))
        cur = cur.__cause__ or cur.__context__
    return found


def classify(exc: BaseException, url: str) -> FetchError:
    """A transport exception as a stored failure class."""
    if isinstance(exc, FetchError):
        return exc
    if isinstance(exc, AddressRefused):
        return FetchError(Failure.REFUSED, str(exc), url=url, reason=exc.kind)
    if isinstance(exc, ResolveFailed):
        return FetchError(Failure.DNS, str(exc), url=url)
    if isinstance(exc, TimeoutError | httpx.TimeoutException):
        return FetchError(Failure.TIMEOUT, f"no complete answer in time ({type(exc).__name__})", url=url)
    tls = _tls_failure(exc)
    if tls is Failure.TLS_CERTIFICATE:
        return FetchError(tls, f"{exc or type(exc).__name__} (when the issuer is a CA you trust, a lab's "
                               "own for instance, name it in ca_bundle: LINKFOLD_CA_BUNDLE or SSL_CERT_FILE)",
                          url=url)
    if tls is not None:
        return FetchError(tls, str(exc) or type(exc).__name__, url=url)
    if isinstance(exc, httpx.ProtocolError):
        return FetchError(Failure.PROTOCOL, str(exc) or type(exc).__name__, url=url)
    if isinstance(exc, httpx.UnsupportedProtocol | httpx.InvalidURL):
        return FetchError(Failure.BAD_URL, str(exc), url=url)
    if isinstance(exc, httpx.TransportError | OSError):
        return FetchError(Failure.CONNECT, str(exc) or type(exc).__name__, url=url)
    raise exc


__all__ = [
    "NEVER_FOLLOW_REASON",
    "REDIRECT_STATUSES",
    "REFUSALS",
    "RETRY_STATUSES",
    "TRANSIENT",
    "Failure",
    "FetchError",
    "classify",
]
