"""What every request of one server shares: the settings, the engine, and the parsed ruleset."""

from __future__ import annotations

import threading
from dataclasses import dataclass, field

import sqlalchemy as sa
from sqlalchemy.engine import Engine

from ..canon import Ruleset
from ..settings import Settings
from ..store import tables as t
from ..store.rulesets import get_ruleset


@dataclass
class ApiState:
    settings: Settings
    engine: Engine
    _rules: tuple[int, Ruleset] | None = None
    _lock: threading.Lock = field(default_factory=threading.Lock)

    def rules(self) -> Ruleset | None:
        """The newest stored ruleset, parsed once per version rather than on every lookup.

        ``None`` while no ruleset is stored: ``lookup`` then uses the default without storing it (a read
        must not write). A ruleset stored while the server runs is picked up by the next request.
        """
        with self.engine.connect() as conn:
            newest = conn.execute(sa.select(sa.func.max(t.rulesets.c.id))).scalar()
            if newest is None:
                return None
            cached = self._rules
            if cached is not None and cached[0] == newest:
                return cached[1]
            ruleset = get_ruleset(conn, int(newest))
        with self._lock:
            self._rules = (int(newest), ruleset)
        return ruleset
