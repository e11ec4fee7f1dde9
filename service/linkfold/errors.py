"""The one error hierarchy of linkfold.

Every failure a user can act on is a subclass of :class:`LinkfoldError`. The CLI turns any of them into
one line on stderr and the subclass's ``exit_code``; the HTTP API turns them into one JSON envelope
using ``code``. Anything that is not a ``LinkfoldError`` is a bug and is reported as such (exit 1).

Exit codes (documented in README.md, kept stable for scripts):

==  =====================================================
0   success
1   unexpected internal error (a bug: please report it)
2   command-line usage error (unknown option, missing argument)
3   configuration error (bad setting value)
4   database error (cannot connect, schema not migrated)
5   rules error (invalid ruleset file)
6   input error (unreadable or malformed input file)
7   not found (unknown dataset, ID, run …)
8   lock held (another job holds the registry lock)
9   network error (fetching or following links failed as a whole)
10  a stage of the nightly job failed (the other stages ran; see ``linkfold runs show``)
11  write conflict: a concurrent writer kept this one out (a deadlock or serialization failure that
    retries did not resolve, or an SQLite registry locked past ``busy_timeout``); nothing of the
    failed transaction was stored: run the command again
130 interrupted (Ctrl-C); what was committed stays committed
==  =====================================================
"""

from __future__ import annotations


class LinkfoldError(Exception):
    """Base of every error a user can act on."""

    exit_code: int = 1
    code: str = "error"

    def __init__(self, message: str, *, hint: str | None = None) -> None:
        super().__init__(message)
        self.message = message
        self.hint = hint

    def __str__(self) -> str:
        return self.message if not self.hint else f"{self.message} ({self.hint})"


class ConfigError(LinkfoldError):
    """A setting has a value that cannot be used."""

    exit_code = 3
    code = "config"


class DatabaseError(LinkfoldError):
    """The database cannot be reached or used."""

    exit_code = 4
    code = "database"


class SchemaError(DatabaseError):
    """The database schema is not at the revision this code needs."""

    code = "schema"


class RulesError(LinkfoldError):
    """A ruleset file is invalid. ``line`` is 1-based when known."""

    exit_code = 5
    code = "rules"

    def __init__(self, message: str, *, source: str | None = None, line: int | None = None,
                 hint: str | None = None) -> None:
        where = ":".join(str(p) for p in (source, line) if p is not None)
        super().__init__(f"{where}: {message}" if where else message, hint=hint)
        self.source = source
        self.line = line
        self.reason = message


class InputError(LinkfoldError):
    """An input file cannot be read as asked."""

    exit_code = 6
    code = "input"


class DumpFormatError(InputError):
    """A dump file is not in the format it claims to be, as a whole (single bad rows become rejects)."""

    code = "dump_format"


class MissingColumnError(InputError):
    """The column named for URLs (or keys, or times) is not in the file."""

    code = "missing_column"


class OutletListError(InputError):
    """An outlet list file is invalid, or disagrees with the ruleset in force. ``line`` is 1-based when known;
    ``problems`` holds every (line, reason) found, the first of which is the message."""

    code = "outlet_list"

    def __init__(self, message: str, *, source: str | None = None, line: int | None = None,
                 problems: tuple[tuple[int | None, str], ...] = (), hint: str | None = None) -> None:
        where = ":".join(str(p) for p in (source, line) if p is not None)
        super().__init__(f"{where}: {message}" if where else message, hint=hint)
        self.source = source
        self.line = line
        self.reason = message
        self.problems = problems or ((line, message),)


class InvalidURL(LinkfoldError):
    """A raw URL is not an http(s) URL that can be canonicalised.

    ``reason`` is a short stable code (``empty``, ``not_http``, ``too_long``…) that is stored with rejects
    and printed by ``linkfold canonicalize``; ``detail`` says more for a person.
    """

    exit_code = 6
    code = "invalid_url"

    def __init__(self, reason: str, detail: str | None = None) -> None:
        super().__init__(f"{reason}: {detail}" if detail else reason)
        self.reason = reason
        self.detail = detail


class WriteConflict(DatabaseError):
    """A concurrent writer kept this one out: PostgreSQL chose this transaction as the loser of a
    deadlock or serialization conflict more times than it is retried, or an SQLite registry stayed
    locked by another writer for longer than the busy timeout. The failed transaction left nothing."""

    exit_code = 11
    code = "write_conflict"


class SignatureError(DatabaseError):
    """A stored signature or its parameter record is malformed or does not match its parameters."""

    code = "signature"


class StageFailed(LinkfoldError):
    """A stage of a multi-stage job failed; what the other stages did is committed and logged."""

    exit_code = 10
    code = "stage_failed"


class NotFound(LinkfoldError):
    """A named thing (dataset, ID, run, file) does not exist."""

    exit_code = 7
    code = "not_found"


class LockHeld(LinkfoldError):
    """Another job holds the registry lock."""

    exit_code = 8
    code = "lock_held"


class NetworkError(LinkfoldError):
    """A network operation failed as a whole (single URL failures are recorded, not raised)."""

    exit_code = 9
    code = "network"


__all__ = [
    "ConfigError",
    "DatabaseError",
    "DumpFormatError",
    "InputError",
    "InvalidURL",
    "LinkfoldError",
    "LockHeld",
    "MissingColumnError",
    "NetworkError",
    "NotFound",
    "OutletListError",
    "RulesError",
    "SchemaError",
    "SignatureError",
    "WriteConflict",
]
