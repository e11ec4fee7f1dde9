"""The app factory: one FastAPI application serving the /v1 API and the inspection pages."""

from __future__ import annotations

from pathlib import Path

from fastapi import Depends, FastAPI
from fastapi.staticfiles import StaticFiles
from sqlalchemy.engine import Engine

from .. import __version__
from ..settings import Settings, load_settings
from ..store import ensure_schema, make_engine
from . import pages, routes, routes_clusters, routes_corpus, routes_exposure, routes_network, routes_outlets
from .errors import API_PREFIX, install_handlers
from .limits import BodyLimit
from .screen import SecurityHeaders, no_nul
from .state import ApiState

STATIC_DIR = Path(__file__).with_name("static")

DESCRIPTION = """\
The linkfold registry over HTTP: look up URLs, url keys and IDs one at a time or in batches, read articles,
stories and the history of any ID, list datasets, runs and clusters, and record manual decisions.

Every request except `/v1/health` needs `Authorization: Bearer <token>` (RFC 6750): a read token for reads
(unless the server opens reads), a write token for writes. Every error is
`{"error": {"code": "...", "message": "..."}}`.
"""


def create_app(settings: Settings | None = None, *, engine: Engine | None = None) -> FastAPI:
    """The application for ``settings`` (default: :func:`load_settings`), on ``engine`` if given.

    The schema is checked once here, so a server never starts on a registry it cannot read.
    """
    settings = settings if settings is not None else load_settings()
    engine = engine if engine is not None else make_engine(settings.database_url, busy_timeout=settings.busy_timeout)
    ensure_schema(engine)
    # No Swagger or ReDoc pages: they load scripts from the internet, and nothing here may.
    app = FastAPI(title="linkfold", version=__version__, description=DESCRIPTION,
                  openapi_url=f"{API_PREFIX}/openapi.json", docs_url=None, redoc_url=None,
                  dependencies=[Depends(no_nul)])
    app.state.linkfold = ApiState(settings=settings, engine=engine)
    install_handlers(app, render_page=pages.render_error_page)
    app.add_middleware(BodyLimit, limit=settings.api_max_body_bytes)
    app.add_middleware(SecurityHeaders)
    app.include_router(routes.router, prefix=API_PREFIX)
    app.include_router(routes_clusters.router, prefix=API_PREFIX)
    app.include_router(routes_outlets.router, prefix=API_PREFIX)
    app.include_router(routes_network.router, prefix=API_PREFIX)
    app.include_router(routes_exposure.router, prefix=API_PREFIX)
    app.include_router(routes_corpus.router, prefix=API_PREFIX)
    app.include_router(pages.router, include_in_schema=False)
    app.mount("/static", StaticFiles(directory=STATIC_DIR), name="static")
    return app
