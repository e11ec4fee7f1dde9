"""The /v1 corpus and comparison routes, under a read token.

Neither gives a unit-level row: the corpus holds texts and counts per story, the comparison counts per
outlet, attribute value and story. Unit counts below the documented minimum are null, and a request cannot
lower that minimum below :data:`linkfold.exposure.DEFAULT_MIN_UNITS` (docs/exposure.md, docs/corpus.md).
"""

from __future__ import annotations

from datetime import datetime
from typing import Annotated, Any, Literal

from fastapi import APIRouter, Depends, Query, Request
from fastapi.responses import StreamingResponse
from pydantic import BaseModel, Field

from ..compare import DEFAULT_TOP, compare_datasets
from ..corpus import MAX_NGRAM, Preparation, corpus_records
from ..exposure import DEFAULT_MIN_UNITS
from .auth import Access, read_access
from .errors import error_responses
from .routes import NDJSON, READ_ERRORS, api_state
from .routes_exposure import AllUrls, DatasetName, _stream

router = APIRouter()

ReadAccess = Annotated[Access, Depends(read_access)]
Level = Annotated[Literal["story", "article"], Query(description="Story IDs (copies once) or article IDs")]
MinUnits = Annotated[int, Query(ge=DEFAULT_MIN_UNITS, le=1_000_000, description=(
    f"Unit counts of fewer units are null; never below {DEFAULT_MIN_UNITS}"))]


class DatasetEntry(BaseModel):
    dataset: str
    sightings: int
    units: int | None = Field(description="Distinct units; null below the minimum or without units")
    first_seen: datetime | None = None
    last_seen: datetime | None = None


class CorpusRecord(BaseModel):
    """One story (or article): the representative document and the counts; the ID field is ``story_id``
    or ``article_id`` by level, and the preparation's fields (tokens, stop_word_list, ngrams) follow."""

    story_id: str | None = None
    article_id: str | None = None
    title: str | None
    text: str
    published: datetime | None
    language: str | None
    words: int
    url: str
    members: int
    articles: int | None = None
    outlets: list[str]
    sightings: int
    units: int | None
    first_seen: datetime | None
    last_seen: datetime | None
    datasets: list[DatasetEntry]


@router.get("/corpus", tags=["corpus"], response_class=StreamingResponse,
            summary="The corpus as JSON lines: one text per story (or article) seen in the datasets",
            responses={200: {"description": "One corpus record a line",
                             "content": {NDJSON: {"schema": CorpusRecord.model_json_schema()}}},
                       **READ_ERRORS, **error_responses(404)})
def corpus(request: Request, _access: ReadAccess,
           dataset: Annotated[list[DatasetName], Query(max_length=20, description=(
               "A dataset name; repeat for several (default: every dataset)"))] = [],  # noqa: B006
           level: Level = "story",
           language: Annotated[str | None, Query(max_length=35, pattern=r"^[A-Za-z0-9-]+$",
                                                 description="BCP 47 tag; 'de' takes 'de-AT' too")] = None,
           min_words: Annotated[int, Query(ge=0, le=10_000_000)] = 0, all_urls: AllUrls = False,
           min_units: MinUnits = DEFAULT_MIN_UNITS, tokens: bool = False, lowercase: bool = False,
           drop_stop_words: bool = False,
           ngrams: Annotated[int, Query(ge=1, le=MAX_NGRAM, description="Add 2- … N-grams of the tokens")] = 1,
           ) -> StreamingResponse:
    how = Preparation(tokens=tokens, lowercase=lowercase, stop_words=drop_stop_words, ngrams=ngrams)
    # The datasets are checked before the first byte, so an unknown name is a plain 404.
    found = corpus_records(api_state(request).engine, datasets=dataset, level=level, language=language,
                           min_words=min_words, all_urls=all_urls, min_units=min_units, preparation=how)
    return StreamingResponse(_stream(found.records, "corpus"), media_type=NDJSON)


class CompareDataset(BaseModel):
    dataset: str
    sightings: int = Field(description="Sightings with a story (article) ID: the overlap's denominator")
    outlet_sightings: int = Field(description="Sightings with an outlet: the outlet shares' denominator")
    units: int | None
    stories: int
    only_here: int


class ShareRow(BaseModel):
    dataset: str
    sightings: int
    sightings_share: float | None
    units: int | None
    units_share: float | None


class OutletShare(ShareRow):
    outlet: str


class AttributeShare(ShareRow):
    attribute: str
    value: str


class OverlapPair(BaseModel):
    a: str
    b: str
    stories_a: int
    stories_b: int
    both: int
    either: int
    jaccard: float | None = Field(description="|A ∩ B| / |A ∪ B| of the story sets")
    weighted_jaccard: float | None = Field(description="Σ min / Σ max of the stories' sighting shares (Ruzicka)")


class TopStory(BaseModel):
    dataset: str
    rank: int
    story_id: str | None = None
    article_id: str | None = None
    sightings: int
    sightings_share: float | None
    units: int | None
    title: str | None


class CompareOut(BaseModel):
    level: str
    min_units: int
    suppressed: int = Field(description="Unit counts below min_units given as null")
    datasets: list[CompareDataset]
    outlets: list[OutletShare]
    attributes: list[AttributeShare]
    overlap: list[OverlapPair]
    top: list[TopStory]
    only: list[TopStory]


@router.get("/compare", response_model=CompareOut, response_model_exclude_unset=True, tags=["corpus"],
            summary="Datasets side by side: outlet shares, attributes, story overlap, top stories",
            responses={**READ_ERRORS, **error_responses(404)})
def compare(request: Request, _access: ReadAccess,
            dataset: Annotated[list[DatasetName], Query(
                min_length=2, max_length=20, json_schema_extra={"uniqueItems": True},
                description="A dataset name; give two or more different ones (else 400)")],
            level: Level = "story", top: Annotated[int, Query(ge=1, le=1000)] = DEFAULT_TOP,
            all_urls: AllUrls = False, min_units: MinUnits = DEFAULT_MIN_UNITS) -> dict[str, Any]:
    return compare_datasets(api_state(request).engine, datasets=dataset, level=level, top=top, all_urls=all_urls,
                            min_units=min_units).as_dict()
