"""``linkfold compare`` (docs/corpus.md, "Comparing datasets") against a hand-computed example, on both
backends; the weighted Jaccard against its definition (Ruzicka similarity, Σ min / Σ max; the form Ioffe,
ICDM 2010, gives for non-negative weights) and a worked example.
"""

from __future__ import annotations

import json

import pytest

from linkfold.cli import main
from linkfold.compare import Overlap, compare_datasets, jaccard, weighted_jaccard
from linkfold.errors import ConfigError, InputError
from network_world import load_outlet_list, load_with_units

# The hand example. Three articles, each its own story: s1 = x.example/a/1, s2 = x.example/a/2,
# s3 = y.test/a/3. Dataset A: a1 saw s1 twice, a2 saw s2 and s3, and a home page (not an article: never
# counted). Dataset B: b1 saw s1 once and s3 three times.
X1, X2, Y3 = "https://x.example/a/1", "https://x.example/a/2", "https://y.test/a/3"
A_ROWS = [("a1", X1), ("a1", X1 + "?utm_source=feed"), ("a2", X2), ("a2", Y3), ("a2", "https://x.example/")]
B_ROWS = [("b1", X1), ("b1", Y3), ("b1", Y3), ("b1", Y3)]


def _rules(tmp_path):
    path = tmp_path / "hand.toml"
    path.write_text('name = "hand"\n\n[site."x.example"]\narticle = [\'^/a/[0-9]+$\']\n\n'
                    '[site."y.test"]\narticle = [\'^/a/[0-9]+$\']\n', encoding="utf-8")
    return path


def _hand_world(engine, tmp_path) -> dict[str, str]:
    import sqlalchemy as sa

    from linkfold.dedupe.stage import run_dedupe
    from linkfold.settings import load_settings
    from linkfold.store import tables as t

    load_with_units(engine, tmp_path, "A", A_ROWS, rules=_rules(tmp_path))
    load_with_units(engine, tmp_path, "B", B_ROWS, rules=_rules(tmp_path))
    load_outlet_list(engine, tmp_path, ["kind"], [("x.example", "Outlet X", {"kind": "wire"}),
                                                  ("y.test", "Outlet Y", {"kind": "local"})])
    run_dedupe(engine, settings=load_settings(overrides={"batch_size": 50}, environ={}))
    cm, c = t.cluster_members, t.canonical_urls
    with engine.connect() as conn:
        ids = dict(conn.execute(sa.select(c.c.url, cm.c.cluster_id).join(cm, cm.c.canonical_id == c.c.id)
                                .where(cm.c.level == "story")).all())
    return {"s1": ids[X1], "s2": ids[X2], "s3": ids[Y3]}


def test_figures_match_the_hand_computation(engine, tmp_path):
    s = _hand_world(engine, tmp_path)
    c = compare_datasets(engine, datasets=["A", "B"], min_units=1)
    # Counted sightings: A 4 (the home page is not an article), B 4.
    assert [(d["dataset"], d["sightings"], d["units"], d["stories"], d["only_here"]) for d in c.datasets] == [
        ("A", 4, 2, 3, 1), ("B", 4, 1, 2, 0)]
    # Outlets. A: X 3 of 4 sightings = 0.75, seen by a1 and a2 = 2 of 2 units = 1.0; Y 1/4 = 0.25, 1/2 = 0.5.
    # B: X 1/4 = 0.25, 1 of 1 unit = 1.0; Y 3/4 = 0.75, 1/1 = 1.0.
    got = {(r["dataset"], r["outlet"]): (r["sightings"], r["sightings_share"], r["units"], r["units_share"])
           for r in c.outlets}
    assert got == {("A", "Outlet X"): (3, 0.75, 2, 1.0), ("A", "Outlet Y"): (1, 0.25, 1, 0.5),
                   ("B", "Outlet X"): (1, 0.25, 1, 1.0), ("B", "Outlet Y"): (3, 0.75, 1, 1.0)}
    # The outlet list's attribute "kind": wire is Outlet X, local is Outlet Y, so the same figures.
    kinds = {(r["dataset"], r["value"]): (r["sightings_share"], r["units_share"]) for r in c.attributes}
    assert kinds == {("A", "wire"): (0.75, 1.0), ("A", "local"): (0.25, 0.5),
                     ("B", "wire"): (0.25, 1.0), ("B", "local"): (0.75, 1.0)}
    # Overlap. Story sets A = {s1, s2, s3}, B = {s1, s3}: both 2, either 3, Jaccard 2/3.
    # Shares: A s1 2/4, s2 1/4, s3 1/4; B s1 1/4, s3 3/4.
    # Σ min = min(.5,.25) + min(.25,0) + min(.25,.75) = .25 + 0 + .25 = .5
    # Σ max = max(.5,.25) + max(.25,0) + max(.25,.75) = .5 + .25 + .75 = 1.5  → weighted Jaccard 1/3.
    (pair,) = c.overlap
    assert (pair["a"], pair["b"], pair["both"], pair["either"]) == ("A", "B", 2, 3)
    assert pair["jaccard"] == pytest.approx(2 / 3) and pair["weighted_jaccard"] == pytest.approx(1 / 3)
    # Top of A: s1 (2 sightings), then s2 and s3 (1 each; the tie goes to the smaller ID). Only in A: s2.
    top_a = [(r["story_id"], r["sightings"]) for r in c.top if r["dataset"] == "A"]
    assert top_a == [(s["s1"], 2), *sorted([(s["s2"], 1), (s["s3"], 1)])]
    assert [(r["story_id"], r["sightings"]) for r in c.top if r["dataset"] == "B"] == [(s["s3"], 3), (s["s1"], 1)]
    assert [(r["dataset"], r["story_id"]) for r in c.only] == [("A", s["s2"])]


def test_unit_counts_below_the_floor_are_suppressed(engine, tmp_path):
    _hand_world(engine, tmp_path)
    c = compare_datasets(engine, datasets=["A", "B"], min_units=2)
    got = {(r["dataset"], r["outlet"]): (r["sightings"], r["units"], r["units_share"]) for r in c.outlets}
    # Only A's Outlet X was seen by two units; every other unit count is below 2. Sightings stay.
    assert got == {("A", "Outlet X"): (3, 2, 1.0), ("A", "Outlet Y"): (1, None, None),
                   ("B", "Outlet X"): (1, None, None), ("B", "Outlet Y"): (3, None, None)}
    assert c.suppressed > 0 and all(r["units"] is None for r in c.top)


def test_the_command_prints_a_table_and_json_lines(db_url, tmp_path, capsys):
    from linkfold.store import make_engine

    engine = make_engine(db_url)
    try:
        _hand_world(engine, tmp_path)
    finally:
        engine.dispose()
    assert main(["--db", db_url, "compare", "A", "B", "--min-units", "1"]) == 0
    out = capsys.readouterr()
    assert "overlap of story IDs" in out.out and "0.667" in out.out and "0.333" in out.out
    assert "Outlet X" in out.out and "75.0%" in out.out
    assert "compared A, B by story" in out.err
    assert main(["--db", db_url, "compare", "A", "B", "--format", "jsonl", "-q"]) == 0
    out = capsys.readouterr()
    assert out.err == ""
    rows = [json.loads(line) for line in out.out.splitlines()]
    assert {r["section"] for r in rows} == {"dataset", "outlet", "attribute", "overlap", "top", "only"}
    assert main(["--db", db_url, "compare", "A"]) == 6          # one dataset is no comparison (bad input)
    assert main(["--db", db_url, "compare", "A", "nope"]) == 7  # an unknown dataset


def test_weighted_jaccard_by_its_definition():
    # Ruzicka / weighted Jaccard: Σ min / Σ max. Worked: x = (1, 2, 0), y = (2, 1, 1):
    # Σ min = 1 + 1 + 0 = 2, Σ max = 2 + 2 + 1 = 5 → 0.4. Equal weights give 1; disjoint supports 0.
    assert weighted_jaccard({"a": 1, "b": 2}, {"a": 2, "b": 1, "c": 1}) == pytest.approx(0.4)
    assert weighted_jaccard({"a": 0.3}, {"a": 0.3}) == 1.0
    assert weighted_jaccard({"a": 1}, {"b": 1}) == 0.0
    # With 0/1 weights it is the plain Jaccard index.
    a, b = {"p", "q", "r"}, {"q", "r", "s", "t"}
    assert weighted_jaccard(dict.fromkeys(a, 1), dict.fromkeys(b, 1)) == jaccard(a, b) == pytest.approx(2 / 5)
    # The streaming accumulator agrees with the direct formula over shares.
    ov = Overlap([4, 4], top=2)
    for story, counts in (("s1", [2, 1]), ("s2", [1, 0]), ("s3", [1, 3])):
        ov.add(story, counts)
    (pair,) = ov.pairs()
    direct = weighted_jaccard({"s1": .5, "s2": .25, "s3": .25}, {"s1": .25, "s3": .75})
    assert pair["weighted_jaccard"] == pytest.approx(direct) == pytest.approx(1 / 3)


def test_bad_arguments(engine):
    with pytest.raises(InputError):
        compare_datasets(engine, datasets=["A", "A"])
    with pytest.raises(ConfigError):
        compare_datasets(engine, datasets=["A", "B"], level="outlet")
