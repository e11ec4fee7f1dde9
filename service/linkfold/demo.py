"""The demo: every stage that exists, end to end, on the invented fixtures, into a fresh SQLite file.

It grows with the pipeline. The fixtures describe an invented region and its outlets on reserved names
(RFC 2606 ``.example`` and ``.test``); nothing in them is real.
"""

from __future__ import annotations

import csv
import logging
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import sqlalchemy as sa

from .canon import load_rules
from .compare import compare_datasets
from .content.page_import import import_pages
from .corpus import write_corpus
from .dedupe.stage import list_clusters
from .errors import InputError
from .exposure import write_exposure
from .follow import import_redirects
from .ingest import ingest_dump, lookup
from .jobs.nightly import run_nightly
from .network import write_network
from .outlets import load_outlet_list, outlet_table
from .progress import SILENT, Progress
from .settings import Settings, load_settings
from .store import make_engine, upgrade_schema
from .store import tables as t
from .store.rulesets import store_ruleset
from .suggest import suggest_rules_file

log = logging.getLogger("linkfold")


def demo_data_dir() -> Path:
    """The demo's invented data, shipped inside the package (``linkfold/demo_data/``)."""
    return Path(__file__).resolve().parent / "demo_data"


# (dataset, file under demo_data/, ingest options): a browsing panel (CSV; the panellist column is stored
# only as a keyed pseudonym) and a post archive (JSON lines, links nested in an array).
DEMO_DUMPS: list[tuple[str, str, dict[str, Any]]] = [
    ("northvale-panel", "panel_visits.csv",
     {"url_column": "url", "key_column": "visit_id", "time_column": "visited_at", "unit_column": "panelist",
      "description": "invented browsing panel, one visit a row"}),
    ("northvale-posts", "posts.jsonl",
     {"url_column": "entities.urls.*.expanded", "key_column": "post_id", "time_column": "created",
      "description": "invented post archive, links nested in each post"}),
]



#: The demo's pseudonym key: invented, public, for the demo registry only. A lab's own key is a secret held
#: outside the registry (docs/exposure.md); the demo never reads it, so its pseudonyms are reproducible.
DEMO_PSEUDONYM_KEY = b"invented demo key: public, never for real data"


def demo_lookups(fx: Path) -> list[str]:
    """Variants of the first invented article, as different datasets carry it, and its short link."""
    with (fx / "short_links.csv").open(encoding="utf-8", newline="") as fh:
        first = next(csv.DictReader(fh))
    article = first["expanded"]
    host_and_path = article.split("://", 1)[1]
    return [f"http://www.{host_and_path}/?utm_source=newsletter&utm_medium=email",
            f"https://m.{host_and_path}#comments", first["short"]]


@dataclass
class DemoReport:
    database: str
    steps: list[tuple[str, dict[str, int]]] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)
    examples: list[dict] = field(default_factory=list)
    clusters: dict[str, list[dict]] = field(default_factory=dict)
    outlets: list[str] = field(default_factory=list)
    comparison: list[str] = field(default_factory=list)

    def lines(self) -> list[str]:
        out = [f"registry: {self.database}", *self.notes]
        for name, counts in self.steps:
            parts = ", ".join(f"{k} {v:,}" for k, v in counts.items())
            out.append(f"{name}: {parts}")
        for level, rows in self.clusters.items():
            out.append(f"{level} clusters with more than one member: {len(rows)}")
            for c in rows[:8]:
                evidence = ", ".join(f"{k} {v}" for k, v in sorted(c["evidence"].items()))
                out.append(f"  {c['id']}  {c['size']} URLs on {c['outlets']} outlet(s), founded by "
                           f"{c['founder_url']}  [{evidence}]")
            if len(rows) > 8:
                out.append(f"  … and {len(rows) - 8} more (linkfold clusters --level {level})")
        out.extend(self.outlets)
        for ex in self.examples:
            out.append(f"lookup {ex['input']}\n    -> {ex['canonical_url']} (url key {ex['url_key']}, "
                       f"article {ex.get('article_id')}, story {ex.get('story_id')}, seen {ex['seen']})"
                       + (f"\n    stands for {ex['final_url']}" if ex.get("final_url") not in (None, ex["canonical_url"])
                          else ""))
        out.extend(self.comparison)
        return out


def demo_outlets(engine: sa.Engine, path: Path) -> list[str]:
    """Load the demo's outlet list and render the outlets table (``linkfold outlets``) as lines."""
    loaded = load_outlet_list(engine, path)
    with engine.connect() as conn:
        table = outlet_table(conn)
    cells = [[("" if r.get(c) is None else str(r[c])) for c in table.columns] for r in table.rows]
    widths = [max(len(c), *(len(row[i]) for row in cells)) for i, c in enumerate(table.columns)]
    lines = [f"outlet list: demo_data/{path.name} stored as version {loaded.version} "
             f"({loaded.entries} entries, {loaded.outlets} outlets); by the outlet each sighting stands for:"]
    for row in [list(table.columns), *cells]:
        lines.append("  " + "  ".join(v.ljust(w) for v, w in zip(row, widths, strict=True)).rstrip())
    return lines


def table_counts(engine: sa.Engine) -> dict[str, int]:
    names = ["datasets", "dataset_files", "raw_urls", "canonical_urls", "sightings", "rejects", "runs"]
    with engine.connect() as conn:
        return {n: conn.execute(sa.select(sa.func.count()).select_from(t.metadata.tables[n])).scalar_one()
                for n in names}


#: The file that marks a folder as the demo's own: written when the demo first uses a folder, and the only
#: proof that a later run may replace what is in it.
DEMO_MARKER = ".linkfold-demo"
#: Everything the demo writes into its folder: the registry and SQLite's side files. Nothing else in the
#: folder is ever touched, so a file a user put there survives every run.
DEMO_FILES = ("demo.db", "demo.db-wal", "demo.db-shm", "demo.db-journal")


def prepare_workdir(workdir: Path) -> Path:
    """Make ``workdir`` ready for a fresh demo registry and return the database path.

    A new or empty folder is taken and marked; a folder marked by an earlier demo has only the demo's own
    files (:data:`DEMO_FILES`) removed; any other folder is refused, since its files are not the demo's to
    delete (a home folder given by mistake must come out of this untouched).
    """
    if workdir.exists() and not workdir.is_dir():
        raise InputError(f"{workdir}: not a folder", hint="give --workdir a new or empty folder")
    marker = workdir / DEMO_MARKER
    if workdir.is_dir() and not marker.is_file():
        present = sorted(p.name for p in workdir.iterdir())
        if present:
            shown = ", ".join(present[:5]) + (f" and {len(present) - 5} more" if len(present) > 5 else "")
            raise InputError(f"{workdir}: the folder is not empty and is not a demo folder ({shown}); "
                             "the demo only replaces what it wrote itself",
                             hint="give --workdir a new or empty folder")
    workdir.mkdir(parents=True, exist_ok=True)
    for name in DEMO_FILES:
        path = workdir / name
        if path.is_symlink() or path.is_file():
            path.unlink()
        elif path.exists():
            raise InputError(f"{path}: expected the demo's own file, found a folder",
                             hint="give --workdir a new or empty folder")
    marker.write_text("This folder holds the linkfold demo's registry. `linkfold demo` replaces only "
                      + ", ".join(DEMO_FILES) + " here and leaves every other file alone.\n", encoding="utf-8")
    return workdir / "demo.db"


def run_demo(workdir: Path, *, settings: Settings | None = None, progress: Progress = SILENT,
             say: Callable[[str], None] = lambda _m: None) -> DemoReport:
    """Run the demo into a fresh ``workdir/demo.db`` and report counts.

    The folder must be new, empty, or one an earlier demo marked (see :func:`prepare_workdir`); only the
    demo's own files are ever replaced.
    """
    db_path = prepare_workdir(workdir)
    engine = make_engine(f"sqlite:///{db_path}")
    fx = demo_data_dir()
    settings = settings or load_settings()
    try:
        say(f"creating a fresh registry at {db_path}")
        upgrade_schema(engine)
        report = DemoReport(database=str(db_path))
        with engine.begin() as conn:
            version = store_ruleset(conn, load_rules(fx / "rules" / "demo.toml"))
        report.notes.append(f"site rules: demo_data/rules/demo.toml stored as ruleset version {version}")
        for name, path, options in DEMO_DUMPS:
            key = DEMO_PSEUDONYM_KEY if "unit_column" in options else None
            summary = ingest_dump(engine, [fx / path], dataset=name, progress=progress, pseudonym_key=key,
                                  **options)
            report.notes.extend(summary.lines())
        imported = import_redirects(engine, fx / "short_links.csv", progress=progress)
        report.notes.extend(imported.lines())
        pages = import_pages(engine, [fx / "pages"], settings=settings, progress=progress)
        report.notes.extend(pages.lines())
        # The nightly job runs every stage with pending work. With no contact address the stages that
        # would reach the network (follow, fetch) are skipped: the demo never leaves the machine.
        nightly = run_nightly(engine, settings=settings.replace(contact=""), progress=progress)
        report.notes.extend(nightly.lines())
        report.steps.append(("registry", table_counts(engine)))
        report.outlets = demo_outlets(engine, fx / "outlets.csv")
        for level in ("article", "story"):
            report.clusters[level] = [c.as_dict() for c in list_clusters(engine, level=level, min_size=2)]
        report.examples = list(lookup(engine, demo_lookups(fx)))
        # Exposure: each panellist's (pseudonymised) visits per outlet and per story, as a lab joins them
        # to survey answers (docs/exposure.md).
        for level, by in (("outlet", None), ("story", "month")):
            out = workdir / f"exposure-{level}.csv"
            exposure = write_exposure(engine, datasets=["northvale-panel"], level=level, by=by, out=out)
            report.notes.extend(exposure.lines())
        # The outlets the same panellists read, as a network (docs/network.md): edges and nodes as CSV.
        network = write_network(engine, datasets=["northvale-panel"], out=workdir / "network-edges.csv",
                                nodes_out=workdir / "network-nodes.csv")
        report.notes.extend(network.lines())
        # One text per story the two datasets saw, for topic models (docs/corpus.md), and the datasets side
        # by side: what panellists read against what accounts shared.
        corpus = write_corpus(engine, datasets=[name for name, _p, _o in DEMO_DUMPS], level="story",
                              out=workdir / "corpus-stories.jsonl")
        report.notes.extend(corpus.lines())
        comparison = compare_datasets(engine, datasets=[name for name, _p, _o in DEMO_DUMPS], top=5)
        report.comparison = ["", *comparison.table().rstrip("\n").splitlines()]
        # Site rules proposed from what the registry now holds (docs/rule-suggestions.md); the fixtures are
        # small, so the least support is lowered to show the method, and thin outlets are named as such.
        suggested = suggest_rules_file(engine, out=workdir / "suggested-rules.toml", min_support=2, diff=True,
                                       progress=progress)
        report.notes.extend(suggested.lines())
        if suggested.diff is not None:
            report.notes.extend(suggested.diff.lines()[-1 - len(suggested.diff.examples):])
        return report
    finally:
        engine.dispose()
