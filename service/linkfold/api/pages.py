"""The inspection pages: server-rendered HTML from Jinja templates, with no scripts from anywhere else.

Every page works without JavaScript; buttons are plain HTML forms. Reads need the same access as the API;
a browser sends its token as an HttpOnly, SameSite=Strict cookie that the token form sets (SameSite=Strict
is what keeps another site from posting a decision in the reviewer's name). Decisions need a write token.
"""

from __future__ import annotations

from pathlib import Path
from typing import Annotated, Any
from urllib.parse import quote

from fastapi import APIRouter, Form, Query, Request
from fastapi.responses import HTMLResponse, RedirectResponse, Response
from fastapi.templating import Jinja2Templates

from .. import __version__
from ..ingest import lookup
from ..store.tokens import TokenState, check_token
from .auth import COOKIE_NAME, Access, read_access

TEMPLATES = Jinja2Templates(directory=str(Path(__file__).with_name("templates")))
TEMPLATES.env.globals["version"] = __version__
TEMPLATES.env.filters["q"] = lambda value: quote(str(value), safe="")

router = APIRouter()

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
    access: Access = read_access(request)
    del access
    answer = None
    if q.strip():
        state = request.app.state.linkfold
        [answer] = list(lookup(state.engine, [q.strip()], rules=state.rules(),
                               cache_size=state.settings.canon_cache_size))
    return render(request, "lookup.html", {"q": q, "answer": answer})


@router.post("/session")
def start_session(request: Request, token: Annotated[str, Form(max_length=200)],
                  next: Annotated[str, Form(max_length=2000)] = "/") -> Response:
    state = request.app.state.linkfold
    check = check_token(state.engine, token.strip())
    if check.state is not TokenState.VALID:
        return render_error_page(request, 401, "unauthorized" if check.state is TokenState.UNKNOWN
                                 else "token_revoked", "that token is not valid" if check.state is
                                 TokenState.UNKNOWN else "that token has been revoked")
    response = RedirectResponse(_safe_next(next), status_code=303)
    response.set_cookie(COOKIE_NAME, token.strip(), max_age=COOKIE_MAX_AGE, httponly=True, samesite="strict",
                        secure=request.url.scheme == "https", path="/")
    return response


@router.post("/session/end")
def end_session() -> Response:
    response = RedirectResponse("/", status_code=303)
    response.delete_cookie(COOKIE_NAME, path="/", httponly=True, samesite="strict")
    return response
