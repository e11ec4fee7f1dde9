"""Corpus records from the registry: one dict per story (or article) seen in the chosen datasets,
streamed from the one SELECT of query.py, with the small-group floor applied to unit counts and the
optional preparation of the text added.

A record (docs/corpus.md, "Fields"): ``story_id`` | ``article_id``, ``title``, ``text``, ``published``,
``language``, ``words``, ``url`` (the representative's canonical URL), ``members``, ``articles`` (story
level), ``outlets``, ``sightings``, ``units``, ``first_seen``, ``last_seen``, ``datasets`` (one entry per
dataset that saw it: ``dataset``, ``sightings``, ``units``, ``first_seen``, ``last_seen``), then the
preparation's fields.
"""

from __future__ import annotations

import json
from collections.abc import Iterator, Sequence
from dataclasses import dataclass, field
from typing import Any

from sqlalchemy.engine import Connection, Engine

from ..errors import ConfigError
from ..exposure import DEFAULT_MIN_UNITS
from ..network.query import plan_for_all_rows
from ..store.clock import utc
from ..store.datasets import get_dataset, list_datasets
from .prepare import RAW, Preparation, prepare
from .query import ID_COLUMN, LEVELS, corpus_select

#: Rows fetched from the database at a time (a server-side cursor on PostgreSQL): texts are a few KB each.
YIELD_PER = 2000


def corpus_fields(level: str, how: Preparation = RAW) -> list[str]:
    """The fields of a corpus record, in order."""
    return ([ID_COLUMN[level], "title", "text", "published", "language", "words", "url", "members"]
            + (["articles"] if level == "story" else [])
            + ["outlets", "sightings", "units", "first_seen", "last_seen", "datasets"] + how.fields())


def dataset_ids(conn: Connection, datasets: Sequence[str]) -> dict[int, str]:
    """The registry ids of ``datasets`` (in the order given, duplicates once); unknown names raise."""
    names = list(dict.fromkeys(datasets))
    if not names:
        raise ConfigError("the corpus needs at least one dataset (--dataset NAME)")
    return {int(get_dataset(conn, n)["id"]): n for n in names}


def all_dataset_names(conn: Connection) -> list[str]:
    return [str(d["dataset"]) for d in list_datasets(conn)]


@dataclass
class CorpusTally:
    """What a pass over the corpus counted; complete once its rows are exhausted."""

    seen: int = 0            # clusters seen in the datasets
    written: int = 0         # records given out
    no_text: int = 0         # seen, but no current document passes the filters: left out
    units_suppressed: int = 0  # unit counts below the floor given as null (records and dataset entries)
    no_stop_words: int = 0   # records whose language has no stop-word list (only with stop words)

    def as_dict(self) -> dict[str, int]:
        return dict(self.__dict__)


@dataclass
class Corpus:
    """A corpus being read: its fields, its records (a one-pass iterator streamed from the database) and
    the tally, complete when the records are exhausted."""

    datasets: list[str]
    level: str
    fields: list[str]
    min_units: int
    tally: CorpusTally
    records: Iterator[dict[str, Any]] = field(repr=False)


def _floor(units: Any, min_units: int, tally: CorpusTally) -> int | None:
    n = int(units or 0)
    if n == 0:
        return None  # no unit known: the dataset was loaded without a unit column, or none of its rows had one
    if n < min_units:
        tally.units_suppressed += 1
        return None
    return n


def _outlets(value: Any) -> list[str]:
    items = json.loads(value) if isinstance(value, str) else (value or [])
    return sorted({str(o) for o in items if o is not None})


def corpus_records(engine: Engine, *, datasets: Sequence[str] | None = None, level: str = "story",
                   language: str | None = None, min_words: int = 0, all_urls: bool = False,
                   min_units: int = DEFAULT_MIN_UNITS, preparation: Preparation = RAW,
                   yield_per: int = YIELD_PER) -> Corpus:
    """The corpus of ``datasets`` (default: every dataset) at ``level``: one record per story (article)
    ID that a counted sighting stands for, with the representative document's text (query.py says which)
    and per-dataset counts. Unit counts below ``min_units`` (and zero) are given as null. Clusters
    without a current document passing ``language`` / ``min_words`` are left out and counted. Records
    come ordered by ID and stream: memory stays flat however large the corpus."""
    if level not in LEVELS:
        raise ConfigError(f"unknown corpus level {level!r}: use one of {', '.join(LEVELS)}")
    if min_words < 0:
        raise ConfigError("--min-words cannot be negative")
    if min_units < 1:
        raise ConfigError("min_units must be at least 1")
    with engine.connect() as conn:
        ids = dataset_ids(conn, datasets if datasets else all_dataset_names(conn))
    names = list(ids.values())
    tally = CorpusTally()
    id_col = ID_COLUMN[level]

    def records() -> Iterator[dict[str, Any]]:
        q = corpus_select(engine.dialect.name, dataset_ids=list(ids), level=level, all_urls=all_urls,
                          language=language, min_words=min_words)
        with engine.connect() as conn:
            # Every sighting of the datasets is grouped: hash joins, not an index lookup per sighting
            # (the planner misjudges the number of groups, as for the network; bench/corpus_bench.py).
            plan_for_all_rows(conn)
            result = conn.execute(q.execution_options(yield_per=yield_per, stream_results=True)).mappings()
            for row in result:
                tally.seen += 1
                if row["text"] is None:
                    tally.no_text += 1
                    continue
                per = []
                for i, name in enumerate(names):
                    n = int(row[f"sightings_{i}"] or 0)
                    if n:
                        per.append({"dataset": name, "sightings": n,
                                    "units": _floor(row[f"units_{i}"], min_units, tally),
                                    "first_seen": utc(row[f"first_{i}"]),
                                    "last_seen": utc(row[f"last_{i}"])})
                rec: dict[str, Any] = {
                    id_col: row["cluster_id"], "title": row["title"], "text": row["text"],
                    "published": utc(row["published"]), "language": row["language"],
                    "words": int(row["words"]), "url": row["url"], "members": int(row["members"]),
                }
                if level == "story":
                    rec["articles"] = int(row["articles"])
                rec.update(outlets=_outlets(row["outlets"]), sightings=int(row["sightings"]),
                           units=_floor(row["units"], min_units, tally),
                           first_seen=utc(row["first_seen"]), last_seen=utc(row["last_seen"]),
                           datasets=per)
                if preparation.active:
                    extra = prepare(rec["text"], rec["language"], preparation)
                    if preparation.stop_words and extra.get("stop_word_list") is None:
                        tally.no_stop_words += 1
                    rec.update(extra)
                tally.written += 1
                yield rec

    return Corpus(names, level, corpus_fields(level, preparation), min_units, tally, records())


__all__ = ["YIELD_PER", "Corpus", "CorpusTally", "corpus_fields", "corpus_records", "dataset_ids"]
