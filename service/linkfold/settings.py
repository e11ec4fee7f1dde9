"""Settings as data.

One declarative table, :data:`SETTINGS`, names every setting with its default, type and help. Values come
from, in order of precedence: explicit overrides (CLI options such as ``--db``), environment variables
``LINKFOLD_<NAME>``, then the default. The CLI, the docs (``linkfold settings``) and a test that every
setting is documented all read this table; nothing else in the package reads ``os.environ``.
"""

from __future__ import annotations

import dataclasses
import os
from collections.abc import Callable, Mapping
from dataclasses import dataclass, fields
from typing import Any

from .errors import ConfigError

DEFAULT_DATABASE_FILE = "linkfold.db"


@dataclass(frozen=True)
class Setting:
    name: str
    default: Any
    type: Callable[[str], Any]
    help: str
    #: Standard environment variables read, in order, when ``LINKFOLD_<NAME>`` is not set.
    fallback_env: tuple[str, ...] = ()

    @property
    def env(self) -> str:
        return "LINKFOLD_" + self.name.upper()


def _bool(text: str) -> bool:
    low = text.strip().lower()
    if low in {"1", "true", "yes", "on"}:
        return True
    if low in {"0", "false", "no", "off", ""}:
        return False
    raise ValueError(f"not a boolean: {text!r}")


def _csv(text: str) -> tuple[str, ...]:
    return tuple(part.strip() for part in text.split(",") if part.strip())


def _positive_int(text: str) -> int:
    value = int(text)
    if value <= 0:
        raise ValueError("must be a positive integer")
    return value


def _nonneg_int(text: str) -> int:
    value = int(text)
    if value < 0:
        raise ValueError("must be 0 or a positive integer")
    return value


def _executor_spec(text: str) -> str:
    value = text.strip()
    if value in ("auto", "inprocess", "processes") or value.startswith(("tcp://", "tls://")):
        return value
    raise ValueError("must be auto, inprocess, processes or a Dask scheduler's address (tcp://HOST:PORT)")


def _unit_float(text: str) -> float:
    value = float(text)
    if not 0.0 <= value <= 1.0:
        raise ValueError("must be between 0 and 1")
    return value


def _nonneg_float(text: str) -> float:
    value = float(text)
    if value < 0:
        raise ValueError("must not be negative")
    return value


SETTINGS: tuple[Setting, ...] = (
    Setting("database_url", f"sqlite:///{DEFAULT_DATABASE_FILE}", str,
            "SQLAlchemy URL of the registry: sqlite:///path.db (default: linkfold.db in the current "
            "directory) or postgresql+psycopg://user@host/dbname for a lab server."),
    Setting("batch_size", 5000, _positive_int,
            "Rows written per transaction by bulk stages; a crash loses at most the batch in flight."),
    Setting("executor", "auto", _executor_spec,
            "Where the heavy pure work of the stages runs (extraction): auto (a process pool over every "
            "core when a stage has enough work, else in process), inprocess, processes, or the address of "
            "a Dask scheduler (tcp://HOST:8786) for a lab's machines (needs linkfold[cluster])."),
    Setting("workers", 0, _nonneg_int,
            "Worker processes of the local pool (executor processes or auto); 0: one per core."),
    Setting("busy_timeout", 30.0, _nonneg_float,
            "SQLite only: seconds a writer waits for another writer of the same registry file before it "
            "gives up with a write conflict (exit 11); SQLite has one writer at a time."),
    Setting("ingest_batch_size", 20000, _positive_int,
            "Dump rows per transaction of an ingest; an interrupted load resumes after the last whole "
            "batch. Larger batches mean fewer round trips per row (a batch costs about ten)."),
    Setting("canon_cache_size", 65536, _positive_int,
            "Entries in the canonicaliser's LRU cache (panels repeat the same URLs heavily); for an "
            "ingest, entries of its memo of canonical forms (and four raw URL ids per entry)."),
    Setting("max_line_bytes", 1 << 20, _positive_int,
            "Longest line (or quoted CSV record) an ingest reads, in bytes; a longer one becomes a "
            "line_too_long or malformed_csv reject with its line number."),
    Setting("pseudonym_key", "", str,
            "The lab's secret for unit pseudonyms (HMAC-SHA256, at least 32 bytes); needed by ingest "
            "--unit-column and linkfold pseudonymise. Keep it out of the registry, its backups and shell "
            "history (docs/exposure.md)."),
    Setting("pseudonym_key_file", "", str,
            "A file holding the pseudonym key instead (its bytes, one trailing line end removed); give "
            "this or pseudonym_key, not both."),
    Setting("contact", "", str,
            "Contact address (mail or URL) put in the User-Agent of every request, so site operators can "
            "reach the lab. Required before fetching or following links."),
    Setting("allow_networks", (), _csv,
            "Comma-separated CIDR networks the HTTP client may connect to although they are private, "
            "loopback or reserved (default: none; request-forgery guard)."),
    Setting("ca_bundle", "", str,
            "CA certificates (a PEM file, or a directory of them) that HTTPS servers' certificates are "
            "checked against. Unset: SSL_CERT_FILE or SSL_CERT_DIR from the environment, else the bundled "
            "Mozilla list (certifi). A server whose certificate fails the check is a tls_certificate failure.",
            fallback_env=("SSL_CERT_FILE", "SSL_CERT_DIR")),
    Setting("http_timeout", 15.0, _nonneg_float, "Seconds before a single HTTP request is given up."),
    Setting("http_max_bytes", 5_000_000, _positive_int, "Largest response body read, in bytes."),
    Setting("http_concurrency", 16, _positive_int, "Requests in flight at once, all hosts together."),
    Setting("http_host_concurrency", 2, _positive_int, "Requests in flight at once to one host."),
    Setting("http_host_delay", 1.0, _nonneg_float, "Seconds between two requests to the same host."),
    Setting("http_retries", 3, int, "Retries on 429/503 and connection errors, with jittered backoff."),
    Setting("http_max_wait", 60.0, _nonneg_float,
            "Longest wait, in seconds, before one retry; a Retry-After asking for more ends the attempt "
            "(the URL is then due again after that time, for --retry-failed)."),
    Setting("max_hops", 10, _positive_int, "Redirect hops followed before a chain counts as too long."),
    Setting("shingle_size", 5, _positive_int, "Words per shingle for near-duplicate signatures."),
    Setting("num_perm", 128, _positive_int, "MinHash permutations per signature."),
    Setting("minhash_seed", 1, int, "Seed of the MinHash permutations (stored with every signature)."),
    Setting("minhash_scheme", "affine32", str,
            "MinHash permutation scheme: affine32 (default) or affine64 (for texts of many millions of "
            "shingles); the same schemes as datasketch 2.x. See docs/dedupe.md."),
    Setting("lsh_bands", 32, _positive_int,
            "LSH bands; lsh_bands × lsh_rows must not exceed num_perm. See docs/dedupe.md for the S-curve."),
    Setting("lsh_rows", 3, _positive_int, "Signature values per LSH band."),
    Setting("article_threshold", 0.9, _unit_float,
            "Jaccard similarity (exact when shingle sets are kept, else estimated) at or above which two "
            "same-outlet documents are one article."),
    Setting("story_threshold", 0.5, _unit_float,
            "Jaccard similarity (exact or estimated, as above) at or above which two documents on "
            "different outlets are one story."),
    Setting("title_threshold", 90.0, _nonneg_float,
            "Title similarity (0-100) at or above which two short or missing texts on different outlets "
            "are one story, if their dates also agree."),
    Setting("max_date_gap_days", 3, int,
            "Most days between publication dates for a title match to count as one story."),
    Setting("min_words", 50, _positive_int,
            "Words a text needs for its shingles to decide a match; shorter texts fall back to titles."),
    Setting("lsh_max_bucket", 1000, _positive_int,
            "Documents sharing one band key above which the bucket is skipped when matching (boilerplate "
            "shared by many pages); skipped buckets are counted in the dedupe summary."),
    Setting("sink_fan_in", 50, _positive_int,
            "Distinct URLs leading to one redirect or declared-canonical target above which the target is a "
            "sink: its links are kept as evidence but join nothing (short links on shortener_hosts and "
            "query-only variants of the target do not count). See docs/dedupe.md §10."),
    Setting("open_reads", False, _bool, "Let the HTTP API answer reads without a token."),
    Setting("api_max_batch", 10000, _positive_int,
            "Most URLs or keys in one batch lookup request; more is refused with 413 (split the batch)."),
    Setting("api_max_body_bytes", 8 << 20, _positive_int,
            "Largest HTTP request body the API reads, in bytes; a larger one is refused with 413."),
    Setting("api_url", "http://127.0.0.1:8750", str,
            "Base URL of a linkfold API, used by the Python client (linkfold.client) when none is given."),
)

_BY_NAME = {s.name: s for s in SETTINGS}


@dataclass(frozen=True)
class Settings:
    """Resolved settings, one typed field per row of :data:`SETTINGS` (in the table's order).

    The table stays the one source of names, defaults, help and environment variables; this class adds
    the types, and a test keeps the two in step (every row a field of the type its default has, and no
    field without a row). Build it with :func:`load_settings`; change a copy with :meth:`replace`.
    """

    database_url: str
    batch_size: int
    executor: str
    workers: int
    busy_timeout: float
    ingest_batch_size: int
    canon_cache_size: int
    max_line_bytes: int
    pseudonym_key: str
    pseudonym_key_file: str
    contact: str
    allow_networks: tuple[str, ...]
    ca_bundle: str
    http_timeout: float
    http_max_bytes: int
    http_concurrency: int
    http_host_concurrency: int
    http_host_delay: float
    http_retries: int
    http_max_wait: float
    max_hops: int
    shingle_size: int
    num_perm: int
    minhash_seed: int
    minhash_scheme: str
    lsh_bands: int
    lsh_rows: int
    article_threshold: float
    story_threshold: float
    title_threshold: float
    max_date_gap_days: int
    min_words: int
    lsh_max_bucket: int
    sink_fan_in: int
    open_reads: bool
    api_max_batch: int
    api_max_body_bytes: int
    api_url: str

    def __post_init__(self) -> None:
        for f in fields(self):
            value = getattr(self, f.name)
            if isinstance(value, list) and f.type == "tuple[str, ...]":
                object.__setattr__(self, f.name, tuple(value))  # a list from a caller: stored frozen
            elif not _has_type(value, str(f.type)):
                raise ConfigError(f"setting {f.name} must be {f.type}, not {value!r}")
        if self.lsh_bands * self.lsh_rows > self.num_perm:
            raise ConfigError(f"lsh_bands × lsh_rows ({self.lsh_bands} × {self.lsh_rows}) exceeds "
                              f"num_perm ({self.num_perm})")

    def __getitem__(self, name: str) -> Any:
        """A setting by its name (``settings["num_perm"]``), for code that picks settings from a list
        of names; typed code reads the attribute."""
        if name not in _BY_NAME:
            raise KeyError(name)
        return getattr(self, name)

    def replace(self, **overrides: Any) -> Settings:
        """A copy with ``overrides`` applied; an unknown name is a :class:`ConfigError`."""
        unknown = set(overrides) - set(_BY_NAME)
        if unknown:
            raise ConfigError(f"unknown setting(s): {', '.join(sorted(unknown))}")
        return dataclasses.replace(self, **overrides)


#: The annotation of a field -> what its values must be. An int is a float here (``http_timeout=2``).
_TYPE_CHECKS: dict[str, Callable[[Any], bool]] = {
    "str": lambda v: isinstance(v, str),
    "int": lambda v: isinstance(v, int) and not isinstance(v, bool),
    "float": lambda v: isinstance(v, int | float) and not isinstance(v, bool),
    "bool": lambda v: isinstance(v, bool),
    "tuple[str, ...]": lambda v: isinstance(v, tuple) and all(isinstance(x, str) for x in v),
}


def _has_type(value: Any, annotation: str) -> bool:
    return _TYPE_CHECKS[annotation](value)


def load_settings(overrides: Mapping[str, Any] | None = None,
                  environ: Mapping[str, str] | None = None) -> Settings:
    """Resolve every setting. ``overrides`` with value ``None`` are ignored (an unset CLI option)."""
    env = os.environ if environ is None else environ
    values: dict[str, Any] = {}
    for setting in SETTINGS:
        raw = env.get(setting.env)
        for name in setting.fallback_env:
            if raw is None and env.get(name):
                raw = env[name]
        if raw is None:
            values[setting.name] = setting.default
            continue
        try:
            values[setting.name] = setting.type(raw)
        except (TypeError, ValueError) as exc:
            raise ConfigError(f"{setting.env}={raw!r} is not valid: {exc}") from None
    for key, value in (overrides or {}).items():
        if key not in _BY_NAME:
            raise ConfigError(f"unknown setting: {key}")
        if value is not None:
            values[key] = value
    return Settings(**values)


def describe_settings() -> list[dict[str, Any]]:
    """The table as plain rows, for ``linkfold settings`` and the docs."""
    return [{"name": s.name, "env": s.env, "default": s.default, "help": s.help,
             "fallback_env": list(s.fallback_env)} for s in SETTINGS]
