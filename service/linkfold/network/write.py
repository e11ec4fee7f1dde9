"""Writing the co-exposure network: edges as CSV or JSON lines (nodes beside them), the whole graph as
GraphML, or the bipartite unit–outlet table."""

from __future__ import annotations

import csv
import json
import sys
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import IO, Any

from sqlalchemy.engine import Engine

from .._tabular import atomic_path, csv_cell
from ..errors import ConfigError
from ..progress import SILENT, Progress
from .graph import (
    BIPARTITE_COLUMNS,
    DEFAULT_MIN_UNITS,
    EDGE_COLUMNS,
    bipartite_rows,
    co_exposure,
    to_networkx,
)

#: The file formats the co-exposure network is written in.
NETWORK_FORMATS = ("csv", "jsonl", "graphml")


@dataclass
class NetworkSummary:
    datasets: list[str]
    format: str
    out: str | None
    units: int = 0
    nodes: int = 0
    edges: int = 0
    min_units: int = DEFAULT_MIN_UNITS
    suppressed_nodes: int = 0
    bipartite_rows: int | None = None

    def lines(self) -> list[str]:
        where = self.out or "stdout"
        if self.bipartite_rows is not None:
            return [f"bipartite unit–outlet table of {', '.join(self.datasets)}: {self.bipartite_rows:,} rows "
                    f"as {self.format} to {where}"]
        out = [f"co-exposure network of {', '.join(self.datasets)}: {self.nodes:,} outlets, {self.edges:,} edges "
               f"of at least {self.min_units} shared units, over {self.units:,} units; as {self.format} to {where}"]
        if self.suppressed_nodes:
            out.append(f"left out: {self.suppressed_nodes:,} outlets with fewer than {self.min_units} units")
        return out

    def as_dict(self) -> dict[str, Any]:
        return dict(self.__dict__)


def write_rows(rows: Iterable[Mapping[str, Any]], columns: Sequence[str], fmt: str, stream: IO[str],
               progress: Progress = SILENT) -> int:
    """Rows as CSV (RFC 4180, with a header; empty cell for no value) or JSON lines; returns the count."""
    n = 0
    if fmt == "csv":
        writer = csv.writer(stream, lineterminator="\n")
        writer.writerow(columns)
        for row in rows:
            writer.writerow([csv_cell(row.get(c)) for c in columns])
            n += 1
            if n % 10000 == 0:
                progress.advance(10000)
    else:
        for row in rows:
            stream.write(json.dumps({c: row.get(c) for c in columns}, ensure_ascii=False) + "\n")
            n += 1
            if n % 10000 == 0:
                progress.advance(10000)
    progress.advance(n % 10000)
    return n


def _to_file(path: Path, write: Any, binary: bool = False) -> None:

    with atomic_path(path) as tmp:
        if binary:
            with tmp.open("wb") as fh:
                write(fh)
        else:
            with tmp.open("w", encoding="utf-8", newline="") as fh:
                write(fh)


def write_network(engine: Engine, *, datasets: Sequence[str], min_units: int = DEFAULT_MIN_UNITS,
                  all_urls: bool = False, fmt: str = "csv", out: str | Path | IO[str] | None = None,
                  nodes_out: str | Path | None = None, bipartite: bool = False,
                  progress: Progress = SILENT) -> NetworkSummary:
    """Write the co-exposure network of ``datasets`` (:func:`~linkfold.network.co_exposure`).

    ``csv`` and ``jsonl`` write the edges (:data:`EDGE_COLUMNS`) to ``out`` (a path, written beside it
    and renamed when complete; an open text stream; or ``None`` for stdout) and, with ``nodes_out``, the
    nodes to that file in the same format; ``graphml`` writes nodes and edges in one file. With
    ``bipartite`` the unit–outlet table (:data:`BIPARTITE_COLUMNS`) is written instead, streamed.
    """
    if fmt not in NETWORK_FORMATS:
        raise ConfigError(f"unknown format {fmt!r}: use one of {', '.join(NETWORK_FORMATS)}")
    if bipartite and fmt == "graphml":
        raise ConfigError("the bipartite table is written as csv or jsonl (one row per unit × outlet)")
    if bipartite and nodes_out is not None:
        raise ConfigError("--nodes goes with the network, not with --bipartite")
    if fmt == "graphml" and nodes_out is not None:
        raise ConfigError("GraphML holds the nodes already; --nodes is for csv and jsonl")
    where = str(out) if isinstance(out, str | Path) else None
    summary = NetworkSummary(list(dict.fromkeys(datasets)), fmt, where, min_units=min_units)

    if bipartite:
        progress.start("bipartite unit–outlet table (rows)")
        try:
            rows = bipartite_rows(engine, datasets=datasets, all_urls=all_urls)
            count: list[int] = []

            def emit(fh: IO[str]) -> None:
                count.append(write_rows(rows, BIPARTITE_COLUMNS, fmt, fh, progress))

            _emit(out, emit)
        finally:
            progress.finish()
        summary.bipartite_rows = count[0]
        return summary

    net = co_exposure(engine, datasets=datasets, min_units=min_units, all_urls=all_urls)
    summary.units, summary.nodes, summary.edges = net.units, len(net.nodes), len(net.edges)
    summary.suppressed_nodes = net.suppressed_nodes
    if fmt == "graphml":
        import networkx as nx

        graph = to_networkx(net)
        if isinstance(out, str | Path):
            _to_file(Path(out), lambda fh: nx.write_graphml(graph, fh), binary=True)
        else:
            stream = out if out is not None else sys.stdout
            stream.write("\n".join(nx.generate_graphml(graph)) + "\n")
            stream.flush()
        return summary
    _emit(out, lambda fh: write_rows(net.edges, EDGE_COLUMNS, fmt, fh))
    if nodes_out is not None:
        _to_file(Path(nodes_out), lambda fh: write_rows(net.nodes, net.node_columns, fmt, fh))
    return summary


def _emit(out: str | Path | IO[str] | None, write: Any) -> None:
    if isinstance(out, str | Path):
        _to_file(Path(out), write)
    else:
        stream = out if out is not None else sys.stdout
        write(stream)
        stream.flush()


__all__ = ["NETWORK_FORMATS", "NetworkSummary", "write_network", "write_rows"]
