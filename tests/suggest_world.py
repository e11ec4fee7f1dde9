"""An invented world of outlets with known URL schemes, for rule suggestions (tests and bench).

Each outlet on a reserved name (RFC 2606) has one article scheme and the usual pages that are not
articles (home, sections, tags, authors, search, images, about, pagination). Stored URLs get what a
registry would hold about them: most were fetched, and an article's page yielded a usable text (a few
failed extraction or sat behind a paywall: realistic noise), a non-article page yielded none. Some
articles are stored again with a parameter that never changes the page (``src``, ``via``) and some with
one that does (``page``). A shortener host redirects to articles elsewhere, an image host never has text,
an archive host serves one outlet's texts at the same paths, one outlet hides every article behind a
paywall, one outlet's old domain redirects path for path, and withdrawn articles of one outlet redirect
to its home page (a sink). Held-out URLs (:func:`held_out`) are
generated from another random stream with their truth, for measuring precision and recall.
"""

from __future__ import annotations

import csv
import hashlib
import random
from collections.abc import Iterator
from dataclasses import dataclass
from datetime import UTC, datetime
from pathlib import Path

import sqlalchemy as sa
from sqlalchemy.engine import Engine

from linkfold.canon import Canonicaliser, Ruleset, canonicalize
from linkfold.store import tables as t
from linkfold.store.evidence import register_urls
from linkfold.store.rulesets import latest_ruleset

WORDS = ["harbour", "bridge", "council", "market", "river", "school", "budget", "library", "station", "festival", "garden", "mill", "storm", "pier", "trial", "mayor", "ferry", "orchard", "museum", "hospital", "road", "bakery", "winter", "summer", "tower", "lantern", "quarry", "meadow", "canal", "forest", "valley"]
SECTIONS = ("politics", "sport", "culture", "business", "science", "weather", "travel", "health")

#: scheme -> (outlet host, how an article path is made)
SCHEMES = {
    "numeric_id": "ashford-ledger.example",
    "date_path": "brindle-post.example",
    "slug_only": "cobble-gazette.example",
    "query_id": "dunmore-times.example",
    "section_id": "elmbrook-courier.example",
    "hex_id": "fenwick-observer.example",
    "html_page": "glenford-chronicle.example",
    "slug_number": "harlow-wire.test",
}
SHORTENER = "lnk.test"
IMAGE_HOST = "img.pixhost.test"
ARCHIVE = "ashford-ledger-archive.test"
WALLED = "keswick-paywalled.example"
MOVED = "ashford-ledger-old.test"


def _slug(rng: random.Random) -> str:
    return "-".join(rng.choice(WORDS) for _ in range(rng.randint(3, 7)))


def article_path(scheme: str, rng: random.Random) -> str:
    if scheme == "numeric_id":
        return f"/news/{rng.randint(10000, 999999)}"
    if scheme == "date_path":
        return f"/{rng.randint(2019, 2026)}/{rng.randint(1, 12):02d}/{rng.randint(1, 28):02d}/{_slug(rng)}"
    if scheme == "slug_only":
        return f"/{_slug(rng)}"
    if scheme == "query_id":
        return f"/article.php?id={rng.randint(10000, 99999)}"
    if scheme == "section_id":
        return f"/{rng.choice(SECTIONS)}/{rng.randint(100000, 999999)}"
    if scheme == "hex_id":
        return f"/a/{rng.getrandbits(48):012x}"
    if scheme == "html_page":
        return f"/stories/{_slug(rng)}.html"
    if scheme == "slug_number":
        return f"/story/{_slug(rng)}-{rng.randint(1000000, 9999999)}"
    raise ValueError(scheme)


def other_path(rng: random.Random) -> str:
    """A page that is not an article."""
    kind = rng.randrange(9)
    if kind == 0:
        return "/"
    if kind == 1:
        return f"/{rng.choice(SECTIONS)}"
    if kind == 2:
        return f"/tag/{rng.choice(WORDS)}"
    if kind == 3:
        return f"/author/{rng.choice(WORDS)}-{rng.choice(WORDS)}"
    if kind == 4:
        return f"/search?q={rng.choice(WORDS)}"
    if kind == 5:
        return f"/images/{_slug(rng)}.jpg"
    if kind == 6:
        return rng.choice(("/about", "/contact", "/subscribe", "/privacy"))
    if kind == 7:
        return f"/page/{rng.randint(2, 40)}"
    return f"/{rng.choice(SECTIONS)}/page/{rng.randint(2, 9)}"


@dataclass
class Truth:
    url: str
    scheme: str
    is_article: bool


def held_out(per_outlet: int, *, seed: int = 99) -> list[Truth]:
    """URLs never stored, with whether each is an article: the quality test's evaluation set."""
    rng = random.Random(seed)
    out = []
    for scheme, host in SCHEMES.items():
        for _ in range(per_outlet):
            out.append(Truth(f"https://{host}{article_path(scheme, rng)}", scheme, True))
            out.append(Truth(f"https://{host}{other_path(rng)}", scheme, False))
    return out


def quality(rules: Ruleset, per_outlet: int) -> dict[str, tuple[float, float]]:
    """(precision, recall) of ``rules``' article verdicts on held-out URLs, per scheme and ``"all"``."""
    counts: dict[str, list[int]] = {}  # scheme -> [true positives, false positives, false negatives]
    for truth in held_out(per_outlet):
        said = canonicalize(truth.url, rules).is_article is True
        row = counts.setdefault(truth.scheme, [0, 0, 0])
        if said or truth.is_article:
            row[0 if said and truth.is_article else 1 if said else 2] += 1
    counts["all"] = [sum(v[i] for v in counts.values()) for i in range(3)]
    return {k: (tp / (tp + fp) if tp + fp else 0.0, tp / (tp + fn) if tp + fn else 0.0)
            for k, (tp, fp, fn) in counts.items()}


def _doc(cid: int, status: str, reason: str | None, text_hash: str | None, now: datetime) -> dict:
    return {"canonical_id": cid, "page_id": None, "title": None, "text": None, "text_hash": text_hash,
            "word_count": 400 if status == "usable" else 3, "state": status, "reason": reason,
            "extractor_version": "world", "source": "world", "created_at": now}


def outlet_hosts(copies: int) -> Iterator[tuple[str, str]]:
    """(scheme, host) of every outlet: the eight of SCHEMES, and with ``copies`` > 1 more outlets of the same
    schemes under other invented names (``o2-ashford-ledger.example`` …), for the benchmark's sizes."""
    for k in range(copies):
        for scheme, host in SCHEMES.items():
            yield scheme, host if k == 0 else f"o{k + 1}-{host}"


def _rows(per_outlet: int, rng: random.Random, copies: int) -> Iterator[tuple[str, str | None, str | None]]:
    """(URL, document status or None when not fetched, text key) for the stored world."""
    for scheme, host in outlet_hosts(copies):
        for i in range(per_outlet):
            path = article_path(scheme, rng)
            url = f"https://{host}{path}"
            text = f"{host}{path}"
            roll = rng.random()
            status = (None if roll < 0.25 else "too_short" if roll < 0.26 else "paywall" if roll < 0.27
                      else "usable")
            yield url, status, text
            if status == "usable" and i % 4 == 0:
                sep = "&" if "?" in url else "?"
                yield f"{url}{sep}src={rng.choice(('feed', 'share', 'mail', 'home'))}", "usable", text
                yield f"{url}{sep}via={rng.choice(WORDS)}", "usable", text
            if status == "usable" and i % 6 == 0:
                sep = "&" if "?" in url else "?"
                yield f"{url}{sep}page=2", "usable", text + "#2"
            if i % 2 == 0:
                other = f"https://{host}{other_path(rng)}"
                yield other, None if rng.random() < 0.3 else rng.choice(("too_short", "empty", "not_html")), None


def build_world(engine: Engine, *, per_outlet: int = 120, seed: int = 7, batch: int = 5000,
                tmp: Path | None = None, copies: int = 1) -> dict[str, int]:
    """Store the world (see the module doc) through the registry's own writers; returns counts."""
    rng = random.Random(seed)
    now = datetime.now(UTC)
    with engine.begin() as conn:
        version, rules = latest_ruleset(conn)
    canon = Canonicaliser(rules)
    counts = {"urls": 0, "documents": 0}
    pending: list[tuple[str, str | None, str | None]] = []
    archive: list[tuple[str, str]] = []

    def flush() -> None:
        with engine.begin() as conn:
            ids = register_urls(conn, [(u, canon(u)) for u, _, _ in pending], ruleset_id=version, stamp=now)
            docs = []
            for url, status, text in pending:
                if status is None:
                    continue
                usable = status == "usable"
                text_hash = hashlib.sha256(text.encode()).hexdigest() if usable and text else None
                docs.append(_doc(ids[url].canonical_id, "usable" if usable else "no_text",
                                 None if usable else status, text_hash, now))
            if docs:
                conn.execute(t.documents.insert(), docs)
        counts["urls"] += len(pending)
        counts["documents"] += len(docs)
        pending.clear()

    for row in _rows(per_outlet, rng, copies):
        pending.append(row)
        url, status, text = row
        if status == "usable" and url.startswith(f"https://{SCHEMES['numeric_id']}/") and "?" not in url \
                and len(archive) < max(30, per_outlet // 4):
            archive.append((url.replace(SCHEMES["numeric_id"], ARCHIVE), text or ""))
        if len(pending) >= batch:
            flush()
    for url, text in archive:
        pending.append((url, "usable", text))
    for i in range(max(30, per_outlet // 4)):
        pending.append((f"https://{IMAGE_HOST}/p/{i:05d}.jpg", "not_html", None))
        # An outlet whose every fetched article sat behind a paywall: no usable text, but an outlet.
        pending.append((f"https://{WALLED}/premium/{70000 + i}", "paywall" if i % 3 else "too_short", None))
    flush()
    if tmp is not None:
        counts["short_links"] = _short_links(engine, tmp, per_outlet, rng)
    with engine.begin() as conn:
        counts["canonical_urls"] = conn.execute(sa.select(sa.func.count()).select_from(t.canonical_urls)).scalar_one()
    return counts


def _short_links(engine: Engine, tmp: Path, per_outlet: int, rng: random.Random) -> int:
    """Short links on SHORTENER, each imported as a (short, expanded) pair to an article elsewhere."""
    from linkfold.follow import import_redirects

    n = max(30, per_outlet // 4)
    path = tmp / "short_pairs.csv"
    with path.open("w", encoding="utf-8", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(["short", "expanded"])
        schemes = list(SCHEMES.items())
        for i in range(n):
            scheme, host = schemes[i % len(schemes)]
            code = "".join(rng.choice("abcdefghjkmnpqrstuvwxyzABCDEFGHJKLMNPQRSTUVWXYZ23456789") for _ in range(7))
            w.writerow([f"https://{SHORTENER}/{code}", f"https://{host}{article_path(scheme, rng)}"])
        # An outlet's old domain, every URL redirected to the same path on the new one: a move, not a shortener.
        for i in range(20):
            moved = f"/news/{500000 + i}"
            w.writerow([f"https://{MOVED}{moved}", f"https://{SCHEMES['numeric_id']}{moved}"])
        # Withdrawn articles of one outlet redirected to its home page: a sink (docs/dedupe.md §10).
        for i in range(12):
            w.writerow([f"https://{SCHEMES['date_path']}/withdrawn/{i}", f"https://{SCHEMES['date_path']}/"])
    import_redirects(engine, path)
    return n


__all__ = ["ARCHIVE", "IMAGE_HOST", "MOVED", "SCHEMES", "SHORTENER", "WALLED", "Truth", "build_world", "held_out",
           "outlet_hosts", "quality"]
