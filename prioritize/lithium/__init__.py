"""Lithium: the baseline similar stars show, the enrichment an engulfed planet brings,
and how long the signature lasts."""
