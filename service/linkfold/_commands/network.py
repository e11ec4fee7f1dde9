"""``linkfold network``."""

from __future__ import annotations

from pathlib import Path

import click

from ..network import DEFAULT_MIN_UNITS, NETWORK_FORMATS, write_network
from ._common import Context, common_options, format_option, pass_ctx


@click.command("network")
@click.option("--dataset", "datasets", required=True, multiple=True, metavar="NAME",
              help="The dataset; repeat for several (their units and sightings together).")
@click.option("--min-units", type=click.IntRange(min=1), default=DEFAULT_MIN_UNITS, show_default=True,
              help="Fewest units exposed to both outlets for an edge (and to an outlet for its node): protects "
                   "small groups (docs/network.md).")
@click.option("--all-urls", is_flag=True,
              help="Count every sighting, not only those whose final URL is an article by the site rules.")
@format_option(NETWORK_FORMATS, default="csv",
               help="csv (edges, with a header), jsonl (edges), or graphml (nodes and edges).")
@click.option("--out", type=click.Path(dir_okay=False, path_type=Path), metavar="FILE",
              help="File to write (default: stdout).")
@click.option("--nodes", "nodes_out", type=click.Path(dir_okay=False, path_type=Path), metavar="FILE",
              help="Also write the nodes (outlet, units, sightings, the outlet list's attributes) to FILE, "
                   "in the format of the edges (csv or jsonl).")
@click.option("--bipartite", is_flag=True,
              help="Write the bipartite unit–outlet table instead (unit, outlet, sightings): unit-level rows.")
@common_options
@pass_ctx
def network_command(obj: Context, datasets: tuple[str, ...], min_units: int, all_urls: bool, fmt: str,
                    out: Path | None, nodes_out: Path | None, bipartite: bool) -> None:
    """Write the outlet co-exposure network: outlets joined by the units exposed to both.

    Edge columns: outlet_a, outlet_b (outlet_a < outlet_b), units (exposed to both), jaccard (units over
    the union of the two audiences), lift (over what independent audiences would share) and pmi (ln of
    lift). A sighting counts for the outlet of the URL it stands for after short links and redirects;
    only articles unless --all-urls; sightings without a unit are left out. Pairs shared by fewer than
    --min-units units, and outlets with fewer, are left out (docs/network.md says why).

    \b
    Example:
      linkfold network --dataset panel-2031 --min-units 10 --nodes nodes.csv --out edges.csv
      linkfold network --dataset panel-2031 --format graphml --out outlets.graphml
      linkfold network --dataset panel-2031 --bipartite --format jsonl --out unit-outlet.jsonl
    """
    summary = write_network(obj.engine(), datasets=list(datasets), min_units=min_units, all_urls=all_urls,
                            fmt=fmt, out=out, nodes_out=nodes_out, bipartite=bipartite, progress=obj.progress())
    for line in summary.lines():
        obj.message(line)


def register(cli: click.Group) -> None:
    cli.add_command(network_command)
