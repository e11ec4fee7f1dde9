"""linkfold: a registry that folds the many URLs of one news article onto one stable ID.

What other projects may import is listed in ``__all__``; everything else is internal.
"""

from __future__ import annotations

__version__ = "0.1.0"

from .errors import (
    ConfigError,
    DatabaseError,
    DumpFormatError,
    InputError,
    InvalidURL,
    LinkfoldError,
    LockHeld,
    MissingColumnError,
    NetworkError,
    NotFound,
    RulesError,
    SchemaError,
)
from .settings import Settings, load_settings

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
    "RulesError",
    "SchemaError",
    "Settings",
    "__version__",
    "load_settings",
]
