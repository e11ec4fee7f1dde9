"""Exposure tables recomputed independently: generated panel and post data whose truth is known from how it
was generated (which outlet, article and story each URL is, where each short link leads), grouped with
pandas and compared with what the registry's SQL grouping gives, on both backends.

The data is shaped like a lab's: repeated visits, tracking-parameter variants of one article, pages that
are not articles, units with no article at all, rows without a unit or a time, short links that lead to
an article on another outlet (and one never followed), two datasets at once.
"""

from __future__ import annotations

import csv
import hashlib
import hmac
import io
import json
import random
from datetime import UTC, datetime, timedelta
from pathlib import Path

import pandas as pd
import pytest
import sqlalchemy as sa

from linkfold.cli import main
from linkfold.errors import ConfigError
from linkfold.exposure import exposure_rows, outlet_exposure, write_exposure
from linkfold.follow import import_redirects
from linkfold.ingest import ingest_dump
from linkfold.store import tables as t

RULES = Path(__file__).resolve().parent.parent / "service" / "linkfold" / "demo_data" / "rules" / "demo.toml"
KEY = b"an invented lab key for exposure tests, long enough"

# Article pages by the demo rules, with the outlet, an article and a story each belongs to (truth).
ARTICLES = {
    "https://northvale-herald.example/news/2031/05/dam-levels": ("Northvale Herald", "art-h1", "sto-1"),
    "https://northvale-herald.example/news/2031/05/school-vote": ("Northvale Herald", "art-h2", "sto-2"),
    "https://riverton-daily.test/story/dam-levels-rise-12": ("Riverton Daily", "art-r1", "sto-1"),
    # Two URLs of one article (an update at a new address), one cluster.
    "https://riverton-daily.test/story/ferry-strike-13": ("Riverton Daily", "art-r2", "sto-3"),
    "https://riverton-daily.test/story/ferry-strike-ends-14": ("Riverton Daily", "art-r2", "sto-3"),
    "https://lakeside-wire.example/wire/20310501/dam-levels": ("Lakeside Wire", "art-l1", "sto-1"),
}
NOT_ARTICLES = {"https://northvale-herald.example/": "Northvale Herald",
                "https://riverton-daily.test/about": "Riverton Daily"}
# Short links (shortener host of the demo rules) and where they lead: an article on another outlet.
SHORT = {"https://short.test/a1": "https://lakeside-wire.example/wire/20310501/dam-levels",
         "https://short.test/a2": "https://riverton-daily.test/story/ferry-strike-13"}
NEVER_FOLLOWED = "https://short.test/zz"


def _pseudonym(raw: str) -> str:
    import base64

    mac = hmac.new(KEY, raw.strip().encode(), hashlib.sha256).digest()
    return "hs256:" + base64.b32encode(mac).decode().rstrip("=").lower()


def _generate(tmp_path: Path, seed: int = 7) -> tuple[Path, Path, pd.DataFrame]:
    rnd = random.Random(seed)
    units = [f"person-{i:03d}" for i in range(25)]
    homebodies = units[:3]  # units that only ever see pages that are not articles
    start = datetime(2031, 5, 1, tzinfo=UTC)
    truth = []

    def pick_url(unit: str) -> str:
        if unit in homebodies:
            return rnd.choice(list(NOT_ARTICLES))
        roll = rnd.random()
        if roll < 0.6:
            url = rnd.choice(list(ARTICLES))
            return url + rnd.choice(["", "?utm_source=feed", "?utm_medium=social&ref=homepage"])
        if roll < 0.75:
            return rnd.choice(list(NOT_ARTICLES))
        if roll < 0.93:
            return rnd.choice(list(SHORT))
        if roll < 0.95:
            return "ftp://northvale-herald.example/file"  # refused by the canonicaliser: still a sighting
        return NEVER_FOLLOWED

    def record(dataset: str, unit: str | None, url: str, when: datetime | None) -> None:
        bare = url.split("?")[0]
        final = SHORT.get(bare, bare)
        if bare == NEVER_FOLLOWED or bare.startswith("ftp:"):
            outlet = article = story = None
            is_article = False
        elif final in ARTICLES:
            outlet, article, story = ARTICLES[final]
            is_article = True
        else:
            outlet, article, story, is_article = NOT_ARTICLES[final], None, None, False
        truth.append({"dataset": dataset, "unit": _pseudonym(unit) if unit else None, "outlet": outlet,
                      "article_id": article, "story_id": story, "is_article": is_article,
                      "seen_at": pd.Timestamp(when) if when else pd.NaT})

    panel = tmp_path / "panel.csv"
    with panel.open("w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh)
        w.writerow(["visit", "url", "when", "person"])
        for i in range(900):
            unit = rnd.choice(units)
            url = pick_url(unit)
            when = start + timedelta(minutes=rnd.randrange(60 * 24 * 45))
            if i % 37 == 0:
                when = None  # no time
            shown_unit = "" if i % 31 == 0 else (f"  {unit} " if i % 7 == 0 else unit)
            w.writerow([f"v{i}", url, when.isoformat().replace("+00:00", "Z") if when else "", shown_unit])
            record("panel", shown_unit.strip() or None, url, when)
    posts = tmp_path / "posts.jsonl"
    with posts.open("w", encoding="utf-8") as fh:
        for i in range(300):
            unit = rnd.choice(units[5:15])
            links = [pick_url(unit) for _ in range(rnd.choice([1, 1, 2]))]
            when = start + timedelta(minutes=rnd.randrange(60 * 24 * 45))
            fh.write(json.dumps({"id": f"p{i}", "account": unit, "at": when.isoformat(),
                                 "links": [{"url": u} for u in links]}) + "\n")
            for u in links:
                record("posts", unit, u, when)
    return panel, posts, pd.DataFrame(truth)


def _world(engine, tmp_path: Path) -> pd.DataFrame:
    panel, posts, truth = _generate(tmp_path)
    ingest_dump(engine, [panel], dataset="panel", key_column="visit", time_column="when", unit_column="person",
                pseudonym_key=KEY, ruleset=RULES, batch_size=100)
    ingest_dump(engine, [posts], dataset="posts", url_column="links.*.url", key_column="id", time_column="at",
                unit_column="account", pseudonym_key=KEY, batch_size=50)
    pairs = tmp_path / "pairs.csv"
    pairs.write_text("short,expanded\n" + "".join(f"{s},{e}\n" for s, e in SHORT.items()))
    import_redirects(engine, pairs)
    # Article and story IDs as the dedupe stage would leave them (the IDs are an input here).
    now = datetime(2031, 7, 1, tzinfo=UTC)
    with engine.begin() as conn:
        ids = dict(conn.execute(sa.select(t.canonical_urls.c.url, t.canonical_urls.c.id)).all())
        minted: set[str] = set()
        for n, (url, (_, article, story)) in enumerate(ARTICLES.items()):
            for level, cid in (("article", article), ("story", story)):
                if cid not in minted:
                    minted.add(cid)
                    conn.execute(sa.insert(t.cluster_ids).values(id=cid, level=level, stem=cid, founder_id=ids[url],
                                                                 mint_order=n, state="live", minted_at=now))
                conn.execute(sa.insert(t.cluster_members).values(level=level, canonical_id=ids[url], cluster_id=cid))
    return truth


def _expected(truth: pd.DataFrame, *, datasets, level: str, by: str | None = None, all_urls: bool = False):
    target = {"outlet": "outlet", "article": "article_id", "story": "story_id"}[level]
    d = truth[truth.dataset.isin(datasets) & truth.unit.notna() & truth[target].notna()]
    if not all_urls:
        d = d[d.is_article]
    keys = (["dataset"] if len(datasets) > 1 else []) + ["unit", target]
    if by == "week":
        d = d[d.seen_at.notna()].copy()
        # pandas' weekly periods ending on Sunday start on Monday, as ISO 8601 weeks do.
        d["period"] = d.seen_at.dt.tz_convert(None).dt.to_period("W-SUN").dt.start_time.dt.strftime("%Y-%m-%d")
        keys.append("period")
    g = d.groupby(keys, dropna=False).agg(sightings=("seen_at", "size"), first_seen=("seen_at", "min"),
                                          last_seen=("seen_at", "max")).reset_index()
    return g.sort_values(keys).reset_index(drop=True)


def _got(engine, **kw) -> pd.DataFrame:
    table = exposure_rows(engine, **kw)
    frame = pd.DataFrame(list(table.rows), columns=table.columns)
    for col in ("first_seen", "last_seen"):
        frame[col] = pd.to_datetime(frame[col], utc=True)
    keys = [c for c in frame.columns if c not in ("sightings", "first_seen", "last_seen")]
    return frame.sort_values(keys).reset_index(drop=True)


@pytest.mark.parametrize("level", ["outlet", "article", "story"])
def test_exposure_counts_match_a_pandas_group_by(engine, tmp_path, level):
    truth = _world(engine, tmp_path)
    for datasets, by, all_urls in ((["panel"], None, False), (["panel", "posts"], None, False),
                                   (["panel", "posts"], "week", False), (["posts"], None, True)):
        want = _expected(truth, datasets=datasets, level=level, by=by, all_urls=all_urls)
        got = _got(engine, datasets=datasets, level=level, by=by, all_urls=all_urls)
        pd.testing.assert_frame_equal(got[list(want.columns)], want, check_dtype=False)
    # Units that saw no article at all have no row; short links count for where they lead.
    homebodies = {_pseudonym(f"person-{i:03d}") for i in range(3)}
    assert homebodies.isdisjoint(_got(engine, datasets=["panel"], level=level).unit)


def test_what_is_left_out_is_counted(engine, tmp_path):
    truth = _world(engine, tmp_path)
    table = exposure_rows(engine, datasets=["panel"], level="outlet", by="week")
    rows = list(table.rows)
    panel = truth[truth.dataset == "panel"]
    c = table.coverage
    assert c["sightings"] == len(panel)
    assert c["no_unit"] == panel.unit.isna().sum() > 0
    assert c["not_article"] == (panel.unit.notna() & ~panel.is_article).sum() > 0
    assert c["no_time"] == (panel.unit.notna() & panel.is_article & panel.seen_at.isna()).sum() > 0
    assert c["counted"] == sum(r["sightings"] for r in rows)
    assert sum(c[k] for k in ("no_unit", "not_article", "no_target", "no_time", "counted")) == c["sightings"]


def test_outlet_attributes_of_the_newest_list_are_added(engine, tmp_path):
    _world(engine, tmp_path)
    with engine.begin() as conn:
        now = datetime(2031, 7, 1, tzinfo=UTC)
        for n, kind in ((1, "old"), (2, "new")):
            list_id = conn.execute(sa.insert(t.outlet_lists).values(
                name=f"list {n}", sha256=str(n) * 64, columns=["type", "unit"], created_at=now)
                .returning(t.outlet_lists.c.id)).scalar_one()
            conn.execute(sa.insert(t.outlet_entries), [
                {"list_id": list_id, "match": "northvale-herald.example", "outlet": "Northvale Herald",
                 "attributes": {"type": f"{kind} daily", "unit": "county"}, "line_no": 2},
                {"list_id": list_id, "match": "riverton-daily.test", "outlet": "Riverton Daily",
                 "attributes": {"type": f"{kind} weekly", "unit": "town"}, "line_no": 3}])
    table = exposure_rows(engine, datasets=["panel"], level="outlet")
    # A lab attribute named like one of our columns is prefixed, never hides it.
    assert table.columns == ["unit", "outlet", "sightings", "first_seen", "last_seen", "type", "outlet_unit"]
    rows = list(table.rows)
    by_outlet = {r["outlet"]: (r["type"], r["outlet_unit"]) for r in rows}
    assert by_outlet["Northvale Herald"] == ("new daily", "county")
    assert by_outlet["Lakeside Wire"] == (None, None)  # not on the list
    assert all(r["unit"].startswith("hs256:") for r in rows)


@pytest.mark.parametrize("fmt", ["csv", "jsonl", "parquet"])
def test_every_format_reads_back_equal(engine, tmp_path, fmt):
    _world(engine, tmp_path)
    want = _got(engine, datasets=["panel", "posts"], level="outlet", by="week")
    out = tmp_path / f"exposure.{fmt}"
    summary = write_exposure(engine, datasets=["panel", "posts"], level="outlet", by="week", fmt=fmt, out=out)
    assert summary.rows == len(want)
    if fmt == "csv":
        got = pd.read_csv(out, dtype={"period": str})
    elif fmt == "jsonl":
        got = pd.DataFrame([json.loads(line) for line in out.read_text(encoding="utf-8").splitlines()])
    else:
        got = pd.read_parquet(out)
    for col in ("first_seen", "last_seen"):
        got[col] = pd.to_datetime(got[col], utc=True)
    assert list(got.columns) == ["dataset", "unit", "outlet", "period", "sightings", "first_seen", "last_seen"]
    keys = ["dataset", "unit", "outlet", "period"]
    pd.testing.assert_frame_equal(got.sort_values(keys).reset_index(drop=True), want, check_dtype=False)


def test_the_aggregate_suppresses_small_groups(engine, tmp_path):
    truth = _world(engine, tmp_path)
    d = truth[(truth.dataset == "panel") & truth.unit.notna() & truth.is_article]
    per = d.groupby("outlet").agg(units=("unit", "nunique"), sightings=("unit", "size"))
    k = int(per.units.median()) + 1  # some outlets fall below it
    got = outlet_exposure(engine, datasets=["panel"], min_units=k)
    shown = per[per.units >= k]
    assert {r["outlet"]: (r["units"], r["sightings"]) for r in got["rows"]} == \
        {o: (int(u), int(s)) for o, (u, s) in shown.iterrows()}
    assert got["suppressed_groups"] == (per.units < k).sum() > 0
    assert all(set(r) == {"outlet", "units", "sightings"} for r in got["rows"])  # no unit-level field
    with pytest.raises(ConfigError):
        outlet_exposure(engine, datasets=["panel"], min_units=0)


def test_the_command_streams_csv_and_summarises_on_stderr(db_url, tmp_path, capsys):
    from linkfold.store import make_engine

    engine = make_engine(db_url)
    try:
        truth = _world(engine, tmp_path)
    finally:
        engine.dispose()
    assert main(["--db", db_url, "exposure", "--dataset", "panel", "--level", "story", "--by", "month"]) == 0
    out = capsys.readouterr()
    frame = pd.read_csv(io.StringIO(out.out))
    assert list(frame.columns) == ["unit", "story_id", "period", "sightings", "first_seen", "last_seen"]
    panel = truth[(truth.dataset == "panel") & truth.unit.notna() & truth.is_article & truth.seen_at.notna()]
    assert frame.sightings.sum() == len(panel)
    assert "without a unit" in out.err and "rows from" in out.err
    assert main(["--db", db_url, "exposure", "--dataset", "panel", "-q"]) == 0
    assert capsys.readouterr().err == ""
    assert main(["--db", db_url, "exposure", "--dataset", "nope"]) == 7
    assert main(["--db", db_url, "exposure", "--dataset", "panel", "--format", "parquet"]) == 3


# --- over HTTP and from the Python client -------------------------------------------------------------------
def test_the_client_gets_unit_rows_only_with_a_units_token(db_url, engine, tmp_path):
    from linkfold.client import ApiError, Client
    from linkfold.store.tokens import create_token
    from test_api_support import LiveServer

    _world(engine, tmp_path)
    read = create_token(engine, scope="read", note="exposure tests").secret
    units = create_token(engine, scope="units", note="exposure tests: unit rows").secret
    write = create_token(engine, scope="write", note="exposure tests").secret
    want = _got(engine, datasets=["panel", "posts"], level="outlet", by="week")
    with LiveServer(db_url, cwd=tmp_path) as server:
        with Client(server.url, token=units) as lf:
            got = lf.exposure(["panel", "posts"], level="outlet", by="week")
            story = lf.exposure("panel", level="story")
        keys = ["dataset", "unit", "outlet", "period"]
        pd.testing.assert_frame_equal(got.sort_values(keys).reset_index(drop=True), want, check_dtype=False)
        assert list(story.columns) == ["unit", "story_id", "sightings", "first_seen", "last_seen"]
        for token in (read, write):  # neither read nor write includes unit-level rows
            with Client(server.url, token=token) as lf, pytest.raises(ApiError) as info:
                lf.exposure("panel")
            assert info.value.status == 403 and info.value.code == "insufficient_scope"
        with Client(server.url, token=read) as lf:
            agg = lf.outlet_exposure(["panel"], min_units=12)
            with pytest.raises(ApiError) as below:
                lf.outlet_exposure(["panel"], min_units=2)  # never below the documented minimum
            assert below.value.status == 422
            with pytest.raises(ApiError) as unknown:
                lf.outlet_exposure(["no-such-dataset"])
            assert unknown.value.status == 404
    lib = outlet_exposure(engine, datasets=["panel"], min_units=12)
    assert agg.to_dict("records") == lib["rows"] and agg.attrs["suppressed_groups"] == lib["suppressed_groups"]
    assert "unit" not in agg.columns


def test_open_reads_never_open_unit_rows(db_url, engine, tmp_path):
    from linkfold.api import create_app
    from test_api_support import AsgiClient, settings_for

    _world(engine, tmp_path)
    client = AsgiClient(create_app(settings_for(db_url, open_reads=True), engine=engine))
    assert client.get("/v1/exposure?dataset=panel", token=None).status_code == 401
    answer = client.get("/v1/exposure/outlets?dataset=panel&dataset=posts&by=month", token=None)
    assert answer.status_code == 200
    body = answer.json()
    assert body["columns"][:3] == ["dataset", "outlet", "period"] and body["min_units"] == 10
    assert all(r["units"] >= 10 for r in body["rows"])
