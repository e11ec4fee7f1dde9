"""One vocabulary across the interface (docs/vocabulary.md): what `--format` means, the names of the
commands that bring data in, the field and column names, and every deprecated spelling still working with
its one-line warning (both backends)."""

from __future__ import annotations

import csv
import io
import json
import re
from pathlib import Path

import click
import pytest
import sqlalchemy as sa

from linkfold._commands._common import DEPRECATIONS, OUTPUT_FORMATS
from linkfold.cli import cli, main
from linkfold.demo import demo_data_dir
from linkfold.store import make_engine
from linkfold.store import tables as t
from linkfold.store.linkage import LINK_COLUMNS
from linkfold.store.lookup import LOOKUP_FIELDS, OLD_FIELDS

cli.load_all()
DOCS = Path(__file__).resolve().parents[1] / "docs" / "vocabulary.md"
WARNING = re.compile(r"^deprecated: use (.+) instead \(the old spelling goes in the next release\)$", re.M)
DEMO_RULES = demo_data_dir() / "rules" / "demo.toml"

LISTINGS = ["datasets", "rejects", "runs", "clusters", "decide list", "follow-report", "outlets",
            "outlets report", "outlets versions", "rules list", "settings", "tokens list"]
STAGES = ["datasets load", "redirects load", "pages load", "documents load", "follow", "fetch", "extract",
          "dedupe", "recanonicalize", "nightly"]


def _command(path: str) -> click.Command:
    cmd: click.Command = cli
    for word in path.split():
        assert isinstance(cmd, click.Group)
        cmd = cmd.commands[word]
    return cmd


def _option(cmd: click.Command, flag: str) -> click.Option | None:
    return next((p for p in cmd.params if isinstance(p, click.Option) and flag in p.opts), None)


def _walk(group: click.Group, prefix: str = ""):
    for name, cmd in group.commands.items():
        yield f"{prefix}{name}", cmd
        if isinstance(cmd, click.Group):
            yield from _walk(cmd, f"{prefix}{name} ")


@pytest.mark.parametrize("path", LISTINGS + STAGES)
def test_every_listing_and_stage_writes_the_one_set_of_formats(path):
    option = _option(_command(path), "--format")
    assert option is not None and option.name == "fmt", path
    assert isinstance(option.type, click.Choice) and tuple(option.type.choices) == OUTPUT_FORMATS, path
    assert option.default == "table"


def test_format_never_names_what_a_command_reads():
    """Every `--format` is the output (its value lands in ``fmt``); what a file is goes in --input-format.
    The only exception is an old spelling, which keeps its old meaning for one release."""
    for path, cmd in _walk(cli):
        option = _option(cmd, "--format")
        if option is not None and not cmd.hidden:
            assert option.name == "fmt", f"linkfold {path}: --format must be an output format"
    for path in ("datasets load", "redirects load"):
        assert _option(_command(path), "--input-format") is not None


def test_bring_data_in_commands_are_what_load():
    loaders = sorted(p for p, _ in _walk(cli) if p.endswith(" load"))
    assert loaders == ["datasets load", "documents load", "outlets load", "pages load", "redirects load",
                       "rules load"]
    hidden = sorted(p for p, c in _walk(cli) if c.hidden)
    assert hidden == ["import-pages", "ingest", "rules add"]


def _docs_section(title: str) -> str:
    text = DOCS.read_text(encoding="utf-8")
    start = text.index(f"## {title}")
    end = text.find("\n## ", start + 1)
    return text[start:end if end != -1 else None]


def test_the_docs_list_every_deprecated_spelling_the_code_knows():
    section = _docs_section("Deprecated spellings")
    table = section[:section.index("Old fields and columns")]
    rows = re.findall(r"^\| `(.+?)` \| `(.+?)` \|$", table, re.M)
    listed = {old.replace("\\|", "|"): new.replace("\\|", "|") for old, new in rows}
    assert listed == DEPRECATIONS


def test_the_docs_list_the_old_lookup_fields():
    section = _docs_section("Deprecated spellings")
    for old, new in OLD_FIELDS.items():
        assert f"| `{old}` | `{new}` |" in section


# --- the old spellings work and warn ----------------------------------------------------------------------------
def _files(tmp_path: Path) -> dict[str, Path]:
    urls = tmp_path / "urls.txt"
    urls.write_text("https://harbour.example/2031/05/a\nhttps://harbour.example/2031/05/b\n", encoding="utf-8")
    pairs = tmp_path / "pairs.txt"  # not a name that says CSV: the format must come from the option
    pairs.write_text("short,expanded\nhttps://short.test/a,https://harbour.example/2031/05/a\n", encoding="utf-8")
    pairs_csv = tmp_path / "pairs.csv"
    pairs_csv.write_text(pairs.read_text(encoding="utf-8"), encoding="utf-8")
    pages = tmp_path / "pages.jsonl"
    pages.write_text(json.dumps({"url": "https://harbour.example/2031/05/a",
                                 "html": "<html><head><title>A</title></head><body><p>Text.</p></body></html>"})
                     + "\n", encoding="utf-8")
    return {"urls": str(urls), "pairs": str(pairs), "pairs_csv": str(pairs_csv), "pages": str(pages),
            "rules": str(DEMO_RULES)}


# Each old spelling: the command line that uses it, and the replacement its warning must name.
OLD_SPELLINGS = {
    "linkfold ingest": (["ingest", "{urls}", "--dataset", "old"], "linkfold datasets load"),
    "linkfold ingest --format": (["ingest", "{urls}", "--dataset", "old-lines", "--format", "lines"],
                                 "linkfold datasets load --input-format"),
    "linkfold import-pages": (["import-pages", "{pages}"], "linkfold pages load"),
    "linkfold follow --import": (["follow", "--import", "{pairs_csv}"], "linkfold redirects load"),
    "linkfold follow --import … --format": (["follow", "--import", "{pairs}", "--format", "csv"],
                                            "linkfold redirects load --input-format"),
    "linkfold rules add": (["rules", "add", "{rules}"], "linkfold rules load"),
    "--summary text|json": (["datasets", "load", "{urls}", "--dataset", "summary", "--summary", "json"],
                            "--format"),
    "--format text": (["extract", "--format", "text"], "--format table"),
}


def test_every_deprecated_spelling_has_a_check():
    assert set(OLD_SPELLINGS) == set(DEPRECATIONS)


@pytest.mark.parametrize("spelling", sorted(OLD_SPELLINGS))
@pytest.mark.parametrize("quiet", [False, True], ids=["loud", "quiet"])
def test_old_spelling_still_works_and_warns_once(spelling, quiet, db_url, tmp_path, capsys):
    argv, replacement = OLD_SPELLINGS[spelling]
    files = _files(tmp_path)
    args = [a.format(**files) for a in argv]
    assert main(["--db", db_url, *(["-q"] if quiet else []), *args]) == 0, spelling
    err = capsys.readouterr().err
    # One line; none under -q, which promises an empty stderr while the old spelling still works.
    assert WARNING.findall(err) == ([] if quiet else [replacement]), err


def test_old_spellings_keep_their_old_meanings(db_url, tmp_path, capsys):
    files = _files(tmp_path)
    # ingest --format lines: the INPUT format (a .txt of CSV-looking lines is read as plain lines).
    assert main(["--db", db_url, "ingest", files["pairs"], "--dataset", "as-lines", "--format", "lines"]) == 0
    # follow --import FILE --format csv: the pairs file's format (its name says nothing).
    assert main(["--db", db_url, "-q", "follow", "--import", files["pairs"], "--format", "csv"]) == 0
    # --summary json: one JSON object on stdout, as before.
    capsys.readouterr()
    assert main(["--db", db_url, "-q", "datasets", "load", files["urls"], "--dataset", "s", "--summary", "json"]) == 0
    assert json.loads(capsys.readouterr().out)["rows"] == 2
    engine = make_engine(db_url)
    with engine.connect() as conn:
        stored = conn.execute(sa.select(t.dataset_files.c.format, t.dataset_files.c.rows)
                              .where(t.dataset_files.c.file_name == "pairs.txt")).one()
        kinds = set(conn.execute(sa.select(t.links.c.kind)).scalars())
    engine.dispose()
    assert tuple(stored) == ("lines", 2) and kinds == {"redirect"}


# --- the new names ------------------------------------------------------------------------------------------------
def test_one_output_option_for_listings_and_summaries(db_url, tmp_path, capsys):
    files = _files(tmp_path)
    base = ["--db", db_url]
    assert main([*base, "datasets", "load", files["urls"], "--dataset", "d", "--input-format", "lines",
                 "--format", "csv"]) == 0
    out, err = capsys.readouterr()
    summary = list(csv.DictReader(io.StringIO(out)))
    assert len(summary) == 1 and summary[0]["rows"] == "2" and "2 rows" in err
    assert main([*base, "datasets", "--format", "json"]) == 0
    (listed,) = json.loads(capsys.readouterr().out)
    assert listed["dataset"] == "d" and listed["sightings"] == 2
    assert main([*base, "datasets", "--format", "csv"]) == 0
    # RFC 4180 §2: CRLF line ends, a header line first.
    assert capsys.readouterr().out.startswith("dataset,files,rows,sightings,rejects,")
    assert main([*base, "runs", "--format", "jsonl"]) == 0
    (run,) = [json.loads(x) for x in capsys.readouterr().out.splitlines()]
    assert run["state"] == run["status"] == "ok" and run["detail"] is run["error"] is None
    assert main([*base, "redirects", "load", files["pairs"], "--input-format", "csv", "--format", "json"]) == 0
    assert json.loads(capsys.readouterr().out)


def test_fields_agree_between_lookup_export_rejects_and_the_view(db_url, tmp_path, capsys):
    path = tmp_path / "panel.csv"
    path.write_text("id,url\n1,https://harbour.example/2031/05/a?utm_source=x\n2,mailto:someone@harbour.example\n",
                    encoding="utf-8")
    assert main(["--db", db_url, "-q", "datasets", "load", str(path), "--dataset", "p", "--key-column", "id"]) == 0
    engine = make_engine(db_url)
    with engine.connect() as conn:
        view = conn.execute(sa.text("SELECT * FROM sighting_links ORDER BY line_no")).mappings().all()
    engine.dispose()
    assert set(LINK_COLUMNS) <= set(view[0]), "the export's columns are the view's"
    assert {"canonical_url", "line_no", "url_reason"} <= set(view[0]) and "canonical_url" in LOOKUP_FIELDS
    assert view[1]["url_reason"] == view[1]["url_error"] == "not_http"
    capsys.readouterr()
    assert main(["--db", db_url, "lookup", "mailto:someone@harbour.example",
                 "https://harbour.example/2031/05/a"]) == 0
    bad, good = [json.loads(x) for x in capsys.readouterr().out.splitlines()]
    assert bad["reason"] == bad["error"] == view[1]["url_reason"]
    assert good["canonical_url"] == good["canonical"] == view[0]["canonical_url"]
    assert main(["--db", db_url, "rejects", "--dataset", "p", "--format", "jsonl"]) == 0
    (reject,) = [json.loads(x) for x in capsys.readouterr().out.splitlines()]
    assert reject["line_no"] == reject["line"] == view[1]["line_no"] == 3


def test_state_and_reason_columns_are_named_alike():
    """`status` is an HTTP status only; no table says error or unusable_reason any more (migration 0022)."""
    for table in t.metadata.tables.values():
        names = set(table.columns.keys())
        assert not names & {"error", "unusable_reason"}, table.name
        if "status" in names:
            assert isinstance(table.c.status.type, sa.Integer), f"{table.name}.status is not an HTTP status"
