"""linkfold: a registry that folds the many URLs of one news article onto one stable ID.

What other projects may import is listed in ``__all__``; everything else is internal. The pipeline's
functions are loaded on first use (PEP 562), so ``import linkfold.client`` in another project does not
pull in the extraction library, numpy or the database drivers.
"""

from __future__ import annotations

import importlib
from typing import Any

__version__ = "0.1.0"

from .errors import (
    ConfigError,
    DatabaseError,
    DumpFormatError,
    InputError,
    InvalidURL,
    LinkfoldError,
    LockHeld,
    MissingColumnError,
    NetworkError,
    NotFound,
    OutletListError,
    RulesError,
    SchemaError,
    SignatureError,
    StageFailed,
    WriteConflict,
)
from .settings import Settings, load_settings

# name -> module that defines it; one line per public function or type of the pipeline.
_LAZY = {
    "Canonical": "linkfold.canon",
    "Canonicaliser": "linkfold.canon",
    "Ruleset": "linkfold.canon",
    "canonicalize": "linkfold.canon",
    "load_rules": "linkfold.canon",
    "url_key": "linkfold.canon",
    "make_engine": "linkfold.store",
    "upgrade_schema": "linkfold.store",
    "ingest_dump": "linkfold.ingest",
    "lookup": "linkfold.ingest",
    "export_dataset": "linkfold.ingest",
    "follow_links": "linkfold.follow",
    "import_redirects": "linkfold.follow",
    "fetch_pages": "linkfold.content.fetching",
    "import_pages": "linkfold.content.page_import",
    "load_documents": "linkfold.content.loading",
    "extract_pages": "linkfold.content.extracting",
    "run_dedupe": "linkfold.dedupe.stage",
    "record_decision": "linkfold.dedupe.stage",
    "list_clusters": "linkfold.dedupe.stage",
    "list_sinks": "linkfold.dedupe.stage",
    "recanonicalize": "linkfold.ingest.recanon",
    "run_nightly": "linkfold.jobs.nightly",
    "load_outlet_list": "linkfold.outlets",
    "outlet_attributes": "linkfold.outlets",
    "outlet_report": "linkfold.outlets",
    "outlet_table": "linkfold.outlets",
    "co_exposure": "linkfold.network",
    "write_network": "linkfold.network",
    "exposure_rows": "linkfold.exposure",
    "write_exposure": "linkfold.exposure",
    "outlet_exposure": "linkfold.exposure",
    "corpus_records": "linkfold.corpus",
    "write_corpus": "linkfold.corpus",
    "read_corpus": "linkfold.corpus",
    "compare_datasets": "linkfold.compare",
}


def __getattr__(name: str) -> Any:
    module = _LAZY.get(name)
    if module is None:
        raise AttributeError(f"module 'linkfold' has no attribute {name!r}")
    value = getattr(importlib.import_module(module), name)
    globals()[name] = value
    return value


__all__ = [
    "Canonical",
    "Canonicaliser",
    "ConfigError",
    "DatabaseError",
    "DumpFormatError",
    "InputError",
    "InvalidURL",
    "LinkfoldError",
    "LockHeld",
    "MissingColumnError",
    "NetworkError",
    "NotFound",
    "OutletListError",
    "RulesError",
    "Ruleset",
    "SchemaError",
    "Settings",
    "SignatureError",
    "StageFailed",
    "WriteConflict",
    "__version__",
    "canonicalize",
    "co_exposure",
    "compare_datasets",
    "corpus_records",
    "export_dataset",
    "exposure_rows",
    "extract_pages",
    "fetch_pages",
    "follow_links",
    "import_pages",
    "import_redirects",
    "ingest_dump",
    "list_clusters",
    "list_sinks",
    "load_documents",
    "load_outlet_list",
    "load_rules",
    "load_settings",
    "lookup",
    "make_engine",
    "outlet_attributes",
    "outlet_exposure",
    "outlet_report",
    "outlet_table",
    "read_corpus",
    "recanonicalize",
    "record_decision",
    "run_dedupe",
    "run_nightly",
    "upgrade_schema",
    "url_key",
    "write_corpus",
    "write_exposure",
    "write_network",
]
