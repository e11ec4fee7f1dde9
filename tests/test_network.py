"""The outlet co-exposure network (issue 18, items 4 and 6), on both backends.

Checked against a small example computed by hand (the arithmetic is in the comments), against pandas
recomputing the same network independently from the generated truth, and against networkx reading the
GraphML back. Weights: Jaccard's coefficient of the two audiences (P. Jaccard, 1901; 1912) and lift /
pointwise mutual information against independence (Church & Hanks, 1990; Manning & Schütze, Foundations of
Statistical NLP, 1999, §5.4 — the definition is cited from memory).
"""

from __future__ import annotations

import csv
import io
import json
import math
import random

import networkx as nx
import pandas as pd
import pytest

from linkfold.cli import main
from linkfold.errors import ConfigError, NotFound
from linkfold.network import EDGE_COLUMNS, bipartite_rows, co_exposure, to_networkx, write_network
from network_world import ARTICLE, HOME, hand_rows, load_outlet_list, load_with_units, pseudonym

H, R, L, B = "Northvale Herald", "Riverton Daily", "Lakeside Wire", "Harbourview News"


@pytest.fixture
def hand(engine, tmp_path):
    load_with_units(engine, tmp_path, "panel", hand_rows())
    return engine


def _edges(net):
    return {(e["outlet_a"], e["outlet_b"]): e for e in net.edges}


def test_hand_computed_example(hand):
    # Audiences (articles only): H = {u1,u2,u3,u4,u6,u8} = 6, R = {u1,u2,u3,u5,u8} = 5,
    # L = {u1,u4,u5,u8} = 4, B = {u7} = 1; N = 8 units saw an article (u9 saw only a home page; the row
    # without a unit counts for no one).
    # Shared: H∩R = {u1,u2,u3,u8} = 4, H∩L = {u1,u4,u8} = 3, R∩L = {u1,u5,u8} = 3; B shares with no one.
    net = co_exposure(hand, datasets=["panel"], min_units=2)
    assert net.units == 8
    nodes = {n["outlet"]: n for n in net.nodes}
    assert {o: (n["units"], n["sightings"]) for o, n in nodes.items()} == {
        H: (6, 8),  # u8 saw the Herald three times: 5 + 3 sightings
        R: (5, 5), L: (4, 4)}
    assert net.suppressed_nodes == 1  # Harbourview News: 1 unit < 2
    e = _edges(net)
    assert list(e) == [(L, H), (L, R), (H, R)]  # outlet_a < outlet_b by code point, sorted
    # Jaccard = shared / (|A| + |B| − shared); lift = N·shared / (|A|·|B|); pmi = ln lift.
    assert e[(H, R)]["units"] == 4
    assert e[(H, R)]["jaccard"] == pytest.approx(4 / 7)          # 4 / (6 + 5 − 4)
    assert e[(H, R)]["lift"] == pytest.approx(16 / 15)           # 8·4 / (6·5) = 32/30
    assert e[(H, R)]["pmi"] == pytest.approx(math.log(16 / 15))
    assert e[(L, H)]["units"] == 3
    assert e[(L, H)]["jaccard"] == pytest.approx(3 / 7)          # 3 / (4 + 6 − 3)
    assert e[(L, H)]["lift"] == pytest.approx(1.0)               # 8·3 / (4·6) = 24/24: as chance would have it
    assert e[(L, H)]["pmi"] == pytest.approx(0.0)
    assert e[(L, R)]["units"] == 3
    assert e[(L, R)]["jaccard"] == pytest.approx(0.5)            # 3 / (4 + 5 − 3)
    assert e[(L, R)]["lift"] == pytest.approx(1.2)               # 8·3 / (4·5) = 24/20
    assert e[(L, R)]["pmi"] == pytest.approx(math.log(1.2))


def test_min_units_filters_edges_and_nodes(hand):
    net = co_exposure(hand, datasets=["panel"], min_units=4)
    assert list(_edges(net)) == [(H, R)]                          # only H–R has 4 shared units
    assert [n["outlet"] for n in net.nodes] == [L, H, R]          # 4, 6, 5 units ≥ 4
    net = co_exposure(hand, datasets=["panel"], min_units=5)
    assert net.edges == [] and [n["outlet"] for n in net.nodes] == [H, R]
    # The default protects small groups: 5 units (docs/network.md).
    assert co_exposure(hand, datasets=["panel"]).min_units == 5
    with pytest.raises(ConfigError):
        co_exposure(hand, datasets=["panel"], min_units=0)
    with pytest.raises(NotFound):
        co_exposure(hand, datasets=["no-such"])


def test_all_urls_counts_pages_that_are_not_articles(hand):
    # u9's home-page visit counts too: N = 9, |H| = 7; H–R and H–L shares do not change.
    net = co_exposure(hand, datasets=["panel"], min_units=2, all_urls=True)
    assert net.units == 9
    e = _edges(net)
    assert e[(H, R)]["units"] == 4 and e[(H, R)]["lift"] == pytest.approx(9 * 4 / (7 * 5))


def test_nodes_carry_the_outlet_list_attributes(hand, tmp_path):
    load_outlet_list(hand, tmp_path, ["type", "reach"], [
        ("northvale-herald.example", H, {"type": "regional", "reach": "high"}),
        ("riverton-daily.test", R, {"type": "local", "reach": None}),
    ])
    net = co_exposure(hand, datasets=["panel"], min_units=2)
    assert net.node_columns == ["outlet", "units", "sightings", "type", "reach"]
    nodes = {n["outlet"]: n for n in net.nodes}
    assert nodes[H]["type"] == "regional" and nodes[H]["reach"] == "high"
    assert nodes[R]["type"] == "local" and nodes[R]["reach"] is None
    assert nodes[L]["type"] is None  # not on the list


def test_bipartite_table(hand):
    rows = list(bipartite_rows(hand, datasets=["panel"]))
    got = {(r["unit"], r["outlet"]): r["sightings"] for r in rows}
    assert got[(pseudonym("u8"), H)] == 3 and got[(pseudonym("u7"), B)] == 1
    assert len(got) == 16  # 3+2+2+2+2+1+1+3 distinct outlets of u1…u8
    assert [(r["unit"], r["outlet"]) for r in rows] == sorted(got)  # streamed in unit, outlet order


# --- recomputed independently on generated data --------------------------------------------------------------
def _generate(seed: int = 11):
    rnd = random.Random(seed)
    outlets = list(ARTICLE)
    # Skewed audiences: each unit reads a few outlets, the popular ones more often.
    rows, truth = [], []
    for u in range(60):
        unit = f"person-{u:03d}"
        seen = rnd.sample(outlets, k=rnd.choice([1, 2, 2, 3, 4]))
        for _ in range(rnd.randrange(1, 8)):
            outlet = rnd.choice(seen)
            article = rnd.random() < 0.8
            url = ARTICLE[outlet].format(i=rnd.randrange(1, 30)) if article else HOME[outlet]
            if rnd.random() < 0.3:
                url += ("&" if "?" in url else "?") + "utm_campaign=x"
            blank = rnd.random() < 0.05
            rows.append((None if blank else unit, url))
            truth.append({"unit": None if blank else pseudonym(unit), "outlet": outlet, "article": article})
    return rows, pd.DataFrame(truth)


def _pandas_network(truth: pd.DataFrame, k: int, all_urls: bool = False):
    df = truth[truth.unit.notna()]
    if not all_urls:
        df = df[df.article]
    pairs = df.groupby(["unit", "outlet"]).size().rename("sightings").reset_index()
    n = pairs.unit.nunique()
    audience = pairs.groupby("outlet").agg(units=("unit", "size"), sightings=("sightings", "sum"))
    both = pairs.merge(pairs, on="unit", suffixes=("_a", "_b"))
    both = both[both.outlet_a < both.outlet_b]
    shared = both.groupby(["outlet_a", "outlet_b"]).size().rename("units").reset_index()
    shared = shared[shared.units >= k]
    edges = {}
    for a, b, ab in shared.itertuples(index=False):
        na, nb = audience.loc[a, "units"], audience.loc[b, "units"]
        edges[(a, b)] = (ab, ab / (na + nb - ab), n * ab / (na * nb))
    nodes = {o: (int(r.units), int(r.sightings)) for o, r in audience.iterrows() if r.units >= k}
    return n, nodes, edges


@pytest.mark.parametrize("k,all_urls", [(1, False), (5, False), (12, True)])
def test_recomputed_with_pandas(engine, tmp_path, k, all_urls):
    rows, truth = _generate()
    load_with_units(engine, tmp_path, "gen", rows)
    net = co_exposure(engine, datasets=["gen"], min_units=k, all_urls=all_urls)
    n, nodes, edges = _pandas_network(truth, k, all_urls)
    assert net.units == n
    assert {x["outlet"]: (x["units"], x["sightings"]) for x in net.nodes} == nodes
    got = {(e["outlet_a"], e["outlet_b"]): (e["units"], e["jaccard"], e["lift"]) for e in net.edges}
    assert got.keys() == edges.keys() and edges
    for pair, (ab, jac, lift) in edges.items():
        assert got[pair][0] == ab
        assert got[pair][1] == pytest.approx(jac) and got[pair][2] == pytest.approx(lift)


def test_two_datasets_pool_their_units(engine, tmp_path):
    load_with_units(engine, tmp_path, "panel", hand_rows())
    # The same person in a second dataset adds no unit; a new one adds to both audiences.
    load_with_units(engine, tmp_path, "posts", [("u6", ARTICLE[R].format(i=500)), ("u10", ARTICLE[H].format(i=1)),
                                                ("u10", ARTICLE[R].format(i=2))])
    net = co_exposure(engine, datasets=["panel", "posts"], min_units=2)
    assert net.units == 9
    assert _edges(net)[(H, R)]["units"] == 6  # u1 u2 u3 u8, now also u6 and u10


# --- formats -------------------------------------------------------------------------------------------------
def test_graphml_reads_back_equal(hand, tmp_path):
    load_outlet_list(hand, tmp_path, ["type"], [("northvale-herald.example", H, {"type": "regional"})])
    out = tmp_path / "net.graphml"
    summary = write_network(hand, datasets=["panel"], min_units=2, fmt="graphml", out=out)
    assert (summary.nodes, summary.edges) == (3, 3)
    back = nx.read_graphml(out)
    want = to_networkx(co_exposure(hand, datasets=["panel"], min_units=2))
    # Nodes, edges and every attribute, types included (the reader adds empty default dicts to the graph's).
    assert dict(back.nodes(data=True)) == dict(want.nodes(data=True))
    assert {frozenset((a, b)): d for a, b, d in back.edges(data=True)} == \
           {frozenset((a, b)): d for a, b, d in want.edges(data=True)}
    assert {k: v for k, v in back.graph.items() if not k.endswith("_default")} == want.graph
    assert back.nodes[H] == {"units": 6, "sightings": 8, "type": "regional"}
    assert back.edges[L, R]["jaccard"] == pytest.approx(0.5) and back.graph["units"] == 8


def test_cli_csv_jsonl_nodes_and_bipartite(hand, db_url, tmp_path, capsys):
    edges, nodes = tmp_path / "edges.csv", tmp_path / "nodes.csv"
    assert main(["--db", db_url, "network", "--dataset", "panel", "--min-units", "2", "--out", str(edges),
                 "--nodes", str(nodes)]) == 0
    err = capsys.readouterr().err
    assert "3 outlets, 3 edges of at least 2 shared units, over 8 units" in err
    assert "1 outlets with fewer than 2 units" in err
    with edges.open(newline="") as fh:
        rows = list(csv.DictReader(fh))
    assert list(rows[0]) == list(EDGE_COLUMNS)
    hr = next(r for r in rows if (r["outlet_a"], r["outlet_b"]) == (H, R))
    assert int(hr["units"]) == 4 and float(hr["jaccard"]) == 4 / 7 and float(hr["lift"]) == 32 / 30
    with nodes.open(newline="") as fh:
        assert [(r["outlet"], r["units"]) for r in csv.DictReader(fh)] == [(L, "4"), (H, "6"), (R, "5")]

    assert main(["--db", db_url, "-q", "network", "--dataset", "panel", "--min-units", "2",
                 "--format", "jsonl"]) == 0
    out = capsys.readouterr()
    assert out.err == ""
    lines = [json.loads(x) for x in out.out.splitlines()]
    assert [(x["outlet_a"], x["outlet_b"], x["units"]) for x in lines] == [(L, H, 3), (L, R, 3), (H, R, 4)]

    assert main(["--db", db_url, "-q", "network", "--dataset", "panel", "--bipartite"]) == 0
    table = list(csv.DictReader(io.StringIO(capsys.readouterr().out)))
    assert list(table[0]) == ["unit", "outlet", "sightings"] and len(table) == 16
    assert all(r["unit"].startswith("hs256:") for r in table)

    assert main(["--db", db_url, "network", "--dataset", "panel", "--bipartite", "--format", "graphml"]) == 3
    assert "csv or jsonl" in capsys.readouterr().err
    assert main(["--db", db_url, "network", "--dataset", "nope"]) == 7


def test_cli_help_names_an_example():
    from click.testing import CliRunner

    from linkfold.cli import cli

    result = CliRunner().invoke(cli, ["network", "--help"])
    assert result.exit_code == 0 and "Example:" in result.output and "--min-units" in result.output


# --- over HTTP and from the Python client ------------------------------------------------------------------
@pytest.fixture
def served(engine, db_url, tmp_path):
    from linkfold.store.tokens import create_token

    rows, truth = _generate()
    load_with_units(engine, tmp_path, "gen", rows)
    return {"engine": engine, "truth": truth, "read": create_token(engine, scope="read", note="network").secret}


def test_http_network_under_a_read_token(served, db_url):
    from linkfold.api import create_app
    from test_api_support import AsgiClient, settings_for

    api = AsgiClient(create_app(settings_for(db_url), engine=served["engine"]), token=served["read"])
    r = api.get("/v1/network", params={"dataset": "gen"})
    assert r.status_code == 200
    body = r.json()
    want = co_exposure(served["engine"], datasets=["gen"])
    assert body["min_units"] == 5 and body["units"] == want.units and body["edges"]
    assert body["edges"] == want.edges and body["nodes"] == want.nodes
    # Aggregates only: no unit pseudonym anywhere in the answer.
    assert "hs256:" not in r.text
    # The floor is the server's: a smaller threshold is refused, a larger one applies.
    low = api.get("/v1/network", params={"dataset": "gen", "min_units": 2})
    assert low.status_code == 422
    high = api.get("/v1/network", params={"dataset": "gen", "min_units": 12, "all_urls": "true"}).json()
    assert high["edges"] == co_exposure(served["engine"], datasets=["gen"], min_units=12, all_urls=True).edges
    assert api.get("/v1/network", params={"dataset": "gen"}, token=None).status_code == 401
    missing = api.get("/v1/network", params={"dataset": "nope"})
    assert missing.status_code == 404 and missing.json()["error"]["code"] == "not_found"


def test_client_returns_dataframes(served, db_url, tmp_path):
    from linkfold.client import Client
    from test_api_support import LiveServer

    with LiveServer(db_url, cwd=tmp_path) as server, Client(server.url, token=served["read"]) as lf:
        edges, nodes = lf.network("gen", min_units=6)
    n, want_nodes, want_edges = _pandas_network(served["truth"], 6)
    assert list(edges.columns) == list(EDGE_COLUMNS)
    assert list(nodes.columns)[:3] == ["outlet", "units", "sightings"]
    assert edges.attrs["units"] == n and edges.attrs["min_units"] == 6
    assert {(a, b): u for a, b, u in edges[["outlet_a", "outlet_b", "units"]].itertuples(index=False)} == \
           {pair: v[0] for pair, v in want_edges.items()}
    assert dict(zip(nodes.outlet, zip(nodes.units, nodes.sightings, strict=True), strict=True)) == want_nodes


def test_the_outlet_list_groups_domains_into_one_node(engine, tmp_path):
    # The list names a second host (not in the site rules) as Harbourview News: its pages count for that
    # outlet, so a unit seen on both is one member of one audience (docs/outlets.md, "Which outlet").
    rows = [(f"r{i}", "https://harbourview-radio.test/live") for i in range(6)]
    rows += [(f"r{i}", ARTICLE[B].format(i=i + 1)) for i in range(3)]
    rows += [(f"r{i}", ARTICLE[H].format(i=i + 1)) for i in range(6)]
    load_with_units(engine, tmp_path, "radio", rows)
    before = co_exposure(engine, datasets=["radio"], min_units=1, all_urls=True)
    assert {n["outlet"] for n in before.nodes} == {"harbourview-radio.test", B, H}
    load_outlet_list(engine, tmp_path, ["type"], [("harbourview-news.example", B, {"type": "online"}),
                                                  ("harbourview-radio.test", B, {"type": "online"})])
    after = co_exposure(engine, datasets=["radio"], min_units=1, all_urls=True)
    nodes = {n["outlet"]: n for n in after.nodes}
    assert set(nodes) == {B, H} and nodes[B]["units"] == 6 and nodes[B]["sightings"] == 9
    assert nodes[B]["type"] == "online" and nodes[H]["type"] is None
    assert _edges(after)[(B, H)]["units"] == 6


def test_a_missing_folder_is_a_clear_error_and_nothing_is_left(hand, db_url, tmp_path, capsys):
    target = tmp_path / "no-such-folder" / "edges.csv"
    assert main(["--db", db_url, "network", "--dataset", "panel", "--out", str(target)]) == 6
    assert "does not exist" in capsys.readouterr().err and not target.parent.exists()
    # GraphML into a file, then again over it: replaced whole, never appended to.
    out = tmp_path / "g.graphml"
    for _ in range(2):
        assert main(["--db", db_url, "-q", "network", "--dataset", "panel", "--min-units", "2",
                     "--format", "graphml", "--out", str(out)]) == 0
    assert len(nx.read_graphml(out)) == 3 and [p.name for p in tmp_path.glob(".g.graphml.*")] == []
