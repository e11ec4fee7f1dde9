"""Per-outlet counts and the coverage report on generated data, both backends.

The counts are recomputed independently with a pandas group-by over the ``sighting_links`` view (the
final URL each sighting stands for), with the outlet list applied from the test's own dictionary, and
compared with :func:`linkfold.outlets.outlet_table`. Short links lead to other outlets; some are never
resolved; some rows cannot be parsed; one dataset carries units, the other none.
"""

from __future__ import annotations

import random
from datetime import UTC, datetime
from pathlib import Path

import pandas as pd
import pytest
import sqlalchemy as sa

from linkfold.follow import import_redirects
from linkfold.ingest import ingest_dump
from linkfold.outlets import load_outlet_list, outlet_report, outlet_table, path_shape, segment_shape
from linkfold.store import tables as t

RULES = r"""
name = "generated outlets"
shortener_hosts = ["short.test"]

[site."alpha.example"]
outlet = "Alpha Times"
article = ['^/news/\d{4}/[a-z0-9-]+$']

[site."beta.test"]
outlet = "Beta Post"
article = ['^/p/\d+$']
"""

# The list: Alpha keeps its rules name; gamma.example and delta.example form one group; beta is not listed.
LIST = {"alpha.example": "Alpha Times", "gamma.example": "Gamma Group", "delta.example": "Gamma Group",
        "news.epsilon.example": "Epsilon Local"}
LIST_CSV = """domain,outlet,type,reach
alpha.example,Alpha Times,daily,5000
gamma.example,Gamma Group,online,
delta.example,Gamma Group,,800
news.epsilon.example,Epsilon Local,weekly,12
quiet.example,Quiet Outlet,weekly,1
"""

WORDS = ["river", "bridge", "council", "harbour", "market", "school", "storm", "vote", "ferry", "mill"]


def slug(rng: random.Random, n: int = 3) -> str:
    return "-".join(rng.choice(WORDS) for _ in range(n))


def generate(tmp_path: Path, seed: int = 7) -> dict:
    """Two dumps, a file of short-link pairs, and what was generated of each non-article template."""
    rng = random.Random(seed)
    articles = ([f"https://alpha.example/news/2031/{slug(rng)}-{i}" for i in range(12)]
                + [f"https://beta.test/p/{1000 + i}" for i in range(8)]
                + [f"https://delta.example/stories/{slug(rng)}" for i in range(5)])
    videos = [f"https://alpha.example/video/{rng.randint(1000, 9999)}/{slug(rng, 4)}" for _ in range(6)]
    tags = [f"https://alpha.example/tag/{w}" for w in WORDS[:3]]
    others = ([f"https://gamma.example/a/{i}" for i in range(4)] + ["https://news.epsilon.example/",
              "https://www.epsilon.example/", f"http://192.0.2.{rng.randint(1, 9)}/x",
              "https://beta.test/search?q=ferry", "https://www.alpha.example/"])
    shorts = [f"https://short.test/s{i:03d}" for i in range(10)]
    # Seven short links lead to an article on some outlet (imported pairs); three are never resolved.
    pairs = [(shorts[i], rng.choice(articles)) for i in range(7)]
    pool = articles * 3 + videos * 2 + tags + others + shorts * 2 + ["not a url", "javascript:alert(1)"]
    files = {}
    for name in ("a", "b"):
        rows = ["id,url"] + [f"{name}{i},{rng.choice(pool)}" for i in range(300)]
        files[name] = tmp_path / f"{name}.csv"
        files[name].write_text("\n".join(rows) + "\n", encoding="utf-8")
    (tmp_path / "pairs.csv").write_text("short,expanded\n" + "".join(f"{s},{e}\n" for s, e in pairs),
                                        encoding="utf-8")
    (tmp_path / "rules.toml").write_text(RULES, encoding="utf-8")
    (tmp_path / "outlets.csv").write_text(LIST_CSV, encoding="utf-8")
    return {"files": files, "videos": videos, "tags": tags}


def build(engine: sa.Engine, tmp_path: Path) -> dict:
    world = generate(tmp_path)
    for name, path in world["files"].items():
        ingest_dump(engine, [path], dataset=f"gen-{name}", url_column="url", key_column="id",
                    ruleset=tmp_path / "rules.toml")
    import_redirects(engine, tmp_path / "pairs.csv")
    with engine.begin() as conn:
        # Units as the ingest stage would store them (keyed pseudonyms); dataset b has none.
        a_files = sa.select(t.dataset_files.c.id).join(t.datasets, t.datasets.c.id == t.dataset_files.c.dataset_id) \
            .where(t.datasets.c.name == "gen-a")
        conn.execute(sa.update(t.sightings).where(t.sightings.c.file_id.in_(a_files))
                     .values(unit=sa.literal("p", sa.String) + sa.cast(t.sightings.c.line_no % 13, sa.String)))
        # Article and story IDs for some URLs, as the dedupe stage would assign them: two alpha URLs share an
        # article ID, and a beta and a delta URL share a story ID.
        ids = {u: i for i, u in conn.execute(sa.select(t.canonical_urls.c.id, t.canonical_urls.c.url))}
        alpha = sorted(u for u in ids if "/news/" in u)
        now = datetime.now(UTC)
        clusters = [("A1", "article", [alpha[0], alpha[1]]), ("A2", "article", [alpha[2]]),
                    ("S1", "story", [alpha[0], "https://beta.test/p/1000",
                                     next(u for u in ids if u.startswith("https://delta.example/"))])]
        for n, (cid, level, members) in enumerate(clusters):
            conn.execute(sa.insert(t.cluster_ids).values(id=cid, level=level, stem=cid, founder_id=ids[members[0]],
                                                         mint_order=n, state="live", minted_at=now))
            conn.execute(sa.insert(t.cluster_members), [{"level": level, "canonical_id": ids[m], "cluster_id": cid}
                                                        for m in members])
    load_outlet_list(engine, tmp_path / "outlets.csv")
    return world


def expected_counts(engine: sa.Engine) -> pd.DataFrame:
    with engine.connect() as conn:
        view = pd.read_sql(sa.text("SELECT dataset, sighting_id, final_url, final_outlet FROM sighting_links"), conn)
        units = pd.read_sql(sa.text("SELECT id AS sighting_id, unit FROM sightings"), conn)
        urls = pd.read_sql(sa.text("SELECT id AS final_id, url AS final_url, host, domain FROM canonical_urls"), conn)
        members = pd.read_sql(sa.text("SELECT canonical_id AS final_id, level, cluster_id FROM cluster_members"), conn)
    df = view.dropna(subset=["final_url"]).merge(units, on="sighting_id").merge(urls, on="final_url")
    df["outlet"] = [LIST.get(h) or LIST.get(d) or o for h, d, o in zip(df.host, df.domain, df.final_outlet,
                                                                        strict=True)]
    df = df.dropna(subset=["outlet"])
    for level in ("article", "story"):
        ids = members[members.level == level][["final_id", "cluster_id"]].rename(columns={"cluster_id": level})
        df = df.merge(ids, on="final_id", how="left")
    grouped = df.groupby("outlet").agg(datasets=("dataset", "nunique"), sightings=("sighting_id", "size"),
                                       units=("unit", "nunique"), with_unit=("unit", "count"),
                                       urls=("final_url", "nunique"), articles=("article", "nunique"),
                                       stories=("story", "nunique"))
    return grouped


@pytest.fixture
def world(engine: sa.Engine, tmp_path: Path) -> dict:
    return build(engine, tmp_path)


def test_counts_match_an_independent_group_by(engine: sa.Engine, world: dict) -> None:
    expected = expected_counts(engine)
    with engine.connect() as conn:
        table = outlet_table(conn)
    got = {r["outlet"]: r for r in table.rows}
    assert set(expected.index) <= set(got)
    for outlet, exp in expected.iterrows():
        row = got[outlet]
        assert (row["datasets"], row["sightings"], row["urls"], row["articles"], row["stories"]) == (
            exp.datasets, exp.sightings, exp.urls, exp.articles, exp.stories), outlet
        assert row["units"] == (int(exp.units) if exp.with_unit else None), outlet
    # Outlets with no sightings appear only because the list names them, with zero counts.
    assert got["Quiet Outlet"]["sightings"] == 0 and got["Quiet Outlet"]["listed"]
    assert set(got) - set(expected.index) == {"Quiet Outlet"}
    # The list's group and its attributes (an empty cell is taken from the group's other line).
    assert got["Gamma Group"]["type"] == "online" and got["Gamma Group"]["reach"] == 800
    assert got["Beta Post"]["listed"] is False and got["Beta Post"]["type"] is None
    # Short links count for the outlet they lead to, never for the shortener.
    assert not any(r["outlet"] in ("short.test",) for r in table.rows)
    s = table.summary
    assert s["unparsable"] > 0 and s["short_links_unresolved"] > 0 and s["no_outlet"] > 0
    assert s["counted"] + s["unparsable"] + s["short_links_unresolved"] + s["no_outlet"] == s["sightings"]


def test_counts_of_one_dataset_and_listed_only(engine: sa.Engine, world: dict) -> None:
    with engine.connect() as conn:
        one = outlet_table(conn, datasets=["gen-b"])
        listed = outlet_table(conn, listed_only=True)
    # Dataset b carries no units: the column is empty, not zero.
    assert all(r["units"] is None for r in one.rows)
    assert all(r["datasets"] <= 1 for r in one.rows)
    assert {r["outlet"] for r in listed.rows} == {"Alpha Times", "Gamma Group", "Epsilon Local", "Quiet Outlet"}


def test_report_shapes_and_shares(engine: sa.Engine, world: dict) -> None:
    with engine.connect() as conn:
        report = outlet_report(conn, shapes=10)
        counts = {(r["outlet"]): r for r in outlet_table(conn).rows}
        view = pd.read_sql(sa.text("SELECT final_url, final_outlet, final_is_article FROM sighting_links "
                                   "WHERE final_url IS NOT NULL"), conn)
    rows = {r["outlet"]: r for r in report.rows}
    alpha = rows["Alpha Times"]
    assert alpha["sightings"] == counts["Alpha Times"]["sightings"]
    assert alpha["articles"] + alpha["not_articles"] + alpha["unknown"] == alpha["sightings"]
    on_alpha = view[view.final_outlet == "Alpha Times"]
    assert alpha["articles"] == int((on_alpha.final_is_article == True).sum())  # noqa: E712 (pandas)
    # The non-article shapes of alpha, against what was generated: every video is /video/{n4}/{slug}.
    shapes = {s["shape"]: s for s in alpha["shapes"]}
    videos = on_alpha[on_alpha.final_url.str.contains("/video/")]
    assert shapes["/video/{n4}/{slug}"]["sightings"] == len(videos)
    assert shapes["/video/{n4}/{slug}"]["urls"] == videos.final_url.nunique()
    for tag in world["tags"]:
        path = "/" + tag.split("/", 3)[3]
        got = shapes.get(path)
        assert got is None or got["sightings"] == int((on_alpha.final_url == tag).sum())
    assert "/news/{n4}/{slug}-{n1}" not in shapes  # articles are not shown
    assert rows["Beta Post"]["shapes"][0]["shape"] == "/search?q=ferry"
    assert rows["Quiet Outlet"]["sightings"] == 0 and rows["Quiet Outlet"]["article_share"] is None
    short = report.summary["short_links"]
    assert short["resolved"] > 0 and short["pending"] > 0
    assert short["sightings"] == short["resolved"] + short["pending"] + short["failed"] + short["refused"]
    assert sum(r["via_short_links"] for r in report.rows) == short["resolved"]


# --- path shapes (pure) -----------------------------------------------------------------------------------
@pytest.mark.parametrize(("segment", "shape"), [
    ("2031", "{n4}"), ("7", "{n1}"), ("2031-05-17", "{date}"), ("20310517", "{date}"), ("20311399", "{n8}"),
    ("3f2a9c0d11", "{hex}"), ("deadbeef", "deadbeef"), ("123e4567-e89b-12d3-a456-426614174000", "{uuid}"),
    ("council-approves-new-routes", "{slug}"), ("council-approves-routes-121", "{slug}-{n3}"),
    ("about-us", "about-us"), ("news", "news"), ("a8F3kd92Lx0qZ", "{id}"),
    ("photo-of-the-bridge.jpg", "{slug}.jpg"), ("index.html", "index.html"), ("", ""),
])
def test_segment_shapes(segment: str, shape: str) -> None:
    assert segment_shape(segment) == shape


def test_path_shapes() -> None:
    assert path_shape("https://a.example/video/8812/clip-of-the-day") == "/video/{n4}/{slug}"
    assert path_shape("https://a.example/") == "/"
    assert path_shape("https://a.example") == "/"
    assert path_shape("https://a.example/article.php?id=4411&ref=x") == "/article.php?id={n4}&ref=x"
    assert path_shape("https://a.example/tag/storm/") == "/tag/storm/"


# --- the final outlet everywhere a link's final columns are read ---------------------------------------------
def test_view_export_and_lookup_give_the_listed_final_outlet(engine: sa.Engine, world: dict) -> None:
    from linkfold.ingest import export_dataset, lookup

    with engine.connect() as conn:
        view = pd.read_sql(sa.text("SELECT canonical_url, outlet, final_url, final_domain, final_outlet "
                                   "FROM sighting_links WHERE final_domain IN ('delta.example', 'gamma.example')"),
                           conn)
    assert len(view) and set(view.final_outlet) == {"Gamma Group"}
    # The outlet of the URL as seen stays the canonicaliser's (docs/outlets.md).
    assert set(view[view.canonical_url == view.final_url].outlet) <= {"delta.example", "gamma.example"}
    short_to_delta = view[view.canonical_url.str.startswith("https://short.test/")]
    assert len(short_to_delta), "the generated world leads a short link to the group"
    answers = list(lookup(engine, ["https://delta.example/never/loaded", "https://www.gamma.example/x",
                                   "https://beta.test/never", *short_to_delta.canonical_url[:1]]))
    assert [a["final_outlet"] for a in answers[:3]] == ["Gamma Group", "Gamma Group", "Beta Post"]
    assert all(a["final_outlet"] == "Gamma Group" for a in answers[3:])
    out = world["files"]["a"].parent / "export.csv"
    export_dataset(engine, "gen-a", fmt="csv", out=out)
    exported = pd.read_csv(out, keep_default_na=False)
    on_delta = exported[exported.final_domain.isin(["delta.example", "gamma.example"])]
    assert len(on_delta) and set(on_delta.final_outlet) == {"Gamma Group"}
