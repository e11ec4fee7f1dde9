"""``export_dataset``: the linkage table of a dataset, one row per sighting, as CSV, JSON lines or Parquet.

Rows stream from the database in chunks and go out as they come (Parquet: one row group per chunk),
so memory stays flat whatever the dataset's size. A file written to ``out`` appears only when it is
complete: it is written beside its final name and renamed at the end, so an interrupted export never
leaves half a file that looks whole.
"""

from __future__ import annotations

import csv
import json
from collections.abc import Iterator
from dataclasses import dataclass
from datetime import datetime
from pathlib import Path
from typing import IO, Any

from sqlalchemy.engine import Engine

from .._tabular import csv_cell, write_out
from ..errors import ConfigError
from ..progress import SILENT, Progress
from ..store.datasets import dataset_files, get_dataset
from ..store.linkage import LINK_COLUMNS, iter_links
from ..store.migrate import require_schema

#: The file formats of the linkage table (``linkfold export --format``).
EXPORT_FORMATS = ("csv", "jsonl", "parquet")
DEFAULT_ROW_GROUP = 65536


@dataclass
class ExportSummary:
    dataset: str
    format: str
    rows: int
    out: str | None  # None: stdout

    def lines(self) -> list[str]:
        where = self.out or "stdout"
        return [f"exported {self.rows:,} sightings of dataset {self.dataset!r} as {self.format} to {where}"]


def _iso(value: datetime | None) -> str | None:
    return value.isoformat() if value is not None else None


def _parquet_schema():
    import pyarrow as pa

    return pa.schema([
        ("dataset", pa.string()), ("file", pa.string()), ("line_no", pa.int64()), ("position", pa.int32()),
        ("row_key", pa.string()), ("seen_at", pa.timestamp("us", tz="UTC")), ("raw_url", pa.string()),
        ("canonical_url", pa.string()), ("url_key", pa.string()), ("domain", pa.string()),
        ("outlet", pa.string()), ("article_id", pa.string()), ("story_id", pa.string()),
        ("final_url", pa.string()), ("final_domain", pa.string()), ("final_outlet", pa.string()),
        ("final_is_article", pa.bool_()),
    ])


def _write_text(rows: Iterator[tuple], fmt: str, stream: IO[str], progress: Progress) -> int:
    n = 0
    if fmt == "csv":
        writer = csv.writer(stream, lineterminator="\n")
        writer.writerow(LINK_COLUMNS)
        for row in rows:
            # An empty cell is "no value": CSV cannot tell null from the empty text, and no stored value
            # is the empty text (row keys fall back to line numbers, URLs are never blank). Truth values
            # are written as JSON writes them.
            writer.writerow([csv_cell(v) for v in row])
            n += 1
            if n % 10000 == 0:
                progress.advance(10000)
    else:
        for row in rows:
            record = dict(zip(LINK_COLUMNS, row, strict=True))
            record["seen_at"] = _iso(record["seen_at"])
            stream.write(json.dumps(record, ensure_ascii=False) + "\n")
            n += 1
            if n % 10000 == 0:
                progress.advance(10000)
    progress.advance(n % 10000)
    return n


def _write_parquet(rows: Iterator[tuple], path: Path, progress: Progress, row_group: int) -> int:
    import pyarrow as pa
    import pyarrow.parquet as pq

    schema = _parquet_schema()
    n = 0
    with pq.ParquetWriter(str(path), schema) as writer:
        columns: list[list[Any]] = [[] for _ in LINK_COLUMNS]

        def flush() -> None:
            if columns[0]:
                writer.write_table(pa.Table.from_arrays(
                    [pa.array(col, type=schema.field(i).type) for i, col in enumerate(columns)], schema=schema))
                progress.advance(len(columns[0]))
                for col in columns:
                    col.clear()

        for row in rows:
            for col, value in zip(columns, row, strict=True):
                col.append(value)
            n += 1
            if len(columns[0]) >= row_group:
                flush()
        flush()
        if n == 0:
            writer.write_table(schema.empty_table())
    return n


def export_dataset(engine: Engine, dataset: str, *, fmt: str = "csv", out: str | Path | IO[str] | None = None,
                   progress: Progress = SILENT, row_group: int = DEFAULT_ROW_GROUP) -> ExportSummary:
    """Write the linkage table of ``dataset`` (columns :data:`LINK_COLUMNS`) to ``out``.

    ``out`` is a path, an open text stream, or ``None`` for stdout (CSV and JSON lines only: Parquet is
    a binary file format and needs a path).
    """
    require_schema(engine)
    if fmt not in EXPORT_FORMATS:
        raise ConfigError(f"unknown export format {fmt!r}: use one of {', '.join(EXPORT_FORMATS)}")
    if fmt == "parquet" and (out is None or not isinstance(out, str | Path)):
        raise ConfigError("a Parquet export needs a file to write to (--out FILE.parquet)")
    with engine.connect() as conn:
        ds = get_dataset(conn, dataset)
        total = sum(int(f["sightings"]) for f in dataset_files(conn, ds["id"]))
        progress.start(f"export {dataset}", total=total)
        rows = iter_links(conn, ds)
        try:
            n, where = write_out(
                out, text=lambda fh: _write_text(rows, fmt, fh, progress),
                binary=(lambda tmp: _write_parquet(rows, tmp, progress, row_group)) if fmt == "parquet" else None)
        finally:
            progress.finish()
    return ExportSummary(dataset=dataset, format=fmt, rows=n, out=where)


__all__ = ["EXPORT_FORMATS", "ExportSummary", "export_dataset"]
