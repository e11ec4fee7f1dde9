"""The guarded transport: every TCP connection passes the request-forgery guard before it is opened.

The name is resolved once, every address of the answer is checked (:mod:`.guard`), and the socket is
opened to the checked address itself, so neither a hostile name nor a redirect to a private address nor
DNS rebinding can reach the lab's network. Proxies from the environment are never consulted (they would
bypass the guard): the transport is an httpcore pool of our own, not httpx's default.
"""

from __future__ import annotations

import contextlib
import ssl
from collections.abc import AsyncIterator, Iterator
from typing import Any

import httpcore
import httpx

from .guard import AddressGuard, AddressRefused, Resolver, literal_address


class GuardedBackend(httpcore.AsyncNetworkBackend):
    """httpcore network backend that resolves and checks before it opens any socket.

    httpcore calls ``connect_tcp(host, port)`` with the URL's host; TLS is then started by httpcore with
    the URL's host as SNI and for certificate checks, so pinning the address here keeps both right.
    """

    def __init__(self, guard: AddressGuard, resolver: Resolver,
                 inner: httpcore.AsyncNetworkBackend | None = None) -> None:
        self.guard = guard
        self.resolver = resolver
        self.inner = inner or httpcore.AnyIOBackend()

    async def connect_tcp(self, host: str, port: int, timeout: float | None = None,
                          local_address: str | None = None,
                          socket_options: Any = None) -> httpcore.AsyncNetworkStream:
        literal = literal_address(host)
        addresses = [str(literal)] if literal is not None else await self.resolver(host, port)
        checked = self.guard.check_all(host, addresses)
        last: Exception | None = None
        for addr in checked:
            try:
                return await self.inner.connect_tcp(str(addr), port, timeout=timeout,
                                                    local_address=local_address,
                                                    socket_options=socket_options)
            except (httpcore.ConnectError, httpcore.ConnectTimeout) as exc:
                last = exc  # try the next checked address, as a browser would
        assert last is not None
        raise last

    async def connect_unix_socket(self, path: str, timeout: float | None = None,
                                  socket_options: Any = None) -> httpcore.AsyncNetworkStream:
        raise AddressRefused(path, "unix socket", "not a network address")

    async def sleep(self, seconds: float) -> None:
        await self.inner.sleep(seconds)


# httpcore's exceptions as httpx's, so callers handle one family (httpx maps them the same way).
_EXCEPTIONS: tuple[tuple[type[Exception], type[httpx.HTTPError]], ...] = (
    (httpcore.ConnectTimeout, httpx.ConnectTimeout),
    (httpcore.ReadTimeout, httpx.ReadTimeout),
    (httpcore.WriteTimeout, httpx.WriteTimeout),
    (httpcore.PoolTimeout, httpx.PoolTimeout),
    (httpcore.ConnectError, httpx.ConnectError),
    (httpcore.ReadError, httpx.ReadError),
    (httpcore.WriteError, httpx.WriteError),
    (httpcore.RemoteProtocolError, httpx.RemoteProtocolError),
    (httpcore.LocalProtocolError, httpx.LocalProtocolError),
    (httpcore.UnsupportedProtocol, httpx.UnsupportedProtocol),
    (httpcore.ProxyError, httpx.ProxyError),
    (httpcore.TimeoutException, httpx.TimeoutException),
    (httpcore.NetworkError, httpx.NetworkError),
    (httpcore.ProtocolError, httpx.ProtocolError),
)


_HTTPCORE_ERRORS = (httpcore.TimeoutException, httpcore.NetworkError, httpcore.ProtocolError,
                   httpcore.UnsupportedProtocol, httpcore.ProxyError)


@contextlib.contextmanager
def _mapped() -> Iterator[None]:
    try:
        yield
    except _HTTPCORE_ERRORS as exc:
        for source, target in _EXCEPTIONS:  # ordered: subclasses before their bases
            if isinstance(exc, source):
                raise target(str(exc)) from exc
        raise


class _ResponseStream(httpx.AsyncByteStream):
    def __init__(self, stream: Any) -> None:
        self._stream = stream

    async def __aiter__(self) -> AsyncIterator[bytes]:
        with _mapped():
            async for part in self._stream:
                yield part

    async def aclose(self) -> None:
        if hasattr(self._stream, "aclose"):
            with _mapped():
                await self._stream.aclose()


class GuardedTransport(httpx.AsyncBaseTransport):
    """An httpx transport over an httpcore pool whose every connection passes :class:`GuardedBackend`."""

    def __init__(self, backend: GuardedBackend, *, max_connections: int,
                 ssl_context: ssl.SSLContext | None = None) -> None:
        self._pool = httpcore.AsyncConnectionPool(
            ssl_context=ssl_context or httpx.create_ssl_context(trust_env=False),
            max_connections=max_connections,
            max_keepalive_connections=max_connections,
            keepalive_expiry=5.0,
            http1=True,
            http2=False,
            network_backend=backend,
        )

    async def handle_async_request(self, request: httpx.Request) -> httpx.Response:
        req = httpcore.Request(
            method=request.method,
            url=httpcore.URL(scheme=request.url.raw_scheme, host=request.url.raw_host,
                             port=request.url.port, target=request.url.raw_path),
            headers=request.headers.raw,
            content=request.stream,  # type: ignore[arg-type]
            extensions=request.extensions,
        )
        with _mapped():
            resp = await self._pool.handle_async_request(req)
        return httpx.Response(status_code=resp.status, headers=resp.headers,
                              stream=_ResponseStream(resp.stream), extensions=resp.extensions)

    async def aclose(self) -> None:
        await self._pool.aclose()


__all__ = ["GuardedBackend", "GuardedTransport"]
