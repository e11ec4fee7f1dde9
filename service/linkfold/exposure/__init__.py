"""Exposure: what each unit (a pseudonymised person or account) saw or shared, per outlet, article or story.

``exposure_rows`` streams the unit-level table (grouped in the database: ``query.exposure_select``);
``write_exposure`` writes it as CSV, JSON lines or Parquet; ``outlet_exposure`` is the per-outlet aggregate
with small groups suppressed, the form that may leave without unit-level rows. The reference is
docs/exposure.md.
"""

from __future__ import annotations

from .query import (
    COVERAGE_FIELDS,
    LEVELS,
    PERIODS,
    TARGET_COLUMN,
    coverage_select,
    exposure_select,
    sighting_targets,
)
from .tables import (
    DEFAULT_MIN_UNITS,
    EXPOSURE_FORMATS,
    ExposureSummary,
    ExposureTable,
    exposure_columns,
    exposure_rows,
    outlet_attributes,
    outlet_exposure,
    write_exposure,
)

__all__ = [
    "COVERAGE_FIELDS",
    "DEFAULT_MIN_UNITS",
    "EXPOSURE_FORMATS",
    "LEVELS",
    "PERIODS",
    "TARGET_COLUMN",
    "ExposureSummary",
    "ExposureTable",
    "coverage_select",
    "exposure_columns",
    "exposure_rows",
    "exposure_select",
    "outlet_attributes",
    "outlet_exposure",
    "sighting_targets",
    "write_exposure",
]
