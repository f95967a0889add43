"""Catalog edge: the column contract, reading and writing tables, per-row validation.

- :mod:`~prioritize.catalog.columns`   canonical input/output columns (names, units, ranges, spellings)
- :mod:`~prioritize.catalog.io`        read any supported format into the canonical table; write atomically
- :mod:`~prioritize.catalog.validate`  per-row status and note; what each star can be computed from
- :mod:`~prioritize.catalog.status`    the status codes and stage names shared by all stages

Submodules are imported where used (not here) so that the command line starts quickly.
"""
