"""Writing the corpus out as JSON lines or Parquet, reading it back, and the summary of a run.

The file given appears only when complete (``_tabular.atomic_path``), replacing a file of that name as
``linkfold export`` and ``linkfold exposure`` do. Parquet gets one row group per :data:`ROW_GROUP`
records, so memory stays flat; times are UTC timestamps, ``outlets`` and the preparation's lists are
lists of text, ``datasets`` a list of structs.
"""

from __future__ import annotations

import json
from collections.abc import Iterator, Sequence
from dataclasses import dataclass
from datetime import datetime
from pathlib import Path
from typing import IO, Any

from sqlalchemy.engine import Engine

from .._tabular import write_out
from ..errors import ConfigError, InputError
from ..exposure import DEFAULT_MIN_UNITS
from ..progress import SILENT, Progress
from .prepare import RAW, Preparation
from .query import ID_COLUMN
from .records import Corpus, corpus_records

#: The file formats a corpus is written in.
CORPUS_FORMATS = ("jsonl", "parquet")
#: Records per Parquet row group: a few thousand texts of a few KB each.
ROW_GROUP = 4000
_TIMES = ("published", "first_seen", "last_seen")


@dataclass
class CorpusSummary:
    """What ``linkfold corpus`` wrote (the StageSummary shape: ``as_dict`` and ``lines``)."""

    datasets: list[str]
    level: str
    format: str
    out: str | None
    counts: dict[str, int]
    min_units: int

    def lines(self) -> list[str]:
        c = self.counts
        out = [f"corpus of {', '.join(self.datasets)} by {self.level}: {c['written']:,} records of "
               f"{c['seen']:,} {self.level} IDs seen, as {self.format} to {self.out or 'stdout'}"]
        left = []
        if c["no_text"]:
            left.append(f"{c['no_text']:,} without a usable text (passing --language/--min-words)")
        if c["units_suppressed"]:
            left.append(f"{c['units_suppressed']:,} unit counts below {self.min_units} given as null")
        if c["no_stop_words"]:
            left.append(f"{c['no_stop_words']:,} texts in a language without a stop-word list kept every token")
        if left:
            out.append("note: " + "; ".join(left))
        return out

    def as_dict(self) -> dict[str, Any]:
        return {"datasets": self.datasets, "level": self.level, "format": self.format, "out": self.out,
                "min_units": self.min_units, **self.counts}


def _iso(value: Any) -> Any:
    if isinstance(value, datetime):
        return value.isoformat()
    raise TypeError(f"not JSON serialisable: {type(value).__name__}")


def record_json(record: dict[str, Any]) -> str:
    """One record as a line of JSON (times in ISO 8601, UTC)."""
    # The C encoder calls ``default`` only for the times: far cheaper than copying every record first.
    return json.dumps(record, ensure_ascii=False, default=_iso)


def parquet_schema(fields: Sequence[str]):
    """The Parquet schema of a corpus with ``fields``."""
    import pyarrow as pa

    ts = pa.timestamp("us", tz="UTC")
    per_dataset = pa.struct([("dataset", pa.string()), ("sightings", pa.int64()), ("units", pa.int64()),
                             ("first_seen", ts), ("last_seen", ts)])
    types = {"published": ts, "first_seen": ts, "last_seen": ts, "words": pa.int64(), "members": pa.int64(),
             "articles": pa.int64(), "sightings": pa.int64(), "units": pa.int64(),
             "outlets": pa.list_(pa.string()), "tokens": pa.list_(pa.string()), "ngrams": pa.list_(pa.string()),
             "datasets": pa.list_(per_dataset)}
    return pa.schema([(f, types.get(f, pa.string())) for f in fields])


def _write_jsonl(corpus: Corpus, stream: IO[str], progress: Progress) -> int:
    n = 0
    for rec in corpus.records:
        stream.write(record_json(rec) + "\n")
        n += 1
        if n % 1000 == 0:
            progress.advance(1000)
    progress.advance(n % 1000)
    return n


def _write_parquet(corpus: Corpus, path: Path, progress: Progress) -> int:
    import pyarrow as pa
    import pyarrow.parquet as pq

    schema = parquet_schema(corpus.fields)
    n = 0
    batch: list[dict[str, Any]] = []
    with pq.ParquetWriter(str(path), schema) as writer:
        def flush() -> None:
            if batch:
                writer.write_table(pa.Table.from_pylist(batch, schema=schema))
                progress.advance(len(batch))
                batch.clear()

        for rec in corpus.records:
            batch.append(rec)
            n += 1
            if len(batch) >= ROW_GROUP:
                flush()
        flush()
        if n == 0:
            writer.write_table(schema.empty_table())
    return n


def write_corpus(engine: Engine, *, datasets: Sequence[str] | None = None, level: str = "story",
                 language: str | None = None, min_words: int = 0, all_urls: bool = False,
                 min_units: int = DEFAULT_MIN_UNITS, preparation: Preparation = RAW,
                 fmt: str = "jsonl", out: str | Path | IO[str] | None = None,
                 progress: Progress = SILENT) -> CorpusSummary:
    """Write the corpus (:func:`corpus_records`) as JSON lines or Parquet to ``out``: a path (written
    beside it and renamed when complete), an open text stream, or ``None`` for stdout (not Parquet)."""
    if fmt not in CORPUS_FORMATS:
        raise ConfigError(f"unknown format {fmt!r}: use one of {', '.join(CORPUS_FORMATS)}")
    if fmt == "parquet" and not isinstance(out, str | Path):
        raise ConfigError("a Parquet corpus needs a file to write to (--out FILE.parquet)")
    corpus = corpus_records(engine, datasets=datasets, level=level, language=language, min_words=min_words,
                            all_urls=all_urls, min_units=min_units, preparation=preparation)
    progress.start(f"corpus by {level} (records)")
    try:
        n, where = write_out(out, text=lambda fh: _write_jsonl(corpus, fh, progress), newline="\n",
                             binary=(lambda tmp: _write_parquet(corpus, tmp, progress)) if fmt == "parquet" else None)
    finally:
        corpus.records.close()  # type: ignore[attr-defined]
        progress.finish()
    assert n == corpus.tally.written
    return CorpusSummary(corpus.datasets, level, fmt, where, corpus.tally.as_dict(), min_units)


# --- reading back ----------------------------------------------------------------------------------------
def _parse_times(rec: dict[str, Any]) -> dict[str, Any]:
    for key in _TIMES:
        if isinstance(rec.get(key), str):
            rec[key] = datetime.fromisoformat(rec[key])
    for entry in rec.get("datasets") or []:
        for key in ("first_seen", "last_seen"):
            if isinstance(entry.get(key), str):
                entry[key] = datetime.fromisoformat(entry[key])
    return rec


def read_corpus(path: str | Path) -> Iterator[dict[str, Any]]:
    """The records of a corpus file written by :func:`write_corpus`, Parquet or JSON lines (told apart by
    the Parquet magic bytes), as dicts with times as aware datetimes; one row group at a time."""
    from .._json import JSON_LIMITS

    path = Path(path)
    with path.open("rb") as fh:
        magic = fh.read(4)
    if magic == b"PAR1":
        import pyarrow.parquet as pq

        pf = pq.ParquetFile(str(path))
        for i in range(pf.num_row_groups):
            yield from pf.read_row_group(i).to_pylist()
        return
    with path.open(encoding="utf-8") as fh:
        for line_no, line in enumerate(fh, start=1):
            if not line.strip():
                continue
            try:
                rec = json.loads(line)
            except JSON_LIMITS as exc:
                raise InputError(f"{path}:{line_no}: not a corpus record ({exc})") from exc
            if not isinstance(rec, dict):
                raise InputError(f"{path}:{line_no}: not a corpus record (a JSON object per line)")
            yield _parse_times(rec)


__all__ = ["CORPUS_FORMATS", "ID_COLUMN", "ROW_GROUP", "CorpusSummary", "parquet_schema", "read_corpus",
           "record_json", "write_corpus"]
