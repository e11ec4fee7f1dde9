"""What the HTTP client needs from the settings, checked once before any request.

The settings keep their names (``contact``, ``http_timeout``, ``http_max_bytes``, ``http_concurrency``,
``http_host_concurrency``, ``http_host_delay``, ``http_retries``, ``http_max_wait``, ``allow_networks``,
``ca_bundle``); :meth:`ClientConfig.from_settings` is the one place that reads them.
"""

from __future__ import annotations

import os
import ssl
from dataclasses import dataclass

import httpx

from .. import __version__
from ..errors import ConfigError
from ..settings import Settings
from .guard import parse_networks

#: The product token matched against ``User-agent`` lines of robots.txt (RFC 9309 §2.2.1).
PRODUCT_TOKEN = "linkfold"


@dataclass(frozen=True)
class ClientConfig:
    """What the client needs from the settings, checked once."""

    contact: str
    timeout: float = 15.0
    max_bytes: int = 5_000_000
    concurrency: int = 16
    host_concurrency: int = 2
    host_delay: float = 1.0
    retries: int = 3
    max_wait: float = 60.0
    allow_networks: tuple[str, ...] = ()
    ca_bundle: str = ""

    @classmethod
    def from_settings(cls, settings: Settings) -> ClientConfig:
        """The client's part of the resolved settings."""
        return cls(contact=settings.contact, timeout=settings.http_timeout,
                   max_bytes=settings.http_max_bytes, concurrency=settings.http_concurrency,
                   host_concurrency=settings.http_host_concurrency, host_delay=settings.http_host_delay,
                   retries=max(0, settings.http_retries), max_wait=settings.http_max_wait,
                   allow_networks=tuple(settings.allow_networks), ca_bundle=settings.ca_bundle or "")

    def check(self) -> None:
        """Refuse to make requests without a way for site operators to reach the lab."""
        if not self.contact.strip():
            raise ConfigError("no contact address set: linkfold puts it in the User-Agent of every request "
                              "so site operators can reach the lab",
                              hint="set LINKFOLD_CONTACT=mailto:lab@university.example (or a web page)")
        parse_networks(self.allow_networks)
        self.ssl_context()  # a CA bundle that cannot be read is a configuration error, before any request

    def ssl_context(self) -> ssl.SSLContext:
        """The context every HTTPS connection verifies with: the ``ca_bundle`` setting (which defaults to
        the standard ``SSL_CERT_FILE`` / ``SSL_CERT_DIR``), else the bundled Mozilla list (certifi)."""
        path = self.ca_bundle.strip()
        if not path:
            # trust_env=False: the environment is read once, by the settings, not again behind their back.
            return httpx.create_ssl_context(trust_env=False)
        hint = "set ca_bundle (LINKFOLD_CA_BUNDLE) or SSL_CERT_FILE to a PEM file of CA certificates"
        if not os.path.exists(path):
            raise ConfigError(f"ca_bundle: {path} does not exist", hint=hint)
        try:
            if os.path.isdir(path):
                return ssl.create_default_context(capath=path)
            return ssl.create_default_context(cafile=path)
        except (ssl.SSLError, OSError) as exc:
            raise ConfigError(f"ca_bundle: {path} holds no CA certificate that can be read ({exc})",
                              hint=hint) from None

    @property
    def user_agent(self) -> str:
        return f"{PRODUCT_TOKEN}/{__version__} (+{self.contact})"


__all__ = ["PRODUCT_TOKEN", "ClientConfig"]
