"""The priority of a candidate and the ranking.

priority = expected detections per hour of telescope time:

    P(engulfed | history, rotation) x P(z >= z_thr | engulfed) x P(measured) / hours

P(engulfed | history, rotation) starts from the star's own history — the probability
that it engulfed a planet of the configured mass within the signature's lifetime
before now (``engulfment.engulfment_probability``; it grows with the lifetime and
with the radius the star swept through) — and is updated by the rotation evidence, a
bounded likelihood ratio (``rotation.rotation_evidence``):

    P = p LR / (1 - p + p LR).

Every factor is its own output column; ``explain`` shows the arithmetic.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from .catalog import status as st


def engulfed_posterior(p_history, likelihood_ratio):
    """P(engulfed | history, rotation) = p LR / (1 - p + p LR).

    Parameters
    ----------
    p_history : array_like
        Prior probability of a recent engulfment from the star's history, in [0, 1).
    likelihood_ratio : array_like
        p(rotation | engulfed) / p(rotation | not); 1 (no information) where NaN.

    Returns
    -------
    ndarray
        Posterior probability; NaN where ``p_history`` is NaN.
    """
    p = np.asarray(p_history, dtype=float)
    lr = np.asarray(likelihood_ratio, dtype=float)
    lr = np.where(np.isfinite(lr), lr, 1.0)
    with np.errstate(divide="ignore", invalid="ignore"):
        return p * lr / (1.0 - p + p * lr)


def detections_per_hour(p_engulfed, p_detect, p_measured, time_on_target_s):
    """Expected detections per hour of telescope time.

        priority = P(engulfed | history, rotation) x P(z >= thr | engulfed) x P(measured)
                   / (exposure + overhead in hours)

    P(measured) is 1 when the exposure reaches the S/N needed and falls as
    (S/N reached / S/N needed)^2 when the exposure ceiling stops short (the fraction of
    the needed photons collected); 0 where the line change is below the systematic floor.
    """
    hours = np.asarray(time_on_target_s, dtype=float) / 3600.0
    with np.errstate(divide="ignore", invalid="ignore"):
        return (np.asarray(p_engulfed, float) * np.asarray(p_detect, float)
                * np.asarray(p_measured, float) / hours)


def assign_ranks(table: pd.DataFrame) -> pd.DataFrame:
    """Sort computed rows by priority (highest first), then the rest in input order,
    and number the computed rows 1..n in the ``rank`` column (a nullable integer:
    missing for the rows that are not ranked)."""
    ok = ((table["status"] == st.OK) & table["priority"].notna()).to_numpy()
    # the order from the two sort keys alone, then one copy of the table (a survey's
    # table is large: no intermediate sorted and concatenated copies)
    keys = table[["priority", "z_enrich"]].reset_index(drop=True)[ok]
    order = keys.sort_values(["priority", "z_enrich"], ascending=False, kind="stable").index.to_numpy()
    n_ranked = order.size
    out = table.take(np.r_[order, np.flatnonzero(~ok)]).reset_index(drop=True)
    # whole numbers, empty (not NaN) for rows that are not ranked
    out["rank"] = pd.array(np.r_[np.arange(1, n_ranked + 1), np.zeros(int((~ok).sum()), int)],
                           dtype="Int64")
    out.loc[n_ranked:, "rank"] = pd.NA
    return out
