"""Networks: outlets joined by their shared audiences (co-exposure), over stored sightings with units.

``co_exposure`` computes the network in the database (``query``: distinct unit × outlet pairs, self-joined
on the unit, grouped by outlet pair) with Jaccard, lift and PMI weights; ``write_network`` writes it as CSV,
JSON lines or GraphML, or the bipartite unit–outlet table; ``to_networkx`` hands it to networkx. The
reference is docs/network.md.
"""

from __future__ import annotations

from .graph import (
    BIPARTITE_COLUMNS,
    DEFAULT_MIN_UNITS,
    EDGE_COLUMNS,
    NODE_COLUMNS,
    Network,
    bipartite_rows,
    bucket_labels,
    co_exposure,
    exposure_distribution,
    to_networkx,
    weights,
)
from .write import NETWORK_FORMATS, NetworkSummary, write_network

__all__ = [
    "BIPARTITE_COLUMNS",
    "DEFAULT_MIN_UNITS",
    "EDGE_COLUMNS",
    "NETWORK_FORMATS",
    "NODE_COLUMNS",
    "Network",
    "NetworkSummary",
    "bipartite_rows",
    "bucket_labels",
    "co_exposure",
    "exposure_distribution",
    "to_networkx",
    "weights",
    "write_network",
]
