"""Outlets: the lab's coded outlet list, per-outlet counts and the coverage report (an analysis layer
over ``store``).

* :func:`load_outlet_list` stores a list file as a new version (the newest is in force);
* :func:`outlet_attributes` gives outlet name -> attributes of the list in force, for every output that
  carries them (exposure, networks);
* :class:`OutletJoin` is how a query reads the outlet of a canonical URL with the list applied;
* :func:`outlet_table` counts datasets, sightings, units, URLs, articles and stories per outlet, by the
  outlet each sighting stands for after short links and redirects;
* :func:`outlet_report` is the per-outlet coverage report, with :func:`path_shape` for the URL shapes
  that are not articles.

docs/outlets.md describes the file format, the precedence rule and every column.
"""

from __future__ import annotations

from ..canon.shapes import path_shape, segment_shape
from .counts import COUNT_COLUMNS, OutletTable, outlet_table
from .listfile import OutletEntry, OutletList, RuleConflict, parse_outlet_list, rule_conflicts
from .lists import (
    PREFER_CHOICES,
    LoadResult,
    OutletJoin,
    current_conflicts,
    list_in_force,
    list_outlet_lists,
    load_outlet_list,
    outlet_attributes,
    outlet_columns,
    outlet_for_hosts,
    outlet_matches,
)
from .report import REPORT_COLUMNS, OutletReport, outlet_report

__all__ = [
    "COUNT_COLUMNS",
    "PREFER_CHOICES",
    "REPORT_COLUMNS",
    "LoadResult",
    "OutletEntry",
    "OutletJoin",
    "OutletList",
    "OutletReport",
    "OutletTable",
    "RuleConflict",
    "current_conflicts",
    "list_in_force",
    "list_outlet_lists",
    "load_outlet_list",
    "outlet_attributes",
    "outlet_columns",
    "outlet_for_hosts",
    "outlet_matches",
    "outlet_report",
    "outlet_table",
    "parse_outlet_list",
    "path_shape",
    "rule_conflicts",
    "segment_shape",
]
