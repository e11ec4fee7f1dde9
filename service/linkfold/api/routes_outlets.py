"""The /v1 routes for outlets: the outlet table with counts and the coverage report.

Both are aggregates (counts per outlet; the ``units`` column is a count of distinct pseudonyms, never a
pseudonym), so a read token is enough. Thin wrappers over :func:`linkfold.outlets.outlet_table` and
:func:`linkfold.outlets.outlet_report`.
"""

from __future__ import annotations

from typing import Annotated, Any

from fastapi import APIRouter, Depends, Query, Request
from pydantic import BaseModel, ConfigDict, Field

from ..outlets import outlet_report, outlet_table
from ..outlets.report import DEFAULT_SHAPES
from .auth import Access, read_access
from .errors import error_responses
from .routes import NO_NUL, READ_ERRORS, api_state

router = APIRouter()
ReadAccess = Annotated[Access, Depends(read_access)]
MAX_SHAPES = 100


class _Open(BaseModel):
    model_config = ConfigDict(extra="allow")


class OutletRow(_Open):
    """One outlet: its name, the list's attribute columns (extra keys, as the list names them) and counts."""

    outlet: str
    listed: bool = Field(description="Whether the outlet list in force names the outlet")
    datasets: int
    sightings: int = Field(description="Sightings whose final URL is on the outlet")
    units: int | None = Field(description="Distinct units among them; null when none of them carries a unit")
    urls: int = Field(description="Distinct final URLs")
    articles: int = Field(description="Distinct article IDs of those URLs")
    stories: int = Field(description="Distinct story IDs of those URLs")


class OutletList(BaseModel):
    list_version: int | None = Field(description="The outlet list in force, null when none was loaded")
    attributes: list[str] = Field(description="The list's attribute columns, in file order")
    outlets: list[OutletRow]
    summary: dict[str, int] = Field(description="Sightings in scope, counted, unparsable, short links not "
                                                "resolved, on hosts without an outlet")


class ShapeOut(BaseModel):
    shape: str
    sightings: int
    urls: int


class OutletCoverage(_Open):
    outlet: str
    listed: bool
    sightings: int
    articles: int
    not_articles: int
    unknown: int
    article_share: float | None
    via_short_links: int
    via_redirects: int
    urls: int
    fetched: int
    fetched_share: float | None
    usable_text: int
    usable_share: float | None
    shapes: list[ShapeOut] = Field(description="Most frequent path shapes of the outlet's non-article URLs")
    suggest: str = Field(description="The command that proposes this outlet's site rules from the evidence")


class OutletReportOut(BaseModel):
    list_version: int | None
    outlets: list[OutletCoverage]
    summary: dict[str, Any]


# One value each (the CLI takes several): a query parameter that repeats is an array in the OpenAPI
# document, and any text is a valid item of it, so no request could be refused as the document promises.
DatasetParam = Annotated[str | None, Query(min_length=1, max_length=200, pattern=NO_NUL,
                                           description="Only this dataset (default: all)")]
OutletParam = Annotated[str | None, Query(min_length=1, max_length=255, pattern=NO_NUL,
                                          description="Only this outlet")]


@router.get("/outlets", response_model=OutletList, tags=["outlets"],
            summary="Outlets with their attributes and counts, by the outlet each sighting stands for",
            responses={**READ_ERRORS, **error_responses(404)})
def outlets(request: Request, _access: ReadAccess, dataset: DatasetParam = None,
            listed: Annotated[bool, Query(description="Only the outlets the list in force names")] = False
            ) -> dict[str, Any]:
    with api_state(request).engine.connect() as conn:
        table = outlet_table(conn, datasets=[dataset] if dataset else None, listed_only=listed)
    return {"list_version": table.list_version, "attributes": table.attributes, "outlets": table.rows,
            "summary": table.summary}


@router.get("/outlets/report", response_model=OutletReportOut, tags=["outlets"],
            summary="Per-outlet coverage: article share, short links, pages, usable text, non-article shapes",
            responses={**READ_ERRORS, **error_responses(404)})
def outlets_report(request: Request, _access: ReadAccess, dataset: DatasetParam = None,
                   outlet: OutletParam = None,
                   shapes: Annotated[int, Query(ge=0, le=MAX_SHAPES)] = DEFAULT_SHAPES) -> dict[str, Any]:
    with api_state(request).engine.connect() as conn:
        report = outlet_report(conn, datasets=[dataset] if dataset else None, outlets=[outlet] if outlet else None,
                               shapes=shapes)
    return {"list_version": report.list_version, "outlets": report.rows, "summary": report.summary}
