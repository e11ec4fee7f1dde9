"""The demo: every stage that exists, end to end, on the invented fixtures, into a fresh SQLite file.

It grows with the pipeline. The fixtures describe an invented region and its outlets on reserved names
(RFC 2606 ``.example`` and ``.test``); nothing in them is real.
"""

from __future__ import annotations

import logging
import shutil
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

import sqlalchemy as sa

from .progress import SILENT, Progress
from .store import ensure_schema, make_engine
from .store import tables as t

log = logging.getLogger("linkfold")


def fixtures_dir() -> Path:
    """``fixtures/`` at the top of the source tree."""
    path = Path(__file__).resolve().parents[2] / "fixtures"
    return path


@dataclass
class DemoReport:
    database: str
    steps: list[tuple[str, dict[str, int]]] = field(default_factory=list)

    def lines(self) -> list[str]:
        out = [f"registry: {self.database}"]
        for name, counts in self.steps:
            parts = ", ".join(f"{k} {v:,}" for k, v in counts.items())
            out.append(f"{name}: {parts}")
        return out


def table_counts(engine: sa.Engine) -> dict[str, int]:
    names = ["datasets", "dataset_files", "raw_urls", "canonical_urls", "sightings", "rejects", "runs"]
    with engine.connect() as conn:
        return {n: conn.execute(sa.select(sa.func.count()).select_from(t.metadata.tables[n])).scalar_one()
                for n in names}


def run_demo(workdir: Path, *, progress: Progress = SILENT,
             say: Callable[[str], None] = lambda _m: None) -> DemoReport:
    """Run the demo into ``workdir/demo.db`` (the folder is emptied first) and report counts."""
    if workdir.exists():
        shutil.rmtree(workdir)
    workdir.mkdir(parents=True)
    db_path = workdir / "demo.db"
    engine = make_engine(f"sqlite:///{db_path}")
    try:
        say(f"creating a fresh registry at {db_path}")
        ensure_schema(engine)
        report = DemoReport(database=str(db_path))
        report.steps.append(("registry", table_counts(engine)))
        return report
    finally:
        engine.dispose()
