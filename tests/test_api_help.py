"""`linkfold serve --help` names only pages and paths that exist (issue 15, item 9: it named /v1/docs,
which the app does not serve)."""

from __future__ import annotations

import re

from linkfold.api import create_app
from linkfold.cli import cli, main
from test_api_support import AsgiClient, settings_for

# A path in running text: a "/" not preceded by a word character, a dot, a colon or another "/" (which
# leaves out the host and path of a database URL in the examples).
_PATH = re.compile(r"(?<![\w.:/@])(/[A-Za-z0-9_./{}-]*)")


def _help_paths(capsys) -> list[str]:
    cli.load_all()
    assert main(["serve", "--help"]) == 0
    text = capsys.readouterr().out
    paths = sorted({p.rstrip(".,;") for p in _PATH.findall(text)})
    return [p for p in paths if p]


def test_every_path_serve_help_names_is_served(db_url, engine, capsys):
    paths = _help_paths(capsys)
    assert "/v1/openapi.json" in paths and "/" in paths  # the help does name the API and the pages
    app = create_app(settings_for(db_url, open_reads=True), engine=engine)
    routes = [getattr(r, "path", "") for r in app.routes]
    web = AsgiClient(app)
    for path in paths:
        if path.endswith("/") and path != "/":
            # A prefix ("paths under /v1/"): some route lives under it.
            assert any(r.startswith(path) for r in routes), path
            continue
        response = web.get(path, token=False)
        assert response.status_code == 200, f"serve --help names {path}, which answers {response.status_code}"
