"""The priority of a candidate and the ranking.

Interim score (until observing cost is folded in): the probability that the
signature clears the threshold, weighted by how long it lasts,

    priority = P(z >= z_thr) x w(t),   w(t) = t / (t + t_scale)  for t >= t_min, else 0

The chance of catching a star while its signature stands grows with the
signature's lifetime t (a star engulfing at a random time is seen enriched for a
fraction of time ∝ t); the saturating form keeps a few very long-lived signatures
from swamping the list.  Every factor is its own output column.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from .catalog import status as st


def lifetime_weight(lifetime_myr, min_lifetime_myr, scale_myr):
    """w(t) = t/(t + t_scale) for t >= t_min, 0 below; NaN stays NaN."""
    t = np.asarray(lifetime_myr, dtype=float)
    w = t / (t + scale_myr)
    return np.where(np.isnan(t), np.nan, np.where(t >= min_lifetime_myr, w, 0.0))


def interim_priority(p_detect, weight):
    """P(z >= threshold) x lifetime weight."""
    return np.asarray(p_detect, dtype=float) * np.asarray(weight, dtype=float)


def assign_ranks(table: pd.DataFrame) -> pd.DataFrame:
    """Sort computed rows by priority (highest first), then the rest in input order,
    and number the computed rows 1..n in the ``rank`` column."""
    ok = (table["status"] == st.OK) & table["priority"].notna()
    ranked = table[ok].sort_values(["priority", "z_enrich"], ascending=False, kind="stable")
    ranked = ranked.assign(rank=np.arange(1, len(ranked) + 1, dtype=float))
    return pd.concat([ranked, table[~ok]], ignore_index=True)
