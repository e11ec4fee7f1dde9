"""What a load did, in numbers: per file and in total, for people (``lines()``) and scripts (``as_dict()``)."""

from __future__ import annotations

import enum
import shlex
from collections import Counter
from dataclasses import dataclass, field
from datetime import datetime
from typing import Any


class FileOutcome(enum.StrEnum):
    LOADED = "loaded"  # read from the first line to the last in this run
    RESUMED = "resumed"  # an interrupted load of the same file, completed in this run
    ALREADY_LOADED = "already_loaded"  # loaded completely before: nothing to add
    EMPTY = "empty"  # nothing but white space once decompressed, in any format: recorded, nothing to read


@dataclass
class FileSummary:
    file: str
    sha256: str
    outcome: FileOutcome
    rows: int = 0
    sightings: int = 0
    new_raw_urls: int = 0
    new_canonical_urls: int = 0
    rejects: Counter[str] = field(default_factory=Counter)
    rows_without_url: int = 0  # a post without links, an empty URL field: counted, not rejected
    blank_lines: int = 0
    resumed_after_line: int = 0
    loaded_at: datetime | None = None
    seconds: float = 0.0

    @property
    def reject_count(self) -> int:
        return sum(self.rejects.values())

    def as_dict(self) -> dict[str, Any]:
        return {"file": self.file, "sha256": self.sha256, "outcome": self.outcome.value, "rows": self.rows,
                "sightings": self.sightings, "new_raw_urls": self.new_raw_urls,
                "new_canonical_urls": self.new_canonical_urls, "rejects": self.reject_count,
                "rejects_by_reason": dict(sorted(self.rejects.items())),
                "rows_without_url": self.rows_without_url, "blank_lines": self.blank_lines,
                "resumed_after_line": self.resumed_after_line,
                "loaded_at": self.loaded_at.isoformat() if self.loaded_at else None,
                "seconds": round(self.seconds, 3)}


def _reasons(counter: Counter[str]) -> str:
    return ", ".join(f"{reason} {n:,}" for reason, n in sorted(counter.items(), key=lambda kv: (-kv[1], kv[0])))


def _without_url(n: int) -> str:
    return f"{n:,} row{'' if n == 1 else 's'} without a URL (counted, not rejected)"


@dataclass
class IngestSummary:
    dataset: str
    ruleset_version: int
    run_id: int | None = None
    files: list[FileSummary] = field(default_factory=list)

    def _total(self, name: str) -> int:
        return sum(getattr(f, name) for f in self.files)

    @property
    def rows(self) -> int:
        return self._total("rows")

    @property
    def sightings(self) -> int:
        return self._total("sightings")

    @property
    def new_raw_urls(self) -> int:
        return self._total("new_raw_urls")

    @property
    def new_canonical_urls(self) -> int:
        return self._total("new_canonical_urls")

    @property
    def rows_without_url(self) -> int:
        return self._total("rows_without_url")

    @property
    def rejects(self) -> Counter[str]:
        total: Counter[str] = Counter()
        for f in self.files:
            total.update(f.rejects)
        return total

    @property
    def added_anything(self) -> bool:
        return any(f.outcome is not FileOutcome.ALREADY_LOADED for f in self.files)

    def as_dict(self) -> dict[str, Any]:
        rejects = self.rejects
        return {"dataset": self.dataset, "run_id": self.run_id, "ruleset_version": self.ruleset_version,
                "files": [f.as_dict() for f in self.files], "rows": self.rows, "sightings": self.sightings,
                "new_raw_urls": self.new_raw_urls, "new_canonical_urls": self.new_canonical_urls,
                "rejects": sum(rejects.values()), "rejects_by_reason": dict(sorted(rejects.items())),
                "rows_without_url": self.rows_without_url}

    def lines(self) -> list[str]:
        """The summary for a person: one line per file, then the totals."""
        out = [f"dataset {self.dataset!r}, ruleset version {self.ruleset_version}"
               + (f", run {self.run_id}" if self.run_id is not None else "")]
        for f in self.files:
            if f.outcome is FileOutcome.ALREADY_LOADED:
                when = f" on {f.loaded_at:%Y-%m-%d %H:%M} UTC" if f.loaded_at else ""
                out.append(f"  {f.file}: already loaded{when} (sha256 {f.sha256[:12]}…); nothing added")
                continue
            if f.outcome is FileOutcome.EMPTY:
                out.append(f"  {f.file}: empty (no content once decompressed); nothing to load")
                continue
            how = f"resumed after line {f.resumed_after_line:,}" if f.outcome is FileOutcome.RESUMED \
                else "loaded"
            text = (f"  {f.file}: {how}: {f.rows:,} rows, {f.sightings:,} sightings, "
                    f"{f.new_raw_urls:,} new raw URLs, {f.new_canonical_urls:,} new canonical URLs, "
                    f"{f.reject_count:,} rejects")
            if f.rejects:
                text += f" ({_reasons(f.rejects)})"
            if f.rows_without_url:
                text += f", {_without_url(f.rows_without_url)}"
            if f.blank_lines:
                text += f", {f.blank_lines:,} blank lines skipped"
            out.append(text + f" in {f.seconds:.1f} s")
        if not self.added_anything:
            out.append("nothing new: every file was loaded into this dataset before")
            return out
        rejects = self.rejects
        total = (f"total: {self.rows:,} rows, {self.sightings:,} sightings, {self.new_raw_urls:,} new raw URLs, "
                 f"{self.new_canonical_urls:,} new canonical URLs, {sum(rejects.values()):,} rejects")
        if rejects:
            total += f" ({_reasons(rejects)})"
        if self.rows_without_url:
            total += f", {_without_url(self.rows_without_url)}"
        if rejects:
            total += f"; list the rejects with: linkfold rejects --dataset {shlex.quote(self.dataset)}"
        out.append(total)
        return out


__all__ = ["FileOutcome", "FileSummary", "IngestSummary"]
