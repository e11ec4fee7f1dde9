"""The inspection pages: server-rendered HTML from Jinja templates, with no scripts from anywhere else.

Every page works without JavaScript; buttons are plain HTML forms. Reads need the same access as the API;
a browser sends its token as an HttpOnly, SameSite=Strict cookie that the token form sets (SameSite=Strict
is what keeps another site from posting a decision in the reviewer's name). Decisions need a write token.
"""

from __future__ import annotations

import logging
from pathlib import Path
from typing import Annotated, Any
from urllib.parse import quote

from fastapi import APIRouter, Depends, Form, Query, Request
from fastapi.responses import HTMLResponse, RedirectResponse, Response
from fastapi.templating import Jinja2Templates

from .. import __version__
from ..compare import DEFAULT_TOP, compare_datasets
from ..dedupe.stage import list_clusters, record_decision, resolve_cluster_id, show_cluster, similarity_values
from ..dedupe.textdiff import side_by_side
from ..errors import InputError
from ..exposure import DEFAULT_MIN_UNITS as UNIT_FLOOR
from ..ingest import lookup
from ..network import DEFAULT_MIN_UNITS, bucket_labels, co_exposure, exposure_distribution
from ..store.datasets import list_datasets
from ..store.lookup import canonicals_by_key
from ..store.pages import current_document
from ..store.tokens import TokenState, check_token
from . import charts, compare_svg, network_svg
from .auth import COOKIE_NAME, may_write, read_access, write_access
from .screen import refuse_nul, same_origin

TEMPLATES = Jinja2Templates(directory=str(Path(__file__).with_name("templates")))
TEMPLATES.env.globals["version"] = __version__
TEMPLATES.env.filters["q"] = lambda value: quote(str(value), safe="")

router = APIRouter()
log = logging.getLogger("linkfold")

COOKIE_MAX_AGE = 8 * 3600  # a working day; a reviewer signs in again tomorrow


def render(request: Request, name: str, context: dict[str, Any], *, status: int = 200,
           headers: dict[str, str] | None = None) -> HTMLResponse:
    base = {"signed_in": bool(request.cookies.get(COOKIE_NAME)), "next": _here(request)}
    return TEMPLATES.TemplateResponse(request, name, {**base, **context}, status_code=status, headers=headers)


def _here(request: Request) -> str:
    query = f"?{request.url.query}" if request.url.query else ""
    return request.url.path + query


def render_error_page(request: Request, status: int, code: str, message: str, *,
                      headers: dict[str, str] | None = None) -> HTMLResponse:
    # A page that needs a token shows the token form instead of a bare refusal; the WWW-Authenticate
    # header is kept for tools, though a browser shows no prompt for the Bearer scheme.
    return render(request, "error.html", {"status": status, "code": code, "message": message,
                                          "ask_token": status in (401, 403)},
                  status=status, headers=headers)


def _safe_next(target: str) -> str:
    # Only a path on this server: "//host" and "https://…" would turn the form into an open redirect.
    if not target.startswith("/") or target.startswith("//") or "\\" in target:
        return "/"
    return target


@router.get("/", response_class=HTMLResponse)
def home(request: Request) -> HTMLResponse:
    return render(request, "home.html", {"open_reads": request.app.state.linkfold.settings.open_reads})


@router.get("/lookup", response_class=HTMLResponse)
def lookup_page(request: Request, q: Annotated[str, Query(max_length=8192)] = "") -> HTMLResponse:
    read_access(request)
    answer = None
    if q.strip():
        state = request.app.state.linkfold
        [answer] = list(lookup(state.engine, [q.strip()], rules=state.rules(),
                               cache_size=state.settings.canon_cache_size))
    return render(request, "lookup.html", {"q": q, "answer": answer})


# Every form post of the pages is checked for its origin before anything else (see screen.same_origin).
SameOrigin = Annotated[None, Depends(same_origin)]


@router.post("/session")
def start_session(request: Request, _origin: SameOrigin, token: Annotated[str, Form(max_length=200)],
                  next: Annotated[str, Form(max_length=2000)] = "/") -> Response:
    refuse_nul(token=token, next=next)
    state = request.app.state.linkfold
    check = check_token(state.engine, token.strip())
    if check.state is not TokenState.VALID:
        client = request.client.host if request.client else "-"
        log.warning("api access refused: POST /session from %s: %s token (%s)", client, check.state.value,
                    f"token id {check.token_id}" if check.token_id is not None else "no known token")
        return render_error_page(request, 401, "unauthorized" if check.state is TokenState.UNKNOWN
                                 else "token_revoked", "that token is not valid" if check.state is
                                 TokenState.UNKNOWN else "that token has been revoked")
    response = RedirectResponse(_safe_next(next), status_code=303)
    response.set_cookie(COOKIE_NAME, token.strip(), max_age=COOKIE_MAX_AGE, httponly=True, samesite="strict",
                        secure=request.url.scheme == "https", path="/")
    return response


@router.post("/session/end")
def end_session(_origin: SameOrigin) -> Response:
    response = RedirectResponse("/", status_code=303)
    response.delete_cookie(COOKIE_NAME, path="/", httponly=True, samesite="strict")
    return response


@router.get("/clusters", response_class=HTMLResponse)
def clusters_page(request: Request, level: Annotated[str, Query(pattern="^(article|story)$")] = "article",
                  min_size: Annotated[int, Query(ge=1, le=1_000_000)] = 2,
                  outlet: Annotated[str, Query(max_length=255)] = "",
                  limit: Annotated[int, Query(ge=1, le=1000)] = 200) -> HTMLResponse:
    read_access(request)
    engine = request.app.state.linkfold.engine
    rows = [row.as_dict() for row in list_clusters(engine, level=level, min_size=min_size,
                                                    outlet=outlet.strip() or None, limit=limit,
                                                    settings=request.app.state.linkfold.settings)]
    return render(request, "clusters.html", {"rows": rows, "level": level, "min_size": min_size,
                                             "outlet": outlet, "limit": limit})


def _texts(engine, keys: list[str]) -> dict[str, dict | None]:
    with engine.connect() as conn:
        found = canonicals_by_key(conn, keys)
        return {key: current_document(conn, found[key]["id"]) if key in found else None for key in keys}


@router.get("/clusters/{cluster_id}", response_class=HTMLResponse)
def cluster_page(request: Request, cluster_id: str,
                 compare: Annotated[str, Query(max_length=64)] = "",
                 decided: Annotated[int | None, Query(ge=1)] = None) -> HTMLResponse:
    read_access(request)
    engine = request.app.state.linkfold.engine
    detail = show_cluster(engine, cluster_id, settings=request.app.state.linkfold.settings)
    members = detail.members
    founder = next((m for m in members if m["founder"]), members[0] if members else None)
    docs = _texts(engine, [m["url_key"] for m in members])
    others = [m for m in members if founder is None or m["url_key"] != founder["url_key"]]
    chosen = next((m for m in others if m["url_key"] == compare), None)
    if chosen is None:
        chosen = next((m for m in others if docs.get(m["url_key"])), others[0] if others else None)
    view = None
    if founder is not None and chosen is not None:
        left, right = docs.get(founder["url_key"]), docs.get(chosen["url_key"])
        if left is not None and right is not None:
            view = side_by_side(left["text"] or "", right["text"] or "")
    return render(request, "cluster.html", {
        "d": detail, "founder": founder, "chosen": chosen, "others": others, "view": view,
        "docs": docs, "can_write": may_write(request), "decided": decided,
        "other_level": "story" if detail.level == "article" else "article"})


@router.post("/clusters/{cluster_id}/decide")
def decide_page(request: Request, _origin: SameOrigin, cluster_id: str,
                verdict: Annotated[str, Form(pattern="^(same|different)$")],
                member: Annotated[str, Form(min_length=1, max_length=64)],
                by: Annotated[str, Form(max_length=200)] = "",
                note: Annotated[str, Form(max_length=2000)] = "") -> Response:
    write_access(request)
    refuse_nul(member=member, by=by, note=note)
    engine = request.app.state.linkfold.engine
    res = resolve_cluster_id(engine, cluster_id)
    if not by.strip():
        raise InputError("say who decided: fill in 'your name'")
    result = record_decision(engine, verdict, res.current, member, decided_by=by.strip(),
                             note=note.strip() or None)
    target = f"/clusters/{quote(res.current, safe='')}?compare={quote(member, safe='')}" \
             f"&decided={result.decision.id}"
    # RFC 9110 §15.4.4: 303 sends the browser to GET the page again, so a reload does not post twice.
    return RedirectResponse(target, status_code=303)


@router.get("/ids/{cluster_id}", response_class=HTMLResponse)
def id_page(request: Request, cluster_id: str) -> HTMLResponse:
    read_access(request)
    res = resolve_cluster_id(request.app.state.linkfold.engine, cluster_id)
    return render(request, "id.html", {"res": res})


@router.get("/charts", response_class=HTMLResponse)
def charts_page(request: Request) -> HTMLResponse:
    read_access(request)
    return render(request, "charts.html", {})


def _svg(body: str) -> Response:
    return Response(body, media_type="image/svg+xml", headers={"Cache-Control": "no-store"})


@router.get("/charts/similarity.svg")
def similarity_chart(request: Request) -> Response:
    read_access(request)

    state = request.app.state.linkfold
    return _svg(charts.similarity_svg(similarity_values(state.engine),
                                      article_threshold=state.settings.article_threshold,
                                      story_threshold=state.settings.story_threshold))


@router.get("/charts/cluster-sizes.svg")
def sizes_chart(request: Request) -> Response:
    read_access(request)
    return _svg(charts.sizes_svg(request.app.state.linkfold.engine))


@router.get("/network", response_class=HTMLResponse)
def network_page(request: Request, dataset: Annotated[list[str] | None, Query(max_length=20)] = None,
                 min_units: Annotated[int, Query(ge=DEFAULT_MIN_UNITS, le=1_000_000)] = DEFAULT_MIN_UNITS,
                 color: Annotated[str, Query(max_length=200)] = "",
                 weight: Annotated[str, Query(pattern="^(jaccard|lift|units)$")] = "jaccard",
                 all_urls: bool = False) -> HTMLResponse:
    # Aggregates only, under the read token, with the API's floor of units (docs/network.md).
    read_access(request)
    engine = request.app.state.linkfold.engine
    with engine.connect() as conn:
        names = [d["dataset"] for d in list_datasets(conn)]
    chosen = [d for d in (dataset or []) if d.strip()] or names[:1]
    context: dict[str, Any] = {"names": names, "chosen": chosen, "min_units": min_units, "color": color,
                               "weight": weight, "all_urls": all_urls, "weights": network_svg.WEIGHTS}
    if chosen:
        net = co_exposure(engine, datasets=chosen, min_units=min_units, all_urls=all_urls)
        attributes = network_svg.attribute_choices(net)
        colour_by = color if color in attributes else None
        dist = exposure_distribution(engine, datasets=chosen, min_units=min_units, all_urls=all_urls)
        context.update(net=net, attributes=attributes, color=colour_by or "",
                       graph=network_svg.network_svg(net, attribute=colour_by, weight=weight),
                       distribution=network_svg.distribution_svg(dist, bucket_labels(), min_units=min_units),
                       top_edges=sorted(net.edges, key=lambda e: -e[weight])[:25])
    return render(request, "network.html", context)


@router.get("/compare", response_class=HTMLResponse)
def compare_page(request: Request, dataset: Annotated[list[str] | None, Query(max_length=20)] = None,
                 level: Annotated[str, Query(pattern="^(story|article)$")] = "story",
                 min_units: Annotated[int, Query(ge=UNIT_FLOOR, le=1_000_000)] = UNIT_FLOOR,
                 top: Annotated[int, Query(ge=1, le=100)] = DEFAULT_TOP,
                 all_urls: bool = False) -> HTMLResponse:
    # Counts only, under the read token, with the API's floor of units: exposure's, which is stricter than
    # the network's, as for /v1/compare (docs/corpus.md).
    read_access(request)
    engine = request.app.state.linkfold.engine
    with engine.connect() as conn:
        names = [d["dataset"] for d in list_datasets(conn)]
    chosen = list(dict.fromkeys(d for d in (dataset or []) if d.strip())) or names[:2]
    context: dict[str, Any] = {"names": names, "chosen": chosen, "level": level, "min_units": min_units,
                               "floor": UNIT_FLOOR, "top": top, "all_urls": all_urls}
    if len(chosen) >= 2:
        found = compare_datasets(engine, datasets=chosen, level=level, top=top, all_urls=all_urls,
                                 min_units=min_units).as_dict()
        context.update(c=found, id_col="story_id" if level == "story" else "article_id",
                       shares=compare_svg.shares_svg(found, measure="sightings"),
                       unit_shares=compare_svg.shares_svg(found, measure="units"),
                       overlap=compare_svg.overlap_svg(found))
    return render(request, "compare.html", context)
