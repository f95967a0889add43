"""The priority of a candidate and the ranking.

priority = expected detections per hour of telescope time (SCIENCE.md §20):

    P(engulfed | rotation, structure) x P(z >= z_thr | engulfed) x P(measured) / hours

with P(engulfed | ...) = rotation prior odds x lifetime weight w(t),
w(t) = t / (t + t_scale) for t >= t_min, else 0.  The chance of catching a star while
its signature stands grows with the signature's lifetime t (a star engulfing at a
random time is seen enriched for a fraction of time ∝ t); the saturating form keeps a
few very long-lived signatures from swamping the list.  Every factor is its own
output column; ``explain`` shows the arithmetic.
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


def detections_per_hour(p_engulfed, p_detect, p_measured, time_on_target_s):
    """Expected detections per hour of telescope time.

        priority = P(engulfed | rotation, structure) x P(z >= thr | engulfed) x P(measured)
                   / (exposure + overhead in hours)

    P(engulfed | ...) is the rotation-based prior odds times the lifetime weight (the
    chance that an engulfment is recent enough to still show); P(measured) is 1 when the
    exposure reaches the S/N needed and falls as (S/N reached / S/N needed)^2 when the
    exposure ceiling stops short (the fraction of the needed photons collected).
    """
    hours = np.asarray(time_on_target_s, dtype=float) / 3600.0
    with np.errstate(divide="ignore", invalid="ignore"):
        return (np.asarray(p_engulfed, float) * np.asarray(p_detect, float)
                * np.asarray(p_measured, float) / hours)


def assign_ranks(table: pd.DataFrame) -> pd.DataFrame:
    """Sort computed rows by priority (highest first), then the rest in input order,
    and number the computed rows 1..n in the ``rank`` column."""
    ok = (table["status"] == st.OK) & table["priority"].notna()
    ranked = table[ok].sort_values(["priority", "z_enrich"], ascending=False, kind="stable")
    ranked = ranked.assign(rank=np.arange(1, len(ranked) + 1, dtype=float))
    return pd.concat([ranked, table[~ok]], ignore_index=True)
