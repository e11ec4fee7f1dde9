"""The /v1 routes for clusters, articles, stories, ID histories and manual decisions.

Every answer comes from the dedupe stage's library functions (:mod:`linkfold.dedupe.stage`); these
wrappers only check the level a path promises and shape the answer.
"""

from __future__ import annotations

from dataclasses import asdict
from typing import Annotated, Any, Literal

from fastapi import APIRouter, Depends, Path, Query, Request
from fastapi.responses import JSONResponse

from ..dedupe.stage import (
    list_clusters,
    list_decisions,
    record_decision,
    resolve_cluster_id,
    show_cluster,
)
from ..errors import NotFound
from ..store.clusters import Resolution
from .auth import Access, read_access, write_access
from .errors import error_responses
from .models import ClusterDetailOut, ClusterList, DecisionCreated, DecisionList, DecisionRequest, IdHistory
from .routes import NO_NUL, READ_ERRORS, api_state
from .screen import json_media

router = APIRouter()

ReadAccess = Annotated[Access, Depends(read_access)]
WriteAccess = Annotated[Access, Depends(write_access)]
# An ID is "a" or "s", 12 base32 characters and an optional "-N" counter (docs/dedupe.md); the path
# parameter is looser so that a mistyped ID gets a clear 404 rather than a schema error.
IdPath = Annotated[str, Path(min_length=1, max_length=40, pattern=r"^[A-Za-z0-9-]+$")]
MAX_LIST = 1000


def history(res: Resolution) -> dict[str, Any]:
    return {"id": res.id, "level": res.level, "current": res.current, "moved": res.current != res.id,
            "path": res.path, "events": res.events}


def cluster_answer(request: Request, cluster_id: str, level: str) -> dict[str, Any]:
    engine = api_state(request).engine
    res = resolve_cluster_id(engine, cluster_id)
    if res.level != level:
        plural = "stories" if res.level == "story" else "articles"
        raise NotFound(f"{cluster_id} is not an {level} ID but a {res.level} ID",
                       hint=f"ask /v1/{plural}/{cluster_id}")
    detail = show_cluster(engine, cluster_id, settings=api_state(request).settings)
    return {**history(res), "members": detail.members, "links": detail.links, "decisions": detail.decisions,
            "differences": [{**d, "passages": [list(p) for p in d["passages"]]} for d in detail.differences],
            "sinks": detail.sinks}


@router.get("/clusters", response_model=ClusterList, tags=["clusters"],
            summary="Clusters of one level, largest first, with sizes, outlets and score ranges",
            responses={**READ_ERRORS, **error_responses(400)})
def clusters(request: Request, _access: ReadAccess,
             level: Literal["article", "story"] = "article",
             min_size: Annotated[int, Query(ge=1, le=1_000_000)] = 2,
             outlet: Annotated[str | None, Query(min_length=1, max_length=255, pattern=NO_NUL)] = None,
             limit: Annotated[int, Query(ge=1, le=MAX_LIST)] = 100) -> dict[str, Any]:
    state = api_state(request)
    rows = list_clusters(state.engine, level=level, min_size=min_size, outlet=outlet, limit=limit,
                         settings=state.settings)
    return {"clusters": [row.as_dict() for row in rows]}


@router.get("/articles/{cluster_id}", response_model=ClusterDetailOut, tags=["clusters"],
            summary="An article: its URLs, the evidence between them, decisions; a retired ID says where "
                    "it moved", responses={**READ_ERRORS, **error_responses(404)})
def article(request: Request, _access: ReadAccess, cluster_id: IdPath) -> dict[str, Any]:
    return cluster_answer(request, cluster_id, "article")


@router.get("/stories/{cluster_id}", response_model=ClusterDetailOut, tags=["clusters"],
            summary="A story: its articles' URLs on every outlet, the evidence, decisions; a retired ID "
                    "says where it moved", responses={**READ_ERRORS, **error_responses(404)})
def story(request: Request, _access: ReadAccess, cluster_id: IdPath) -> dict[str, Any]:
    return cluster_answer(request, cluster_id, "story")


@router.get("/ids/{cluster_id}/history", response_model=IdHistory, tags=["clusters"],
            summary="Any ID ever issued: the live ID it stands for today and the events on the way",
            responses={**READ_ERRORS, **error_responses(404)})
def id_history(request: Request, _access: ReadAccess, cluster_id: IdPath) -> dict[str, Any]:
    return history(resolve_cluster_id(api_state(request).engine, cluster_id))


@router.get("/decisions", response_model=DecisionList, tags=["decisions"],
            summary="Manual decisions, newest first, with whether each is still in force",
            responses=READ_ERRORS)
def decisions(request: Request, _access: ReadAccess,
              limit: Annotated[int, Query(ge=1, le=MAX_LIST)] = 100) -> dict[str, Any]:
    return {"decisions": list_decisions(api_state(request).engine, limit=limit)}


@router.post("/decisions", response_model=DecisionCreated, status_code=201, tags=["decisions"],
             summary="Record that two URLs, keys or IDs are the same, or are not (needs a write token)",
             responses=error_responses(400, 401, 403, 404, 413, 415, 422, 503))
def decide(request: Request, body: DecisionRequest, access: WriteAccess,
           _media: Annotated[None, Depends(json_media)]) -> JSONResponse:
    result = record_decision(api_state(request).engine, body.verdict, body.a, body.b,
                             decided_by=body.decided_by, note=body.note, level=body.level)
    d = result.decision
    answer = {"id": d.id, "verdict": d.verdict, "level": d.level, "level_reason": result.level_reason,
              "effect": result.effect, "message": result.message, "a": asdict(d.a), "b": asdict(d.b),
              "decided_by": d.decided_by, "note": d.note, "supersedes": result.supersedes,
              "token_id": access.token_id, "takes_effect": "at the next dedupe run (linkfold dedupe or "
              "the nightly job)"}
    return JSONResponse(DecisionCreated.model_validate(answer).model_dump(mode="json"), status_code=201)
