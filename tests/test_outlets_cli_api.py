"""``linkfold outlets`` from the command line, over HTTP (in process) and through the Python client
(a real server on loopback), on both backends: the same rows the library gives."""

from __future__ import annotations

import csv
import io
import json
from pathlib import Path

import pytest
import sqlalchemy as sa

from linkfold import errors
from linkfold.api import create_app
from linkfold.cli import main
from linkfold.client import Client
from linkfold.outlets import outlet_report, outlet_table
from linkfold.store.tokens import create_token
from test_api_support import AsgiClient, LiveServer, settings_for
from test_outlets_counts import build


@pytest.fixture
def world(engine: sa.Engine, tmp_path: Path) -> dict:
    return build(engine, tmp_path)


def run(capsys, db_url: str, *args: str) -> tuple[int, str, str]:
    code = main(["--db", db_url, *args])
    out, err = capsys.readouterr()
    return code, out, err


def test_cli_load_noop_table_formats_and_report(capsys, db_url: str, engine: sa.Engine, world: dict,
                                                tmp_path: Path) -> None:
    path = tmp_path / "outlets.csv"
    # build() loaded this file already: loading it again is a no-op that says so.
    code, out, err = run(capsys, db_url, "outlets", "load", str(path))
    assert code == 0 and json.loads(out)["new"] is False and "already stored as version 1" in err
    with engine.connect() as conn:
        rows = outlet_table(conn).rows
    code, out, err = run(capsys, db_url, "outlets", "--format", "jsonl")
    assert code == 0 and [json.loads(line) for line in out.splitlines()] == rows
    assert "sightings counted" in err and "short links not resolved yet" in err
    code, out, _ = run(capsys, db_url, "outlets", "--format", "csv")
    got = list(csv.DictReader(io.StringIO(out)))
    assert list(got[0]) == ["outlet", "type", "reach", "datasets", "sightings", "units", "urls", "articles",
                            "stories", "listed"]
    assert [(r["outlet"], int(r["sightings"])) for r in got] == [(r["outlet"], r["sightings"]) for r in rows]
    quiet_units = {r["outlet"]: r["units"] for r in got}
    assert quiet_units["Quiet Outlet"] == ""  # no unit: empty, not 0
    code, out, err = run(capsys, db_url, "-q", "outlets")
    assert code == 0 and err == "" and out.splitlines()[0].split()[0] == "outlet"
    code, out, err = run(capsys, db_url, "outlets", "report", "--format", "jsonl", "--shapes", "3")
    with engine.connect() as conn:
        want = outlet_report(conn, shapes=3).rows
    assert code == 0 and [json.loads(line) for line in out.splitlines()] == want
    assert "articles by the site rules; short links:" in err
    code, out, _ = run(capsys, db_url, "outlets", "report")
    assert "most frequent path shapes that are not articles:" in out and "/video/{n4}/{slug}" in out
    code, out, _ = run(capsys, db_url, "outlets", "versions", "--format", "jsonl")
    assert [json.loads(line)["in_force"] for line in out.splitlines()] == [True]


def test_cli_refusals_name_file_line_and_reason(capsys, db_url: str, world: dict, tmp_path: Path) -> None:
    bad = tmp_path / "bad.csv"
    bad.write_text("domain,outlet\nbeta.test,Beta Daily\nhttps://x.example/,X\nz.example,\n", encoding="utf-8")
    code, out, err = run(capsys, db_url, "outlets", "load", str(bad))
    assert code == errors.InputError.exit_code and out == ""
    assert f"{bad}:3: not a domain" in err and f"{bad}:4: empty outlet name" in err
    assert "nothing was stored" in err
    conflict = tmp_path / "conflict.csv"
    conflict.write_text("domain,outlet\nbeta.test,Beta Daily\n", encoding="utf-8")
    code, _, err = run(capsys, db_url, "outlets", "load", str(conflict))
    assert code == errors.InputError.exit_code
    assert f"{conflict}:2: 'beta.test' is outlet 'Beta Post' in the ruleset in force, 'Beta Daily' in this list" in err
    code, out, err = run(capsys, db_url, "outlets", "load", str(conflict), "--check", "--prefer", "rules")
    assert code == 0 and out == "" and "checked only" in err
    code, out, err = run(capsys, db_url, "outlets", "load", str(conflict), "--prefer", "rules")
    assert code == 0 and json.loads(out)["new"] is True and "the rules file's name is used" in err
    code, out, _ = run(capsys, db_url, "outlets", "--listed", "--format", "jsonl")
    assert [json.loads(line)["outlet"] for line in out.splitlines()] == ["Beta Post"]
    code, _, err = run(capsys, db_url, "outlets", "--dataset", "nope")
    assert code == errors.NotFound.exit_code and "no dataset 'nope'" in err


def test_http_routes_under_the_read_token(db_url: str, engine: sa.Engine, world: dict) -> None:
    token = create_token(engine, scope="read", note="tests").secret
    api = AsgiClient(create_app(settings_for(db_url), engine=engine), token=token)
    assert api.get("/v1/outlets", token=False).status_code == 401
    body = api.get("/v1/outlets").json()
    with engine.connect() as conn:
        table = outlet_table(conn)
        report = outlet_report(conn, datasets=["gen-a"], shapes=2)
    assert body["outlets"] == table.rows and body["attributes"] == ["type", "reach"]
    assert body["list_version"] == 1 and body["summary"] == table.summary
    got = api.get("/v1/outlets/report", params={"dataset": "gen-a", "shapes": 2}).json()
    assert got["outlets"] == report.rows and got["summary"] == report.summary
    one = api.get("/v1/outlets/report", params={"outlet": "Alpha Times"}).json()
    assert [r["outlet"] for r in one["outlets"]] == ["Alpha Times"]
    missing = api.get("/v1/outlets", params={"dataset": "nope"})
    assert missing.status_code == 404 and missing.json()["error"]["code"] == "not_found"
    assert api.get("/v1/outlets/report", params={"shapes": -1}).status_code == 422
    assert api.get("/v1/outlets", params={"dataset": ""}).status_code == 422


def test_client_returns_dataframes(db_url: str, engine: sa.Engine, world: dict, tmp_path: Path) -> None:
    token = create_token(engine, scope="read", note="client").secret
    with LiveServer(db_url, cwd=tmp_path) as server, Client(server.url, token=token) as lf:
        frame = lf.outlets()
        report = lf.outlet_report(dataset="gen-b", shapes=1)
    with engine.connect() as conn:
        table = outlet_table(conn)
    assert list(frame.columns) == table.columns
    assert frame.set_index("outlet")["sightings"].to_dict() == {r["outlet"]: r["sightings"] for r in table.rows}
    assert frame.attrs["list_version"] == 1 and frame.attrs["summary"] == table.summary
    assert "Alpha Times" in set(report.outlet) and all(len(s) <= 1 for s in report.shapes)


def test_a_newer_ruleset_that_renames_a_listed_site_is_warned_about(capsys, db_url: str, engine: sa.Engine,
                                                                     world: dict, tmp_path: Path) -> None:
    from linkfold.canon import parse_rules
    from linkfold.store.rulesets import store_ruleset

    renamed = (tmp_path / "rules.toml").read_text(encoding="utf-8").replace('"Alpha Times"', '"Alpha Daily"')
    with engine.begin() as conn:
        store_ruleset(conn, parse_rules(renamed, source="renamed.toml"))
    code, out, err = run(capsys, db_url, "outlets", "--format", "jsonl")
    assert code == 0
    assert ("warning: outlet list line 2: 'alpha.example' is outlet 'Alpha Daily' in the ruleset in force, "
            "'Alpha Times' in this list; the list's name is used") in err
    assert "Alpha Times" in {json.loads(line)["outlet"] for line in out.splitlines()}
    code, _, err = run(capsys, db_url, "-q", "outlets")
    assert code == 0 and err == ""


def test_demo_loads_its_outlet_list(tmp_path: Path) -> None:
    from linkfold.demo import run_demo

    report = run_demo(tmp_path / "demo")
    text = "\n".join(report.lines())
    assert "outlet list: demo_data/outlets.csv stored as version 1 (6 entries, 5 outlets)" in text
    header = report.outlets[1]
    assert header.split() == ["outlet", "type", "reach", "coding", "founded", "datasets", "sightings", "units",
                              "urls", "articles", "stories", "listed"]
    assert any(line.strip().startswith("Eastbrook Gazette") for line in report.outlets)


def test_demo_shows_exposure_and_the_outlet_network(tmp_path: Path) -> None:
    """Issue 18's "the demo shows each": exposure tables and the co-exposure network of the panel."""
    import csv

    from linkfold.demo import run_demo

    report = run_demo(tmp_path / "demo")
    text = "\n".join(report.lines())
    assert "exposure of northvale-panel by outlet" in text and "co-exposure network of northvale-panel" in text
    with (tmp_path / "demo" / "network-edges.csv").open(encoding="utf-8") as fh:
        edges = list(csv.DictReader(fh))
    assert edges and all(e["outlet_a"] < e["outlet_b"] and int(e["units"]) >= 5 for e in edges)
    assert (tmp_path / "demo" / "network-nodes.csv").exists()
