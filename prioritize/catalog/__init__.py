"""Catalog edge: the column contract, reading and writing tables, per-row validation.

- :mod:`~prioritize.catalog.columns`   canonical input/output columns (names, units, ranges, spellings)
- :mod:`~prioritize.catalog.io`        read any supported format into the canonical table; write atomically
- :mod:`~prioritize.catalog.validate`  per-row status and note; what each star can be computed from
- :mod:`~prioritize.catalog.status`    the status codes and stage names shared by all stages
"""

from prioritize.catalog.columns import INPUT_COLUMNS, OUTPUT_COLUMNS, format_column_table
from prioritize.catalog.io import (ACCEPTED_FORMATS, parse_column_option, provenance_metadata,
                                   read_catalog, read_table, write_table)
from prioritize.catalog.validate import ROUTES, check_report, computable_from, validate_catalog

__all__ = [
    "ACCEPTED_FORMATS", "INPUT_COLUMNS", "OUTPUT_COLUMNS", "ROUTES", "check_report",
    "computable_from", "format_column_table", "parse_column_option", "provenance_metadata",
    "read_catalog", "read_table", "validate_catalog", "write_table",
]
