"""The content stages' former home, kept for one release: import from the stage modules instead.

Each content stage now has a module of its own — :mod:`.fetching`, :mod:`.page_import`, :mod:`.loading`,
:mod:`.extracting` — with the stage contract (``count_pending``, the run function with ``parent_run``, a
summary with ``run_id``, ``as_dict()`` and ``lines()``). The names below still resolve here.
"""

from __future__ import annotations

from datetime import datetime

from sqlalchemy.engine import Engine

from . import extracting, fetching
from ._records import Problem
from .extracting import DECLARED, DECLARED_CROSS, ExtractSummary, extract_pages
from .fetching import FetchSummary, fetch_pages
from .loading import LoadSummary, load_documents, record_hash
from .page_import import ImportSummary, import_pages


def count_pending(engine: Engine, *, now: datetime | None = None) -> dict[str, int]:
    """Work waiting for each content stage, by name: ``fetch``, ``extract`` and ``reextract`` (what
    ``extract --reextract`` would do). Each stage module's own ``count_pending`` gives its one number."""
    return {"fetch": fetching.count_pending(engine, now=now), "extract": extracting.count_pending(engine),
            "reextract": extracting.count_pending(engine, reextract=True)}


__all__ = [
    "DECLARED",
    "DECLARED_CROSS",
    "ExtractSummary",
    "FetchSummary",
    "ImportSummary",
    "LoadSummary",
    "Problem",
    "count_pending",
    "extract_pages",
    "fetch_pages",
    "import_pages",
    "load_documents",
    "record_hash",
]
