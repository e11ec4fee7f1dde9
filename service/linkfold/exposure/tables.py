"""Exposure tables from the registry: rows streamed from the grouped SQL (query.py), the outlet list's
attributes added at outlet level, written as CSV, JSON lines or Parquet, and the per-outlet aggregate that
is safe to hand out without unit-level rows."""

from __future__ import annotations

import csv
import json
from collections.abc import Iterator, Sequence
from dataclasses import dataclass, field
from datetime import datetime
from pathlib import Path
from typing import IO, Any

import sqlalchemy as sa
from sqlalchemy.engine import Connection, Engine

from .._tabular import csv_cell, write_out
from ..errors import ConfigError
from ..outlets import outlet_attributes as attributes_in_force
from ..outlets import outlet_columns
from ..progress import SILENT, Progress
from ..store.clock import utc
from ..store.datasets import get_dataset
from .query import COVERAGE_FIELDS, LEVELS, PERIODS, TARGET_COLUMN, coverage_select, exposure_select

#: The file formats an exposure table is written in.
EXPOSURE_FORMATS = ("csv", "jsonl", "parquet")
#: Fewest units an aggregate group may describe before it is suppressed (left out, and counted as such).
#: Common practice in statistical disclosure control is a threshold rule of 5 to 10 contributors per
#: published cell; 10 is the stricter end, chosen because a browsing panel's outlets are identifying.
DEFAULT_MIN_UNITS = 10
_ROW_GROUP = 65536


# --- the outlet list in force ------------------------------------------------------------------------------
def outlet_attributes(conn: Connection) -> tuple[list[str], dict[str, dict[str, Any]]]:
    """The attribute columns of the outlet list in force and each outlet's attributes (linkfold.outlets, the
    one reader of the list); none when no list is loaded."""
    return [str(c) for c in outlet_columns(conn)], attributes_in_force(conn)


# --- rows ------------------------------------------------------------------------------------------------
def _check(level: str, by: str | None) -> None:
    if level not in LEVELS:
        raise ConfigError(f"unknown exposure level {level!r}: use one of {', '.join(LEVELS)}")
    if by is not None and by not in PERIODS:
        raise ConfigError(f"unknown period {by!r}: use one of {', '.join(PERIODS)}")


def _dataset_ids(conn: Connection, datasets: Sequence[str]) -> dict[int, str]:
    names = list(dict.fromkeys(datasets))
    if not names:
        raise ConfigError("exposure needs at least one dataset (--dataset NAME)")
    return {int(get_dataset(conn, n)["id"]): n for n in names}


def exposure_columns(*, several: bool, level: str, by: str | None, attributes: Sequence[str] = ()) -> list[str]:
    """The columns of an exposure table, in order."""
    cols = (["dataset"] if several else []) + ["unit", TARGET_COLUMN[level]] + (["period"] if by else [])
    cols += ["sightings", "first_seen", "last_seen"]
    # A lab attribute named like one of ours gets an "outlet_" prefix rather than hiding it.
    return cols + [a if a not in cols else f"outlet_{a}" for a in attributes]


@dataclass
class ExposureTable:
    """An exposure table being read: its columns, its rows (a one-pass iterator, streamed from the
    database), and what was left out (``coverage``: :data:`query.COVERAGE_FIELDS`)."""

    datasets: list[str]
    level: str
    by: str | None
    all_urls: bool
    columns: list[str]
    coverage: dict[str, int]
    rows: Iterator[dict[str, Any]] = field(repr=False)


def exposure_rows(engine: Engine, *, datasets: Sequence[str], level: str = "outlet", by: str | None = None,
                  all_urls: bool = False, attributes: bool = True, yield_per: int = 10000) -> ExposureTable:
    """The exposure table of ``datasets``: one row (a dict in ``columns`` order) per unit × outlet (or
    article, story) (× period), with ``sightings``, ``first_seen`` and ``last_seen``; at outlet level the
    outlet list's attributes (when one is loaded; empty for an outlet it does not list). Several datasets
    give one table with a ``dataset`` column. Counts what was left out first (``coverage``); the rows are
    grouped by the database and streamed, so memory stays flat in the number of rows."""
    _check(level, by)
    with engine.connect() as conn:
        ids = _dataset_ids(conn, datasets)
        several = len(ids) > 1
        cov = conn.execute(coverage_select(conn.dialect.name, dataset_ids=list(ids), level=level, by=by,
                                           all_urls=all_urls)).one()
        coverage = {name: int(v or 0) for name, v in zip(COVERAGE_FIELDS, cov, strict=True)}
        attr_cols, attrs = outlet_attributes(conn) if level == "outlet" and attributes else ([], {})
    columns = exposure_columns(several=several, level=level, by=by, attributes=attr_cols)

    def rows() -> Iterator[dict[str, Any]]:
        q = exposure_select(engine.dialect.name, dataset_ids=list(ids), level=level, by=by, all_urls=all_urls,
                            with_dataset=several)
        n_keys = len(columns) - len(attr_cols)
        with engine.connect() as conn:
            result = conn.execute(q.execution_options(yield_per=yield_per, stream_results=True))
            for raw in result:
                values = list(raw)
                if several:
                    values[0] = ids[int(values[0])]
                values[-1], values[-2] = utc(values[-1]), utc(values[-2])
                values[-3] = int(values[-3])
                row = dict(zip(columns[:n_keys], values, strict=True))
                if attr_cols:
                    found = attrs.get(row["outlet"], {})
                    for name, col in zip(attr_cols, columns[n_keys:], strict=True):
                        row[col] = found.get(name)
                yield row

    return ExposureTable(list(ids.values()), level, by, all_urls, columns, coverage, rows())


# --- writing ---------------------------------------------------------------------------------------------
@dataclass
class ExposureSummary:
    datasets: list[str]
    level: str
    by: str | None
    format: str
    rows: int
    out: str | None
    coverage: dict[str, int]

    def lines(self) -> list[str]:
        c = self.coverage
        where = self.out or "stdout"
        per = f" per {self.by}" if self.by else ""
        out = [f"exposure of {', '.join(self.datasets)} by {self.level}{per}: {self.rows:,} rows from "
               f"{c['counted']:,} of {c['sightings']:,} sightings, as {self.format} to {where}"]
        left = [f"{c['no_unit']:,} without a unit", f"{c['not_article']:,} not articles (--all-urls counts them)",
                f"{c['no_target']:,} with no {TARGET_COLUMN[self.level].replace('_', ' ')} yet",
                f"{c['no_time']:,} without a time"]
        shown = [text for text, key in zip(left, ("no_unit", "not_article", "no_target", "no_time"), strict=True)
                 if c[key]]
        if shown:
            out.append("left out: " + "; ".join(shown))
        return out

    def as_dict(self) -> dict[str, Any]:
        return {"datasets": self.datasets, "level": self.level, "by": self.by, "format": self.format,
                "rows": self.rows, "out": self.out, **self.coverage}


def _json_value(value: Any) -> Any:
    return value.isoformat() if isinstance(value, datetime) else value


def _write_text(table: ExposureTable, fmt: str, stream: IO[str], progress: Progress) -> int:
    n = 0
    cols = table.columns
    if fmt == "csv":
        writer = csv.writer(stream, lineterminator="\n")
        writer.writerow(cols)
        for row in table.rows:
            writer.writerow([csv_cell(row[c]) for c in cols])
            n += 1
            if n % 10000 == 0:
                progress.advance(10000)
    else:
        for row in table.rows:
            stream.write(json.dumps({c: _json_value(row[c]) for c in cols}, ensure_ascii=False) + "\n")
            n += 1
            if n % 10000 == 0:
                progress.advance(10000)
    progress.advance(n % 10000)
    return n


def _parquet_schema(columns: Sequence[str]):
    import pyarrow as pa

    def typ(name: str):
        if name == "sightings":
            return pa.int64()
        if name in ("first_seen", "last_seen"):
            return pa.timestamp("us", tz="UTC")
        return pa.string()  # unit, dataset, the target, period (YYYY-MM-DD) and the lab's attributes

    return pa.schema([(c, typ(c)) for c in columns])


def _write_parquet(table: ExposureTable, path: Path, progress: Progress) -> int:
    import pyarrow as pa
    import pyarrow.parquet as pq

    schema = _parquet_schema(table.columns)
    known = {"dataset", "unit", "outlet", "article_id", "story_id", "period", "sightings", "first_seen", "last_seen"}
    n = 0
    with pq.ParquetWriter(str(path), schema) as writer:
        columns: dict[str, list[Any]] = {c: [] for c in table.columns}

        def flush() -> None:
            if columns[table.columns[0]]:
                arrays = [pa.array(columns[c], type=schema.field(c).type) for c in table.columns]
                writer.write_table(pa.Table.from_arrays(arrays, schema=schema))
                progress.advance(len(columns[table.columns[0]]))
                for col in columns.values():
                    col.clear()

        for row in table.rows:
            for c, col in columns.items():
                v = row[c]
                # Lab attributes are text in every format (a CSV outlet list gives text anyway).
                col.append(v if c in known or v is None or isinstance(v, str) else csv_cell(v))
            n += 1
            if len(columns[table.columns[0]]) >= _ROW_GROUP:
                flush()
        flush()
        if n == 0:
            writer.write_table(schema.empty_table())
    return n


def write_exposure(engine: Engine, *, datasets: Sequence[str], level: str = "outlet", by: str | None = None,
                   all_urls: bool = False, fmt: str = "csv", out: str | Path | IO[str] | None = None,
                   progress: Progress = SILENT) -> ExposureSummary:
    """Write the exposure table (:func:`exposure_rows`) as CSV (with a header), JSON lines or Parquet to
    ``out``: a path (written beside it and renamed when complete), an open text stream, or ``None`` for
    stdout (not for Parquet)."""

    if fmt not in EXPOSURE_FORMATS:
        raise ConfigError(f"unknown format {fmt!r}: use one of {', '.join(EXPOSURE_FORMATS)}")
    if fmt == "parquet" and (out is None or not isinstance(out, str | Path)):
        raise ConfigError("a Parquet exposure table needs a file to write to (--out FILE.parquet)")
    table = exposure_rows(engine, datasets=datasets, level=level, by=by, all_urls=all_urls)
    progress.start(f"exposure by {level} (rows)")
    try:
        n, where = write_out(out, text=lambda fh: _write_text(table, fmt, fh, progress),
                             binary=(lambda tmp: _write_parquet(table, tmp, progress)) if fmt == "parquet" else None)
    finally:
        table.rows.close()  # type: ignore[attr-defined]
        progress.finish()
    return ExposureSummary(table.datasets, level, by, fmt, n, where, table.coverage)


# --- the aggregate that leaves no unit-level row -------------------------------------------------------------
AGGREGATE_COLUMNS = ("outlet", "units", "sightings")


def outlet_exposure(engine: Engine, *, datasets: Sequence[str], by: str | None = None, all_urls: bool = False,
                    min_units: int = DEFAULT_MIN_UNITS) -> dict[str, Any]:
    """Per outlet (× dataset when several, × period with ``by``): how many units were exposed and their
    sightings. Groups of fewer than ``min_units`` units are suppressed: left out and counted
    (``suppressed_groups``), never shown with a small number. ``min_units`` cannot go below 1."""
    _check("outlet", by)
    if min_units < 1:
        raise ConfigError("min_units must be at least 1")
    with engine.connect() as conn:
        ids = _dataset_ids(conn, datasets)
        several = len(ids) > 1
        e = exposure_select(conn.dialect.name, dataset_ids=list(ids), level="outlet", by=by, all_urls=all_urls,
                            with_dataset=several).order_by(None).subquery()
        keys = ([e.c.dataset_id] if several else []) + [e.c.outlet] + ([e.c.period] if by else [])
        units = sa.func.count().label("units")
        grouped = sa.select(*keys, units, sa.func.sum(e.c.sightings).label("sightings")).group_by(*keys).subquery()
        q = sa.select(grouped).where(grouped.c.units >= min_units).order_by(*[grouped.c[k.name] for k in keys])
        rows = []
        for r in conn.execute(q).mappings():
            row = dict(r)
            if several:
                row = {"dataset": ids[int(row.pop("dataset_id"))], **row}
            row["units"], row["sightings"] = int(row["units"]), int(row["sightings"])
            rows.append(row)
        suppressed = conn.execute(sa.select(sa.func.count()).select_from(grouped)
                                  .where(grouped.c.units < min_units)).scalar_one()
        attr_cols, attrs = outlet_attributes(conn)
    columns = (["dataset"] if several else []) + ["outlet"] + (["period"] if by else []) + ["units", "sightings"]
    named = [(a, a if a not in columns else f"outlet_{a}") for a in attr_cols]
    for row in rows:
        found = attrs.get(row["outlet"], {})
        for name, col in named:
            row[col] = found.get(name)
    return {"datasets": list(ids.values()), "by": by, "min_units": min_units,
            "columns": columns + [col for _, col in named],
            "rows": rows, "suppressed_groups": int(suppressed)}


__all__ = ["AGGREGATE_COLUMNS", "DEFAULT_MIN_UNITS", "EXPOSURE_FORMATS", "ExposureSummary", "ExposureTable",
           "exposure_columns", "exposure_rows", "outlet_attributes", "outlet_exposure", "write_exposure"]
