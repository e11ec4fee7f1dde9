"""The old home of the ingest writer, listings, export and lookup queries, kept only so that code written
against it still imports (nothing in the package does; remove it once nothing else does). Import from
the modules by idea instead: :mod:`.clock` (``now``, ``utc``), :mod:`.datasets` (datasets, files,
rejects), :mod:`.loads` (one batch of a load), :mod:`.linkage` (the linkage table) and :mod:`.lookup`
(what the registry knows about URLs, keys and IDs)."""

from __future__ import annotations

from .clock import now, utc
from .datasets import (
    claim_file,
    complete_file,
    count_unfinished_files,
    create_file,
    dataset_files,
    ensure_dataset,
    file_reject_counts,
    find_dataset,
    find_file,
    get_dataset,
    iter_rejects,
    list_datasets,
    reject_totals,
)
from .linkage import LINK_COLUMNS, iter_links
from .loads import (
    RAW_COLUMNS,
    REJECT_COLUMNS,
    SIGHTING_COLUMNS,
    BatchCounts,
    raw_encoder,
    sends_utf8,
    sighting_encoder,
    write_batch,
)
from .lookup import canonicals_by_key, ids_by_hash, raw_sighting_counts, raws_by_hash, sighting_counts

__all__ = [
    "LINK_COLUMNS",
    "RAW_COLUMNS",
    "REJECT_COLUMNS",
    "SIGHTING_COLUMNS",
    "BatchCounts",
    "canonicals_by_key",
    "claim_file",
    "complete_file",
    "count_unfinished_files",
    "create_file",
    "dataset_files",
    "ensure_dataset",
    "file_reject_counts",
    "find_dataset",
    "find_file",
    "get_dataset",
    "ids_by_hash",
    "iter_links",
    "iter_rejects",
    "list_datasets",
    "now",
    "raw_encoder",
    "raw_sighting_counts",
    "raws_by_hash",
    "reject_totals",
    "sends_utf8",
    "sighting_counts",
    "sighting_encoder",
    "utc",
    "write_batch",
]
