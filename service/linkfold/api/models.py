"""The shapes of the API's answers, as pydantic models: they are what the OpenAPI document promises.

Models allow extra fields: a later version may add a field to an answer (never remove or rename one), and
a client written today must keep working.
"""

from __future__ import annotations

from datetime import datetime
from typing import Any

from pydantic import BaseModel, ConfigDict, Field


class _Open(BaseModel):
    model_config = ConfigDict(extra="allow")


class LookupAnswer(_Open):
    """What the registry knows about one URL, url key or ID (the fields of ``linkfold lookup``)."""

    input: str
    canonical: str | None = None
    url_key: str | None = None
    domain: str | None = None
    outlet: str | None = None
    seen: bool
    sightings: int
    datasets: int
    matched_by: str | None = None
    article_id: str | None = None
    story_id: str | None = None
    error: str | None = None


class BatchRequest(BaseModel):
    model_config = ConfigDict(extra="forbid")

    urls: list[str] = Field(description="URLs, url keys or IDs; at most api_max_batch (default 10,000).")


class DatasetSummary(_Open):
    dataset: str
    description: str | None = None
    files: int
    files_loading: int
    rows: int
    sightings: int
    rejects: int
    ruleset: int | None = None
    created_at: datetime | None = None
    last_loaded_at: datetime | None = None


class DatasetFile(_Open):
    file_name: str
    format: str
    status: str
    size_bytes: int
    rows: int
    sightings: int
    rejects: int
    started_at: datetime | None = None
    loaded_at: datetime | None = None


class DatasetDetail(DatasetSummary):
    files_detail: list[DatasetFile]
    rejects_by_reason: dict[str, int]


class DatasetList(BaseModel):
    datasets: list[DatasetSummary]


class Run(_Open):
    id: int
    stage: str
    status: str
    parent_id: int | None = None
    started_at: datetime
    finished_at: datetime | None = None
    counts: dict[str, Any] | None = None
    error: str | None = None
    host: str | None = None
    pid: int | None = None


class RunList(BaseModel):
    runs: list[Run]


class Health(BaseModel):
    status: str
    schema_revision: str | None
    version: str
    open_reads: bool
