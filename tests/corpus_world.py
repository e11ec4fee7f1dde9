"""A generated registry where the right corpus is known (no tests here): stories syndicated over invented
outlets, seen in two datasets through messy links, run through the real ingest, redirect import and
dedupe stages.

Each story has one text; its copies on other outlets carry the same text (a wire copy), so the dedupe
stage must fold them into one story while every outlet keeps its own article. Sightings reach the copies
through tracking parameters, short links (imported redirect pairs) and plain URLs; junk rows (home pages,
an unparsable URL) count for nothing. :func:`expected` recomputes the corpus from the generator's own
lists, without the registry, so a test compares the two.
"""

from __future__ import annotations

import csv
import random
from dataclasses import dataclass, field
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import Any

import sqlalchemy as sa

from linkfold.content import count_words, normalise_text, text_hash
from linkfold.follow import import_redirects
from linkfold.ingest import ingest_dump
from linkfold.store import tables as t

KEY = b"an invented lab key for the corpus tests, 32+ bytes"
OUTLETS = ["northvale-herald.example", "riverton-daily.test", "lakeside-wire.example", "upland-post.example"]
STAMP = datetime(2031, 6, 1, tzinfo=UTC)
_SYLLABLES = ["ka", "lo", "mi", "ne", "ru", "ta", "vo", "si", "de", "pa", "zu", "be", "go", "hi", "jo", "wu"]


def rules(tmp: Path) -> Path:
    lines = ['name = "corpus world"', 'shortener_hosts = ["short.test"]', ""]
    for host in OUTLETS:
        lines += [f'[site."{host}"]', "article = ['^/a/[0-9]+$']", ""]
    path = tmp / "corpus-rules.toml"
    path.write_text("\n".join(lines), encoding="utf-8")
    return path


@dataclass
class Copy:
    url: str                 # the article's plain URL
    outlet: str
    published: datetime | None


@dataclass
class Story:
    n: int
    title: str
    text: str
    language: str
    copies: list[Copy] = field(default_factory=list)


@dataclass
class World:
    stories: list[Story]
    no_text_url: str                                   # an article seen, with no document
    rows: dict[str, list[tuple[str, str, datetime]]]   # dataset -> (unit, URL as written, time)
    short: dict[str, str]                              # short link -> the copy URL it leads to


def _words(rnd: random.Random, n: int) -> str:
    return " ".join("".join(rnd.choice(_SYLLABLES) for _ in range(rnd.randrange(2, 5))) for _ in range(n))


def generate(seed: int = 3, n_stories: int = 12) -> World:
    rnd = random.Random(seed)
    stories = []
    for n in range(n_stories):
        language = ["en", "de-AT", "fr", "xx"][n % 4]  # "xx": a tag without a stop-word list
        story = Story(n, f"Story {n} about {_words(rnd, 3)}", _words(rnd, 150), language)
        k = 1 + n % 3  # one, two or three outlets carry it
        for j in range(k):
            outlet = OUTLETS[(n + j) % len(OUTLETS)]
            day = STAMP - timedelta(days=30 - n, hours=j * 5)
            published = None if (n % 5 == 4 and j == 0) else day  # an undated first copy now and then
            story.copies.append(Copy(f"https://{outlet}/a/{1000 + n * 10 + j}", outlet, published))
        stories.append(story)
    short = {f"https://short.test/s{n}": stories[n].copies[-1].url for n in range(0, n_stories, 3)}
    rows: dict[str, list[tuple[str, str, datetime]]] = {"panel": [], "posts": []}
    for dataset, n_units, n_rows in (("panel", 14, 260), ("posts", 4, 60)):
        for _ in range(n_rows):
            unit = f"{dataset}-person-{rnd.randrange(n_units)}"
            when = STAMP + timedelta(minutes=rnd.randrange(60 * 24 * 20))
            story = stories[rnd.randrange(n_stories // (1 if dataset == "panel" else 2))]
            copy = rnd.choice(story.copies)
            form = rnd.random()
            if form < 0.2:
                url = copy.url + "?utm_source=feed&utm_medium=social"
            elif form < 0.3 and any(v == copy.url for v in short.values()):
                url = next(s for s, v in short.items() if v == copy.url)
            else:
                url = copy.url
            rows[dataset].append((unit, url, when))
        rows[dataset].append((f"{dataset}-person-0", f"https://{OUTLETS[0]}/", STAMP))  # a home page
        rows[dataset].append((f"{dataset}-person-1", "not a url at all", STAMP))          # a reject
    no_text = f"https://{OUTLETS[1]}/a/999999"
    rows["panel"].append(("panel-person-2", no_text, STAMP))
    return World(stories, no_text, rows, short)


def load(engine, tmp: Path, world: World) -> None:
    """The world through the real stages: ingest with units and times, redirect import, documents, dedupe."""
    from linkfold.dedupe.stage import run_dedupe
    from linkfold.settings import load_settings

    path_rules = rules(tmp)
    for dataset, rows in world.rows.items():
        path = tmp / f"{dataset}.csv"
        with path.open("w", newline="", encoding="utf-8") as fh:
            w = csv.writer(fh)
            w.writerow(["row", "person", "url", "at"])
            for i, (unit, url, when) in enumerate(rows):
                w.writerow([f"{dataset}-{i}", unit, url, when.isoformat()])
        ingest_dump(engine, [path], dataset=dataset, key_column="row", url_column="url", time_column="at",
                    unit_column="person", pseudonym_key=KEY, ruleset=path_rules)
    pairs = tmp / "short.csv"
    pairs.write_text("short,expanded\n" + "".join(f"{a},{b}\n" for a, b in world.short.items()), encoding="utf-8")
    import_redirects(engine, pairs)
    with engine.begin() as conn:
        ids = dict(conn.execute(sa.select(t.canonical_urls.c.url, t.canonical_urls.c.id)).all())
        docs = []
        for story in world.stories:
            norm = normalise_text(story.text)
            for copy in story.copies:
                if copy.url not in ids:
                    continue  # a copy nobody saw was never loaded
                docs.append({"canonical_id": ids[copy.url], "page_id": None, "title": story.title, "text": norm,
                             "text_hash": text_hash(norm), "word_count": count_words(norm),
                             "published": copy.published, "language": story.language, "state": "usable",
                             "reason": None, "extractor_version": "corpus-world",
                             "source": f"test:{copy.url}", "record_sha256": None, "created_at": STAMP})
        conn.execute(t.documents.insert(), docs)
    run_dedupe(engine, settings=load_settings(overrides={"batch_size": 50}, environ={}))


def expected(world: World, datasets: list[str], *, min_units: int = 1) -> dict[int, dict[str, Any]]:
    """Story number -> what its record must say, from the generator's lists alone: sightings, distinct
    units, first and last seen, overall and per dataset; the outlets that carry it."""
    where: dict[str, int] = {}
    for story in world.stories:
        for copy in story.copies:
            where[copy.url] = story.n
    for s, target in world.short.items():
        where[s] = where[target]
    out: dict[int, dict[str, Any]] = {}
    for dataset in datasets:
        for unit, url, when in world.rows[dataset]:
            n = where.get(url.split("?", 1)[0])
            if n is None:
                continue
            rec = out.setdefault(n, {"sightings": 0, "units": set(), "times": [], "datasets": {}})
            rec["sightings"] += 1
            rec["units"].add(unit)
            rec["times"].append(when)
            per = rec["datasets"].setdefault(dataset, {"sightings": 0, "units": set(), "times": []})
            per["sightings"] += 1
            per["units"].add(unit)
            per["times"].append(when)

    def floor(units: set[str]) -> int | None:
        return len(units) if len(units) >= min_units else None

    # The registry knows a copy once any dataset saw it or a short link leads to it (imports store targets).
    loaded = {url.split("?", 1)[0] for rows in world.rows.values() for _u, url, _w in rows} | set(world.short.values())
    result = {}
    for n, rec in out.items():
        story = world.stories[n]
        copies = [c for c in story.copies if c.url in loaded]
        dated = sorted((c for c in copies if c.published is not None), key=lambda c: c.published or STAMP)
        first = dated[0] if dated else copies[0]
        shorts = [s for s, target in world.short.items() if where[target] == n]
        result[n] = {
            "members": len(copies) + len(shorts), "articles": len(copies),
            "sightings": rec["sightings"], "units": floor(rec["units"]),
            "first_seen": min(rec["times"]), "last_seen": max(rec["times"]),
            "outlets": sorted({c.outlet for c in copies}), "published": first.published, "url": first.url,
            "datasets": [{"dataset": d, "sightings": p["sightings"], "units": floor(p["units"]),
                          "first_seen": min(p["times"]), "last_seen": max(p["times"])}
                         for d, p in sorted(rec["datasets"].items(), key=lambda kv: datasets.index(kv[0]))],
        }
    return result
