"""The HTTP API (under /v1) and the inspection pages, served by one FastAPI application.

``create_app(settings, engine=…)`` builds it; ``linkfold serve`` runs it on uvicorn. docs/api.md is the
reference for every endpoint, the access rules, the errors and the limits.
"""

from __future__ import annotations

from .app import create_app
from .errors import API_PREFIX

__all__ = ["API_PREFIX", "create_app"]
