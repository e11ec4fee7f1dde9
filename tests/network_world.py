"""Sightings with units for the network tests and pages (no tests here).

Dumps are loaded through the real ingest stage (with the demo rules, so outlets and article pages are
known); each row's unit is then set by SQL to a keyed-pseudonym-shaped value (HMAC-SHA256 of an invented
ID, base32), as ``ingest --unit-column`` stores it.
"""

from __future__ import annotations

import base64
import csv
import hashlib
import hmac
from collections.abc import Sequence
from pathlib import Path

import sqlalchemy as sa

from linkfold.ingest import ingest_dump
from linkfold.store import tables as t

RULES = Path(__file__).resolve().parent.parent / "service" / "linkfold" / "demo_data" / "rules" / "demo.toml"
KEY = b"an invented lab key for the network tests"

# One article page and one page that is not an article per outlet of the demo rules.
ARTICLE = {
    "Northvale Herald": "https://northvale-herald.example/news/2031/05/dam-levels-{i}",
    "Riverton Daily": "https://riverton-daily.test/story/ferry-strike-{i}",
    "Lakeside Wire": "https://lakeside-wire.example/wire/20310501/dam-levels-{i}",
    "Harbourview News": "https://harbourview-news.example/article.php?id={i}",
}
HOME = {
    "Northvale Herald": "https://northvale-herald.example/",
    "Riverton Daily": "https://riverton-daily.test/about",
    "Lakeside Wire": "https://lakeside-wire.example/",
    "Harbourview News": "https://harbourview-news.example/",
}


def pseudonym(raw: str) -> str:
    mac = hmac.new(KEY, raw.encode(), hashlib.sha256).digest()
    return "hs256:" + base64.b32encode(mac).decode().rstrip("=").lower()


def load_with_units(engine, tmp_path: Path, dataset: str, rows: Sequence[tuple[str | None, str]], *,
                    rules: Path = RULES) -> None:
    """Load ``rows`` of (unit ID or None, URL) as dataset ``dataset``, then set each sighting's unit."""
    path = tmp_path / f"{dataset}.csv"
    with path.open("w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh)
        w.writerow(["visit", "url"])
        for i, (_unit, url) in enumerate(rows):
            w.writerow([f"{dataset}-v{i}", url])
    ingest_dump(engine, [path], dataset=dataset, key_column="visit", ruleset=rules)
    updates = [{"k": f"{dataset}-v{i}", "u": pseudonym(unit)} for i, (unit, _url) in enumerate(rows) if unit]
    s = t.sightings
    with engine.begin() as conn:
        files = sa.select(t.dataset_files.c.id).join(t.datasets, t.datasets.c.id == t.dataset_files.c.dataset_id) \
            .where(t.datasets.c.name == dataset)
        conn.execute(s.update().where(s.c.row_key == sa.bindparam("k"), s.c.file_id.in_(files))
                     .values(unit=sa.bindparam("u")), updates)


def load_outlet_list(engine, tmp_path: Path, columns: Sequence[str],
                     entries: Sequence[tuple[str, str, dict]]) -> None:
    """Write an outlet list file, (domain, outlet, attributes) per line, and load it as the list in force."""
    from linkfold.outlets import load_outlet_list as load

    path = tmp_path / "lab-outlets.csv"
    with path.open("w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh)
        w.writerow(["domain", "outlet", *columns])
        for match, outlet, attributes in entries:
            w.writerow([match, outlet, *[attributes.get(c) or "" for c in columns]])
    load(engine, path)


# The hand-computed example of tests/test_network.py (articles unless said): units and the outlets they saw.
HAND = {
    "u1": ["Northvale Herald", "Riverton Daily", "Lakeside Wire"],
    "u2": ["Northvale Herald", "Riverton Daily"],
    "u3": ["Northvale Herald", "Riverton Daily"],
    "u4": ["Northvale Herald", "Lakeside Wire"],
    "u5": ["Riverton Daily", "Lakeside Wire"],
    "u6": ["Northvale Herald"],
    "u7": ["Harbourview News"],
    "u8": ["Northvale Herald", "Northvale Herald", "Northvale Herald", "Riverton Daily", "Lakeside Wire"],
}


def hand_rows() -> list[tuple[str | None, str]]:
    rows: list[tuple[str | None, str]] = []
    for n, (unit, outlets) in enumerate(HAND.items()):
        for j, outlet in enumerate(outlets):
            url = ARTICLE[outlet].format(i=n * 10 + j + 1)
            rows.append((unit, url + ("&" if "?" in url else "?") + "utm_source=feed"))
    rows.append(("u9", HOME["Northvale Herald"]))   # u9 saw no article: counted only with all_urls
    rows.append((None, ARTICLE["Lakeside Wire"].format(i=999)))  # no unit: never counted
    rows.append(("u2", "not a url at all"))         # a reject
    return rows


# A larger invented region for the pictures: ten outlets in two communities of readers, with an outlet list.
REGION = [  # (host, outlet, type, reach)
    ("northvale-herald.example", "Northvale Herald", "regional", "high"),
    ("riverton-daily.test", "Riverton Daily", "local", "medium"),
    ("lakeside-wire.example", "Lakeside Wire", "wire", "high"),
    ("harbourview-news.example", "Harbourview News", "local", "low"),
    ("upland-post.example", "Upland Post", "regional", "medium"),
    ("fenmarsh-courier.test", "Fenmarsh Courier", "local", "low"),
    ("capital-ledger.example", "Capital Ledger", "national", "high"),
    ("quarry-voice.test", "Quarry Voice", "partisan", "low"),
    ("tidewater-review.example", "Tidewater Review", "magazine", "medium"),
    ("eastgate-bulletin.test", "Eastgate Bulletin", "partisan", "low"),
]


def region_rules(tmp_path: Path) -> Path:
    lines = ['name = "network region"', 'shortener_hosts = ["short.test"]', ""]
    for host, outlet, _type, _reach in REGION:
        lines += [f'[site."{host}"]', f'outlet = "{outlet}"', "article = ['^/a/[0-9]+$']", ""]
    path = tmp_path / "region.toml"
    path.write_text("\n".join(lines), encoding="utf-8")
    return path


def region_rows(seed: int = 5, units: int = 160) -> list[tuple[str | None, str]]:
    import random

    rnd = random.Random(seed)
    first, second = REGION[:5], REGION[5:]
    rows: list[tuple[str | None, str]] = []
    for u in range(units):
        home, away = (first, second) if u % 3 else (second, first)
        for _ in range(rnd.randrange(1, 14)):
            host = rnd.choice(home if rnd.random() < 0.8 else away)[0]
            if host == "capital-ledger.example" or rnd.random() < 0.15:
                host = rnd.choice([host, "capital-ledger.example"])  # the national outlet reaches everyone
            path = f"/a/{rnd.randrange(1, 400)}" if rnd.random() < 0.85 else "/"
            rows.append((f"reader-{u:04d}", f"https://{host}{path}"))
    return rows


def load_region(engine, tmp_path: Path, dataset: str = "region-panel") -> None:
    load_with_units(engine, tmp_path, dataset, region_rows(), rules=region_rules(tmp_path))
    load_outlet_list(engine, tmp_path, ["type", "reach"],
                     [(h, o, {"type": ty, "reach": r}) for h, o, ty, r in REGION])
