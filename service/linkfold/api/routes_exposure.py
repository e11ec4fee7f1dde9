"""The /v1 exposure routes: the per-outlet aggregate under a read token, unit-level rows under ``units``.

Unit-level rows are personal data even under keyed pseudonyms (docs/exposure.md), so they need a token of
their own scope; a read token gets only counts per outlet, with groups of fewer than the documented
minimum of units suppressed.
"""

from __future__ import annotations

import logging
from collections.abc import Iterator
from datetime import datetime
from typing import Annotated, Any, Literal

from fastapi import APIRouter, Depends, Query, Request
from fastapi.responses import StreamingResponse
from pydantic import BaseModel, ConfigDict, Field, StringConstraints

from ..errors import LinkfoldError
from ..exposure import DEFAULT_MIN_UNITS, exposure_rows, outlet_exposure
from .auth import Access, read_access, units_access
from .errors import envelope, error_responses
from .routes import NDJSON, NO_NUL, READ_ERRORS, api_state, json_line

log = logging.getLogger("linkfold")

router = APIRouter()

ReadAccess = Annotated[Access, Depends(read_access)]
UnitsAccess = Annotated[Access, Depends(units_access)]
# Each name as the document promises it: no NUL (refused for every route, api.screen), at most 200 characters.
DatasetName = Annotated[str, StringConstraints(min_length=1, max_length=200, pattern=NO_NUL)]
Datasets = Annotated[list[DatasetName], Query(min_length=1, max_length=20,
                                              description="A dataset name; repeat for several (one table)")]
Period = Annotated[Literal["day", "week", "month"] | None,
                   Query(description="One row per period too (UTC; weeks start on Monday)")]
AllUrls = Annotated[bool, Query(description="Count every sighting, not only those whose final URL is an article")]


class _Open(BaseModel):
    model_config = ConfigDict(extra="allow")


class OutletExposureRow(_Open):
    """One outlet (× dataset, × period): how many units were exposed, with how many sightings; the outlet
    list's attributes follow as further fields."""

    dataset: str | None = None
    outlet: str
    period: str | None = None
    units: int
    sightings: int


class OutletExposure(_Open):
    datasets: list[str]
    by: str | None
    min_units: int = Field(description="Groups of fewer units than this are left out (suppressed_groups)")
    columns: list[str]
    rows: list[OutletExposureRow]
    suppressed_groups: int


class ExposureRow(_Open):
    """One unit × outlet (article, story) (× period); only the target column of the level asked is set."""

    dataset: str | None = None
    unit: str = Field(description="The unit's keyed pseudonym (hs256:…)")
    outlet: str | None = None
    article_id: str | None = None
    story_id: str | None = None
    period: str | None = None
    sightings: int
    first_seen: datetime | None = None
    last_seen: datetime | None = None


@router.get("/exposure/outlets", response_model=OutletExposure, tags=["exposure"],
            summary="Units and sightings per outlet, small groups suppressed (no unit-level rows)",
            responses={**READ_ERRORS, **error_responses(404)})
def exposure_outlets(request: Request, _access: ReadAccess, dataset: Datasets, by: Period = None,
                     all_urls: AllUrls = False,
                     min_units: Annotated[int, Query(ge=DEFAULT_MIN_UNITS, le=1_000_000, description=(
                         f"Fewest units a group needs to be shown; never below {DEFAULT_MIN_UNITS}"))]
                     = DEFAULT_MIN_UNITS) -> dict[str, Any]:
    return outlet_exposure(api_state(request).engine, datasets=dataset, by=by, all_urls=all_urls,
                           min_units=min_units)


@router.get("/exposure", tags=["exposure"], response_class=StreamingResponse,
            summary="Unit-level exposure rows as JSON lines (needs a units token)",
            responses={200: {"description": "One exposure row a line",
                             "content": {NDJSON: {"schema": ExposureRow.model_json_schema()}}},
                       **READ_ERRORS, **error_responses(404)})
def exposure(request: Request, _access: UnitsAccess, dataset: Datasets,
             level: Annotated[Literal["outlet", "article", "story"], Query()] = "outlet",
             by: Period = None, all_urls: AllUrls = False) -> StreamingResponse:
    # Counting and checking the datasets happen before the first byte, so a bad name is a plain 404.
    table = exposure_rows(api_state(request).engine, datasets=dataset, level=level, by=by, all_urls=all_urls)
    return StreamingResponse(_stream(table.rows), media_type=NDJSON)


def _stream(rows: Iterator[dict[str, Any]], what: str = "exposure") -> Iterator[bytes]:
    # As POST /v1/lookup: a failure after the first line is told in-band, as a last line holding the envelope.
    try:
        buffer: list[bytes] = []
        for row in rows:
            buffer.append(json_line(row))
            if len(buffer) >= 1000:
                yield b"".join(buffer)
                buffer = []
        if buffer:
            yield b"".join(buffer)
    except LinkfoldError as exc:
        log.error("%s stream failed: %s", what, exc)
        yield json_line(envelope(exc.code, str(exc)))
    except Exception:
        log.exception("%s stream failed", what)
        yield json_line(envelope("internal", "internal error (logged on the server)"))
