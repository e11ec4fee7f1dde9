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


class LookupClusterMember(_Open):
    url: str
    url_key: str
    outlet: str | None = None
    final_url: str | None = None
    final_outlet: str | None = None
    founder: bool


class LookupCluster(_Open):
    """The live cluster an article or story ID stands for."""

    id: str
    level: str
    size: int = Field(description="Members in all (the list holds at most 1,000)")
    founder_url: str | None = Field(default=None, description="The URL the ID was minted from")
    title: str | None = Field(default=None, description="The founder's title, else the first member's")
    outlets: list[str] = Field(description="The members' final outlets (where each leads), sorted")
    members: list[LookupClusterMember]
    members_truncated: bool
    founder: str | None = Field(default=None, description="Deprecated: the old name of founder_url (goes in "
                                                           "the next release)")


class LookupAnswer(_Open):
    """What the registry knows about one URL, url key or ID (the fields of ``linkfold lookup``)."""

    input: str
    canonical_url: str | None = None
    url_key: str | None = None
    domain: str | None = None
    outlet: str | None = None
    seen: bool
    sightings: int
    datasets: int
    matched_by: str | None = None
    article_id: str | None = None
    story_id: str | None = None
    reason: str | None = Field(default=None, description="Why the input has no canonical URL: the "
                                                         "canonicaliser's reason code, or unknown_id")
    canonical: str | None = Field(default=None, description="Deprecated: the old name of canonical_url "
                                                            "(goes in the next release)")
    error: str | None = Field(default=None, description="Deprecated: the old name of reason (goes in the next "
                                                        "release)")
    id_history: list[dict[str, Any]] | None = Field(
        default=None, description="For an ID given as input: the events from it to the live ID")
    final_url: str | None = Field(
        default=None, description="The canonical URL this one stands for after short links, redirects and "
                                  "wrappers (itself when nothing leads elsewhere); null for a short link not "
                                  "yet followed")
    final_domain: str | None = Field(default=None, description="The final URL's registered domain")
    final_outlet: str | None = Field(default=None, description="The final URL's outlet")
    final_is_article: bool | None = Field(default=None, description="Whether the final URL is an article by "
                                                                    "the site rules (null when unknown)")
    cluster: LookupCluster | None = Field(
        default=None, description="For an ID given as input: the live cluster (members, outlets, title, founder)")


class BatchRequest(BaseModel):
    """The batch body as the OpenAPI document describes it, with the default limit."""

    model_config = ConfigDict(extra="forbid")

    urls: list[str] = Field(max_length=10000,
                            description="URLs, url keys or IDs; at most api_max_batch (default 10,000).")


class BatchBody(BaseModel):
    """The batch body as parsed: the limit is the server's setting, checked after parsing, so that too
    many items is a 413 that says so rather than a schema error."""

    model_config = ConfigDict(extra="forbid")

    urls: list[str]


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
    state: str = Field(description="loading | complete")
    status: str = Field(description="Deprecated: the old name of state (goes in the next release)")
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
    state: str = Field(description="running | ok | failed | interrupted")
    status: str = Field(description="Deprecated: the old name of state (goes in the next release)")
    parent_id: int | None = None
    started_at: datetime
    finished_at: datetime | None = None
    counts: dict[str, Any] | None = None
    detail: str | None = Field(default=None, description="Why the run failed, for people")
    error: str | None = Field(default=None, description="Deprecated: the old name of detail (goes in the next "
                                                        "release)")
    host: str | None = None
    pid: int | None = None
    seconds: float | None = None


class RunSummary(Run):
    children: int = Field(description="How many stage runs this run started")


class RunDetail(Run):
    children: list[RunDetail] = Field(description="The stage runs this run started, with theirs")


class RunList(BaseModel):
    runs: list[RunSummary]


class Health(BaseModel):
    status: str
    schema_revision: str | None
    version: str
    open_reads: bool


class SinkOut(_Open):
    """A redirect or declared-canonical target whose links are kept as evidence but join nothing
    (docs/dedupe.md §10): ``sink`` says why (``never_article_host``, ``not_article``, ``home_page``,
    ``fan_in``), ``fan_in`` counts the distinct sources that count, ``sources`` all of them."""

    url: str
    sink: str
    fan_in: int
    sources: int
    top_source_host: str | None = None
    top_host_sources: int = 0
    member: bool
    members_leading_here: int


class ClusterSummary(_Open):
    id: str
    level: str
    size: int
    outlets: int
    founder_url: str
    min_score: float | None = None
    max_score: float | None = None
    evidence: dict[str, int]
    sinks: list[SinkOut] = []


class ClusterList(BaseModel):
    clusters: list[ClusterSummary]


class IdEventOut(_Open):
    cluster_id: str
    event: str
    other_id: str | None = None
    reason: str
    run_id: int | None = None
    at: datetime


class IdHistory(_Open):
    """Where an ID ever issued stands today. ``moved`` is true when it was retired (merged); ``current``
    is then the live ID it maps to, and ``path`` the IDs passed through, the asked one first."""

    id: str
    level: str
    current: str
    moved: bool
    path: list[str]
    events: list[IdEventOut]


class ClusterMember(_Open):
    url: str
    url_key: str
    outlet: str | None = None
    final_url: str | None = Field(default=None, description="Where the member leads (docs/ingest.md)")
    final_outlet: str | None = Field(default=None, description="The final URL's outlet: the one counted")
    founder: bool
    title: str | None = None
    words: int | None = None


class ClusterLink(_Open):
    kind: str
    level: str | None = None
    detail: dict[str, Any] | None = None


class DecisionOut(_Open):
    id: int
    verdict: str
    decided_by: str
    note: str | None = None
    decided_at: datetime | None = None


class ClusterDetailOut(IdHistory):
    """An article or story: its members, the links between them with their evidence, the decisions on
    them, and where members' texts differ from the founder's."""

    members: list[ClusterMember]
    links: list[ClusterLink]
    decisions: list[DecisionOut]
    differences: list[dict[str, Any]]
    sinks: list[SinkOut] = []


class DecisionRequest(BaseModel):
    model_config = ConfigDict(extra="forbid")

    verdict: str = Field(pattern="^(same|different)$", description="same | different")
    a: str = Field(min_length=1, max_length=8192, description="A URL, url key, or article or story ID")
    b: str = Field(min_length=1, max_length=8192, description="A URL, url key, or article or story ID")
    # No NUL: PostgreSQL text cannot hold it (the pattern makes it a 422 rather than a 500).
    decided_by: str = Field(min_length=1, max_length=200, pattern="^[^\x00]*$", description="Who decided")
    note: str | None = Field(default=None, max_length=2000, pattern="^[^\x00]*$")
    level: str | None = Field(default=None, pattern="^(article|story)$",
                              description="article | story; default: what follows from a and b")


class DecisionCreated(_Open):
    id: int
    verdict: str
    level: str
    level_reason: str = Field(description="why this level: what was named, or the level asked for")
    effect: str = Field(description="changes | already_separate | already_together, as the clusters stand")
    message: str
    a: dict[str, Any]
    b: dict[str, Any]
    decided_by: str
    note: str | None = None
    supersedes: list[int]
    takes_effect: str


class DecisionList(BaseModel):
    decisions: list[dict[str, Any]]
