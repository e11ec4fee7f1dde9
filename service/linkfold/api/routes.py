"""The /v1 routes for lookups, datasets, runs and health: thin wrappers around library functions."""

from __future__ import annotations

import json
import logging
from collections.abc import Iterator
from typing import Annotated, Any

from fastapi import APIRouter, Depends, Path, Query, Request
from fastapi.responses import StreamingResponse

from .. import __version__
from ..errors import LinkfoldError
from ..ingest import lookup
from ..store import current_revision
from ..store.clock import utc
from ..store.datasets import dataset_files, get_dataset, list_datasets, reject_totals
from ..store.runs import list_runs, show_run
from .auth import Access, read_access
from .errors import ApiError, envelope, error_responses
from .models import (
    BatchBody,
    BatchRequest,
    DatasetDetail,
    DatasetList,
    Health,
    LookupAnswer,
    RunDetail,
    RunList,
)
from .state import ApiState

log = logging.getLogger("linkfold")

router = APIRouter()

NDJSON = "application/x-ndjson"
ReadAccess = Annotated[Access, Depends(read_access)]
# 400: a NUL character in the query (api.screen.no_nul, on every route; in the path it is a 404). The
# text parameters also say so in the document (NO_NUL), so a schema-valid request is never refused for it.
NO_NUL = "^[^\\x00]*$"
READ_ERRORS = error_responses(400, 401, 403, 422, 503)


def api_state(request: Request) -> ApiState:
    return request.app.state.linkfold


def _json_default(value: Any) -> Any:
    if hasattr(value, "isoformat"):
        return value.isoformat()
    raise TypeError(f"not JSON serialisable: {type(value).__name__}")


def json_line(obj: Any) -> bytes:
    return (json.dumps(obj, ensure_ascii=False, default=_json_default) + "\n").encode("utf-8")


@router.get("/health", response_model=Health, tags=["service"],
            summary="Whether the server can reach the registry (no token needed)",
            responses=error_responses(400, 503))
def health(request: Request) -> dict[str, Any]:
    state = api_state(request)
    return {"status": "ok", "schema_revision": current_revision(state.engine), "version": __version__,
            "open_reads": bool(state.settings.open_reads)}


@router.get("/lookup", response_model=LookupAnswer, tags=["lookup"],
            summary="Look up one URL, url key or ID", responses=READ_ERRORS)
def lookup_one(request: Request, _access: ReadAccess,
               q: Annotated[str, Query(min_length=1, max_length=8192, pattern=NO_NUL,
                                       description="A URL, a url key, or an article or story ID")]
               ) -> dict[str, Any]:
    state = api_state(request)
    [answer] = list(lookup(state.engine, [q], rules=state.rules(),
                           cache_size=state.settings.canon_cache_size))
    return answer


def _batch_items(body: bytes, content_type: str, limit: int) -> list[str]:
    media = content_type.split(";", 1)[0].strip().lower()
    if media == "application/json":
        try:
            parsed = BatchBody.model_validate_json(body)
        except ValueError as exc:
            first = str(exc).splitlines()[0] if str(exc) else "invalid JSON"
            raise ApiError(400, "invalid_request", f'the body must be {{"urls": ["…", …]}}: {first}') from None
        items = parsed.urls
    elif media in ("text/plain", ""):
        try:
            text = body.decode("utf-8")
        except UnicodeDecodeError as exc:
            raise ApiError(400, "invalid_request", f"the body is not UTF-8 text (byte {exc.start})") from None
        items = [line.rstrip("\r") for line in text.split("\n") if line.strip()]
    else:
        raise ApiError(415, "unsupported_media_type", f"send application/json or text/plain, not {media}")
    if len(items) > limit:
        raise ApiError(413, "batch_too_large", f"{len(items):,} items in one batch; at most {limit:,} "
                       "(setting api_max_batch): split it")
    return items


_BATCH_BODY = {
    "required": True,
    "content": {
        "application/json": {"schema": BatchRequest.model_json_schema()},
        "text/plain": {"schema": {"type": "string", "description": "one URL, url key or ID a line"}},
    },
}


@router.post("/lookup", tags=["lookup"], summary="Look up a batch; answers stream back as JSON lines",
             response_class=StreamingResponse,
             responses={200: {"description": "One lookup answer a line, in input order",
                              "content": {NDJSON: {"schema": LookupAnswer.model_json_schema()}}},
                        **error_responses(400, 401, 403, 413, 415, 503)},
             openapi_extra={"requestBody": _BATCH_BODY})
async def lookup_batch(request: Request, _access: ReadAccess) -> StreamingResponse:
    state = api_state(request)
    body = await request.body()
    items = _batch_items(body, request.headers.get("content-type", ""), state.settings.api_max_batch)
    return StreamingResponse(_stream(state, items), media_type=NDJSON)


def _stream(state: ApiState, items: list[str]) -> Iterator[bytes]:
    # Once the first line is out the status is sent; a failure after that can only be told in-band, as a
    # last line holding the error envelope (docs/api.md), so a client never mistakes a cut stream for a
    # complete one.
    try:
        answers = lookup(state.engine, items, rules=state.rules(), cache_size=state.settings.canon_cache_size)
        buffer: list[bytes] = []
        for answer in answers:
            buffer.append(json_line(answer))
            if len(buffer) >= 500:
                yield b"".join(buffer)
                buffer = []
        if buffer:
            yield b"".join(buffer)
    except LinkfoldError as exc:
        log.error("batch lookup failed mid-stream: %s", exc)
        yield json_line(envelope(exc.code, str(exc)))
    except Exception:
        log.exception("batch lookup failed mid-stream")
        yield json_line(envelope("internal", "internal error (logged on the server)"))


@router.get("/datasets", response_model=DatasetList, tags=["datasets"],
            summary="Every dataset with its files, rows, sightings and rejects", responses=READ_ERRORS)
def datasets(request: Request, _access: ReadAccess) -> dict[str, Any]:
    with api_state(request).engine.connect() as conn:
        return {"datasets": list_datasets(conn)}


_FILE_FIELDS = ("file_name", "format", "state", "size_bytes", "rows", "sightings", "rejects", "started_at",
                "loaded_at")


@router.get("/datasets/{name}", response_model=DatasetDetail, tags=["datasets"],
            summary="One dataset: counts, files and rejects by reason",
            responses={**READ_ERRORS, **error_responses(404)})
def dataset(request: Request, _access: ReadAccess,
            name: Annotated[str, Path(min_length=1, max_length=200)]) -> dict[str, Any]:
    with api_state(request).engine.connect() as conn:
        ds = get_dataset(conn, name)
        summary = next(row for row in list_datasets(conn) if row["dataset"] == ds["name"])
        # status: the old name of state, still given for one release (docs/vocabulary.md).
        files = [{k: utc(f[k]) if k.endswith("_at") else f[k] for k in _FILE_FIELDS} | {"status": f["state"]}
                 for f in dataset_files(conn, ds["id"])]
        return {**summary, "files_detail": files, "rejects_by_reason": reject_totals(conn, ds["id"])}


@router.get("/runs", response_model=RunList, tags=["runs"],
            summary="Runs, newest first: stages run alone and nightly jobs (their stages are children)",
            responses=READ_ERRORS)
def runs(request: Request, _access: ReadAccess,
         limit: Annotated[int, Query(ge=1, le=1000)] = 20,
         stage: Annotated[str | None, Query(min_length=1, max_length=40, pattern=NO_NUL)] = None
         ) -> dict[str, Any]:
    return {"runs": list_runs(api_state(request).engine, limit=limit, stage=stage)}


@router.get("/runs/{run_id}", response_model=RunDetail, tags=["runs"],
            summary="One run with its counts, errors and child runs",
            responses={**READ_ERRORS, **error_responses(404)})
def run(request: Request, _access: ReadAccess,
        run_id: Annotated[int, Path(ge=1, le=2**31 - 1)]) -> dict[str, Any]:
    return show_run(api_state(request).engine, run_id)
