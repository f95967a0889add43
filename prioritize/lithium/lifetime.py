"""How long an engulfment signature stays above the detection threshold.

Following the star along its own track from now (SCIENCE.md §19), the planet's
lithium stays in the region it was mixed into and is diluted further as the
convective envelope deepens.  The signature ends at the first of

- ``dilution``: z(t) = (A_new(t) - A_base(t)) / sigma drops below the threshold,
- ``burning``: the same, when most of the planet's lithium has been destroyed at the
  base of the envelope by then (the caller decides; see ``engine._lifetimes``),
- ``rgb_bump``: the star reaches the RGB bump, after which thermohaline mixing
  destroys surface lithium (Charbonnel & Zahn 2007, A&A 467, L15; SCIENCE.md §16),
- ``end_of_track``: the track ends (end of core-helium burning) with the signature
  still standing.

``below_threshold`` (no signature even now) and ``past_rgb_bump`` (the star is
already beyond the bump) give a lifetime of zero.
"""

from __future__ import annotations

import numpy as np

END_BELOW = "below_threshold"
END_PAST_BUMP = "past_rgb_bump"
END_DILUTION = "dilution"
END_BURNING = "burning"
END_BUMP = "rgb_bump"
END_TRACK = "end_of_track"


def signature_lifetime(age_myr, z_along, z_threshold, bump_age_myr):
    """Lifetime of the signature from the present point.

    Parameters
    ----------
    age_myr : ndarray, shape (n, k)
        Ages along each star's future track; column 0 is now, NaN pads past the
        track's end.  Ages must increase along a row.
    z_along : ndarray, shape (n, k)
        Significance of the enrichment at those points.
    z_threshold : float
        Significance that counts as a signature.
    bump_age_myr : ndarray, shape (n,)
        Age at which the track reaches the RGB bump (NaN: no bump on this track).

    Returns
    -------
    lifetime_myr : ndarray, shape (n,)
    end : ndarray of str, shape (n,)
        One of the module's end codes.
    """
    age = np.asarray(age_myr, dtype=float)
    z = np.asarray(z_along, dtype=float)
    n, k = age.shape
    now = age[:, 0]
    valid = np.isfinite(age) & np.isfinite(z)
    below = valid & (z < z_threshold)
    below[:, 0] = False
    has_cross = below.any(axis=1)
    j = np.where(has_cross, below.argmax(axis=1), 0)
    rows = np.arange(n)
    jm = np.maximum(j - 1, 0)
    z0, z1 = z[rows, jm], z[rows, j]
    t0, t1 = age[rows, jm], age[rows, j]
    with np.errstate(divide="ignore", invalid="ignore"):
        frac = np.clip((z0 - z_threshold) / (z0 - z1), 0.0, 1.0)
    t_cross = np.where(has_cross, t0 + frac * (t1 - t0), np.inf)
    last = np.where(valid, age, -np.inf).max(axis=1)
    t_bump = np.where(np.isfinite(bump_age_myr), bump_age_myr, np.inf)
    ends = np.stack([t_cross, t_bump, last])
    which = ends.argmin(axis=0)
    lifetime = ends.min(axis=0) - now
    end = np.array([END_DILUTION, END_BUMP, END_TRACK], dtype=object)[which]

    past_bump = t_bump <= now
    no_signal = ~(z[:, 0] >= z_threshold)
    lifetime = np.where(past_bump | no_signal, 0.0, lifetime)
    end = np.where(past_bump, END_PAST_BUMP, np.where(no_signal, END_BELOW, end))
    lifetime = np.where(np.isfinite(now), lifetime, np.nan)
    return lifetime, end
