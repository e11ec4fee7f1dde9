"""The /v1 network route: the outlet co-exposure network under a read token.

Only aggregates leave: outlets with their audience sizes and pairs of outlets with the number of units
exposed to both, never a unit. The threshold of units a node or an edge needs cannot go below the documented
minimum (:data:`linkfold.network.DEFAULT_MIN_UNITS`; docs/network.md) whatever the request asks.
"""

from __future__ import annotations

from typing import Annotated, Any

from fastapi import APIRouter, Depends, Query, Request
from pydantic import BaseModel, ConfigDict, Field

from ..network import DEFAULT_MIN_UNITS, co_exposure
from .auth import Access, read_access
from .errors import error_responses
from .routes import READ_ERRORS, api_state
from .routes_exposure import DatasetName

router = APIRouter()

ReadAccess = Annotated[Access, Depends(read_access)]


class NetworkNode(BaseModel):
    """An outlet, its audience (units) and sightings; the outlet list's attributes follow as further fields."""

    model_config = ConfigDict(extra="allow")
    outlet: str
    units: int
    sightings: int


class NetworkEdge(BaseModel):
    outlet_a: str = Field(description="The first outlet of the pair (outlet_a < outlet_b by code point)")
    outlet_b: str
    units: int = Field(description="Units exposed to both outlets")
    jaccard: float = Field(description="units / |A ∪ B| (Jaccard 1901, 1912)")
    lift: float = Field(description="N·units / (|A|·|B|): shared audience over what independence gives")
    pmi: float = Field(description="ln lift: pointwise mutual information, in nats")


class NetworkOut(BaseModel):
    datasets: list[str]
    min_units: int = Field(description="Edges and outlets with fewer units are left out")
    all_urls: bool
    units: int = Field(description="N: units exposed to any outlet of the datasets")
    node_columns: list[str]
    edge_columns: list[str]
    nodes: list[NetworkNode]
    edges: list[NetworkEdge]
    suppressed_nodes: int = Field(description="Outlets left out for having fewer than min_units units")


@router.get("/network", response_model=NetworkOut, tags=["network"],
            summary="The outlet co-exposure network (aggregates only; small groups left out)",
            responses={**READ_ERRORS, **error_responses(404)})
def network(request: Request, _access: ReadAccess,
            dataset: Annotated[list[DatasetName], Query(min_length=1, max_length=20,
                                                description="A dataset name; repeat for several (pooled)")],
            min_units: Annotated[int, Query(ge=DEFAULT_MIN_UNITS, le=1_000_000, description=(
                f"Fewest units an edge or an outlet needs to be shown; never below {DEFAULT_MIN_UNITS}"))]
            = DEFAULT_MIN_UNITS,
            all_urls: Annotated[bool, Query(description="Count every sighting, not only articles")] = False,
            ) -> dict[str, Any]:
    return co_exposure(api_state(request).engine, datasets=dataset, min_units=min_units,
                       all_urls=all_urls).as_dict()
