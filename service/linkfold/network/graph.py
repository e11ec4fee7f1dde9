"""The outlet co-exposure network: outlets joined by the units exposed to both, with normalised weights.

Weights of an edge between outlets A and B, with ``units_ab`` the units exposed to both, ``|A|`` and
``|B|`` their audiences and ``N`` the units exposed to any outlet of the datasets (docs/network.md):

* ``jaccard`` = units_ab / |A ∪ B| = units_ab / (|A| + |B| − units_ab): the Jaccard coefficient of the two
  audiences (P. Jaccard, 1901; 1912), between 0 and 1;
* ``lift`` = N · units_ab / (|A| · |B|): the observed overlap over the overlap expected if the two audiences
  were independent; 1 means no more shared readers than chance;
* ``pmi`` = ln(lift): pointwise mutual information of "exposed to A" and "exposed to B" (Church & Hanks,
  1990; Manning & Schütze, Foundations of Statistical NLP, 1999, §5.4 — cited from memory), in nats.

Small groups are protected: an edge needs at least ``min_units`` units, and an outlet with a smaller
audience is left out of the nodes (its edges could not pass anyway: units_ab ≤ min(|A|, |B|)).
"""

from __future__ import annotations

import json
import math
from collections.abc import Iterator, Sequence
from dataclasses import dataclass, field
from typing import Any

import sqlalchemy as sa
from sqlalchemy.engine import Connection, Engine

from ..errors import ConfigError
from ..outlets import outlet_attributes, outlet_columns
from ..store.datasets import get_dataset
from .query import (
    SIGHTING_BUCKETS,
    distribution_select,
    edges_select,
    materialised,
    nodes_select,
    pairs_select,
    plan_for_all_rows,
    units_select,
)

#: The default fewest units an edge (and a node) needs. A pair of outlets read by only a few people can
#: single out individuals' reading; a threshold of 5 to 10 contributors per published cell is common
#: practice in statistical disclosure control. 5 is the default here; over HTTP it is also the floor.
DEFAULT_MIN_UNITS = 5
EDGE_COLUMNS = ("outlet_a", "outlet_b", "units", "jaccard", "lift", "pmi")
NODE_COLUMNS = ("outlet", "units", "sightings")
BIPARTITE_COLUMNS = ("unit", "outlet", "sightings")


@dataclass
class Network:
    """An outlet co-exposure network: ``nodes`` (dicts in ``node_columns`` order: outlet, units,
    sightings, then the outlet list's attributes), ``edges`` (dicts in :data:`EDGE_COLUMNS` order, sorted
    by outlet pair), ``units`` (N: units exposed to any outlet), and what the threshold left out."""

    datasets: list[str]
    min_units: int
    all_urls: bool
    units: int
    node_columns: list[str]
    nodes: list[dict[str, Any]] = field(repr=False)
    edges: list[dict[str, Any]] = field(repr=False)
    suppressed_nodes: int = 0

    def as_dict(self) -> dict[str, Any]:
        return {"datasets": self.datasets, "min_units": self.min_units, "all_urls": self.all_urls,
                "units": self.units, "node_columns": self.node_columns, "edge_columns": list(EDGE_COLUMNS),
                "nodes": self.nodes, "edges": self.edges, "suppressed_nodes": self.suppressed_nodes}


def dataset_ids(conn: Connection, datasets: Sequence[str]) -> dict[int, str]:
    names = list(dict.fromkeys(datasets))
    if not names:
        raise ConfigError("a network needs at least one dataset (--dataset NAME)")
    return {int(get_dataset(conn, n)["id"]): n for n in names}


def weights(units_ab: int, units_a: int, units_b: int, n: int) -> dict[str, float]:
    """The normalised weights of an edge (module doc)."""
    union = units_a + units_b - units_ab
    lift = n * units_ab / (units_a * units_b)
    return {"jaccard": units_ab / union, "lift": lift, "pmi": math.log(lift)}


def co_exposure(engine: Engine, *, datasets: Sequence[str], min_units: int = DEFAULT_MIN_UNITS,
                all_urls: bool = False, attributes: bool = True) -> Network:
    """The outlet co-exposure network of ``datasets``: an edge joins two outlets when at least
    ``min_units`` units were exposed to both (module doc for the weights). Nodes carry the attributes of
    the outlet list in force (``linkfold.outlets``) unless ``attributes`` is false."""
    if min_units < 1:
        raise ConfigError(f"min_units must be at least 1, not {min_units}")
    with engine.connect() as conn:
        ids = dataset_ids(conn, datasets)
        with materialised(conn, pairs_select(dataset_ids=list(ids), all_urls=all_urls)) as pairs:
            audience = {str(o): (int(u), int(s)) for o, u, s in conn.execute(nodes_select(pairs))}
            n = int(conn.execute(units_select(pairs)).scalar_one() or 0)
            found = conn.execute(edges_select(pairs, min_units=min_units)).all()
        attr_cols = outlet_columns(conn) if attributes else []
        attrs = outlet_attributes(conn) if attr_cols else {}
    node_columns = list(NODE_COLUMNS) + [a if a not in NODE_COLUMNS else f"outlet_{a}" for a in attr_cols]
    nodes = []
    for outlet in sorted(audience):
        units, sightings = audience[outlet]
        if units < min_units:
            continue
        node: dict[str, Any] = {"outlet": outlet, "units": units, "sightings": sightings}
        listed = attrs.get(outlet, {})
        for name, col in zip(attr_cols, node_columns[len(NODE_COLUMNS):], strict=True):
            node[col] = listed.get(name)
        nodes.append(node)
    edges = []
    for a, b, units_ab in found:
        # The database's collation orders text its own way; the output orders by code point.
        a, b = (str(a), str(b)) if str(a) < str(b) else (str(b), str(a))
        edges.append({"outlet_a": a, "outlet_b": b, "units": int(units_ab),
                      **weights(int(units_ab), audience[a][0], audience[b][0], n)})
    edges.sort(key=lambda e: (e["outlet_a"], e["outlet_b"]))
    return Network(list(ids.values()), min_units, all_urls, n, node_columns, nodes, edges,
                   suppressed_nodes=len(audience) - len(nodes))


def bipartite_rows(engine: Engine, *, datasets: Sequence[str], all_urls: bool = False,
                   yield_per: int = 10000) -> Iterator[dict[str, Any]]:
    """The bipartite unit–outlet table (unit, outlet, sightings), streamed from the database in unit and
    outlet order: the input other network tools take. Unit-level rows: personal data (docs/network.md)."""
    with engine.connect() as conn:
        ids = dataset_ids(conn, datasets)
    q = pairs_select(dataset_ids=list(ids), all_urls=all_urls).order_by(sa.literal_column("1"),
                                                                         sa.literal_column("2"))
    with engine.connect() as conn:
        plan_for_all_rows(conn)
        for unit, outlet, sightings in conn.execute(q.execution_options(yield_per=yield_per, stream_results=True)):
            yield {"unit": unit, "outlet": outlet, "sightings": int(sightings)}


def bucket_labels() -> list[str]:
    """Labels of :data:`~linkfold.network.query.SIGHTING_BUCKETS`: 1, 2, 3–4 … 50+."""
    return [str(lo) if lo == hi else (f"{lo}–{hi}" if hi is not None else f"{lo}+") for lo, hi in SIGHTING_BUCKETS]


def exposure_distribution(engine: Engine, *, datasets: Sequence[str], min_units: int = DEFAULT_MIN_UNITS,
                          all_urls: bool = False) -> dict[str, list[int | None]]:
    """Per outlet, how many units had 1, 2, 3–4 … sightings there (:func:`bucket_labels`): the exposure
    distribution. A bucket of fewer than ``min_units`` units is None (suppressed, as small groups are in
    the network); outlets whose audience is below ``min_units`` are left out."""
    if min_units < 1:
        raise ConfigError(f"min_units must be at least 1, not {min_units}")
    with engine.connect() as conn:
        ids = dataset_ids(conn, datasets)
        rows = conn.execute(distribution_select(pairs_select(dataset_ids=list(ids), all_urls=all_urls))).all()
    counts: dict[str, list[int]] = {}
    for outlet, bucket, units in rows:
        counts.setdefault(str(outlet), [0] * len(SIGHTING_BUCKETS))[int(bucket)] = int(units)
    return {o: [n if n >= min_units or n == 0 else None for n in c]
            for o, c in sorted(counts.items()) if sum(c) >= min_units}


def to_networkx(network: Network) -> Any:
    """The network as an undirected ``networkx.Graph``: a node per outlet (attributes: units, sightings,
    the outlet list's), an edge per kept pair (units, jaccard, lift, pmi). Empty attribute values are left
    out, as GraphML has no null."""
    import networkx as nx

    def value(v: Any) -> Any:
        # GraphML types: boolean, int, long, float, double, string.
        return v if isinstance(v, str | int | float | bool) else json.dumps(v, ensure_ascii=False)

    g = nx.Graph(datasets=",".join(network.datasets), min_units=network.min_units, units=network.units)
    for node in network.nodes:
        g.add_node(node["outlet"], **{k: value(v) for k, v in node.items() if k != "outlet" and v is not None})
    for e in network.edges:
        g.add_edge(e["outlet_a"], e["outlet_b"], **{k: e[k] for k in EDGE_COLUMNS[2:]})
    return g


__all__ = ["BIPARTITE_COLUMNS", "DEFAULT_MIN_UNITS", "EDGE_COLUMNS", "NODE_COLUMNS", "Network", "bipartite_rows",
           "bucket_labels", "co_exposure", "dataset_ids", "exposure_distribution", "to_networkx", "weights"]
