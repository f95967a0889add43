"""How long an engulfment signature stays above the detection threshold, and what ends it.

Following the star along its own track from now, the planet's lithium stays in the
region it was mixed into and is diluted further as the convective envelope deepens;
meanwhile processes that destroy or hide surface lithium act on it.  No stage is
excluded by construction: every process is a timescale.

- ``dilution``: z(t) = (A_new(t) - A_base(t)) / sigma drops below the threshold mainly
  because the envelope deepened;
- ``burning``: 7Li(p, alpha) at the base of the envelope destroyed most of it
  (``burning.surface_li_timescale_yr``);
- ``main_sequence_depletion``: the slow depletion that the lithium prior of the same
  star implies on the main sequence (``baseline.main_sequence_efolding_myr``; the
  planet's lithium is mixed down to the burning layer by the same process as the
  star's own);

the process named is the one that has lowered the planet's surface lithium by the
most e-folds when z crosses the threshold (:func:`ending_process`);
- ``thermohaline``: above the RGB bump thermohaline mixing destroys surface lithium
  (Charbonnel & Zahn 2007, A&A 467, L15): an e-folding time such that Li falls by
  ``baseline.THERMOHALINE_DEPLETION_DEX`` between the bump and the tip
  (:func:`thermohaline_rate_per_myr`);
- ``fingering_mixing``: accreted material with a higher mean molecular weight than
  the envelope (a planet richer in metals) drives fingering (thermohaline) mixing
  below the convective envelope, which dilutes a fresh signature within a few Myr on
  the main sequence (Théado & Vauclair 2012, ApJ 744, 123; Garaud 2011, ApJ 728, L30)
  (:func:`fingering_survival`);
- ``end_of_track``: the track ends (end of core-helium burning) with the signature
  still standing.

``below_threshold`` (no signature even now) gives a lifetime of zero.
"""

from __future__ import annotations

import numpy as np

from .baseline import THERMOHALINE_DEPLETION_DEX

END_BELOW = "below_threshold"
END_DILUTION = "dilution"
END_BURNING = "burning"
END_MS_DEPLETION = "main_sequence_depletion"
END_THERMOHALINE = "thermohaline"
END_FINGERING = "fingering_mixing"
END_TRACK = "end_of_track"
DESTRUCTION_ENDS = (END_BURNING, END_MS_DEPLETION, END_THERMOHALINE, END_FINGERING)
ALL_ENDS = (END_BELOW, END_DILUTION) + DESTRUCTION_ENDS + (END_TRACK,)

# Fingering mixing after accretion (planning values; Théado & Vauclair 2012 find
# dilution within a few Myr for planetary matter accreted onto solar-type dwarfs;
# the scaling with the metal excess is the linear growth of the fingering flux with
# the inverse mu gradient, from memory).
FINGERING_TAU_REF_MYR = 3.0
FINGERING_DZ_REF = 1e-3


def signature_lifetime(age_myr, z_along, z_threshold):
    """Lifetime of the signature from the present point.

    Parameters
    ----------
    age_myr : ndarray, shape (n, k)
        Ages along each star's future track; column 0 is now, NaN pads past the
        track's end.  Ages must increase along a row.
    z_along : ndarray, shape (n, k)
        Significance of the enrichment at those points (every process applied).
    z_threshold : float
        Significance that counts as a signature.

    Returns
    -------
    lifetime_myr : ndarray, shape (n,)
        Time until z first drops below the threshold (linear interpolation between
        points), or until the track ends.
    crossing : ndarray of int, shape (n,)
        Column of the first point below the threshold (-1: never crosses).
    end : ndarray of str, shape (n,)
        ``dilution`` (crossed; the caller names the process), ``end_of_track`` or
        ``below_threshold``.
    """
    age = np.asarray(age_myr, dtype=float)
    z = np.asarray(z_along, dtype=float)
    n = age.shape[0]
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
    last = np.where(valid, age, -np.inf).max(axis=1)
    t_end = np.where(has_cross, t0 + frac * (t1 - t0), last)
    end = np.where(has_cross, END_DILUTION, END_TRACK).astype(object)
    no_signal = ~(z[:, 0] >= z_threshold)
    lifetime = np.where(no_signal, 0.0, t_end - now)
    end = np.where(no_signal, END_BELOW, end)
    lifetime = np.where(np.isfinite(now), lifetime, np.nan)
    return lifetime, np.where(has_cross & ~no_signal, j, -1), end


def ending_process(end, crossing, losses):
    """Name the process that ended each crossing signature.

    Parameters
    ----------
    end : ndarray of str, shape (n,)
        From :func:`signature_lifetime`.
    crossing : ndarray of int, shape (n,)
        Crossing column (-1 where none).
    losses : dict of str -> ndarray, shape (n, k)
        Cumulative e-folds by which each process has lowered the planet's lithium at
        the surface since now: ``dilution`` (ln of the growth of the mixing mass) and
        the destruction processes of :data:`DESTRUCTION_ENDS`.

    Returns
    -------
    ndarray of str
        ``end`` with each crossing named after the process with the most e-folds at
        the crossing.
    """
    end = np.asarray(end, dtype=object).copy()
    crossing = np.asarray(crossing)
    rows = np.flatnonzero(crossing >= 0)
    if rows.size == 0 or not losses:
        return end
    names = list(losses)
    at = np.stack([np.asarray(losses[k], dtype=float)[rows, crossing[rows]] for k in names])
    at = np.nan_to_num(at, nan=0.0)
    end[rows] = np.array(names, dtype=object)[at.argmax(axis=0)]
    return end


def thermohaline_rate_per_myr(bump_age_myr, tip_age_myr, depletion_dex=THERMOHALINE_DEPLETION_DEX):
    """e-folding rate (1/Myr) of surface lithium above the RGB bump.

    rate = depletion_dex ln(10) / (t_tip - t_bump): the fall of ≳ 1 dex between the
    bump and the tip (Charbonnel & Zahn 2007, A&A 467, L15; from memory) spread evenly
    in time; ``depletion_dex`` defaults to THERMOHALINE_DEPLETION_DEX (config
    ``[baseline] thermohaline_depletion_dex``).  NaN where the track has no bump."""
    with np.errstate(divide="ignore", invalid="ignore"):
        span = np.asarray(tip_age_myr, dtype=float) - np.asarray(bump_age_myr, dtype=float)
        return np.where(span > 0, float(depletion_dex) * np.log(10.0) / span, np.nan)


def fingering_survival(elapsed_myr, m_planet_msun, planet_z, star_z, m_cz_msun, m_radiative_msun):
    """Fraction of the planet's lithium still in the convective envelope after fingering mixing.

    A planet richer in metals than the star raises the mean molecular weight of the
    envelope, which becomes unstable to fingering against the radiative layers below.
    The excess then spreads over the envelope plus the radiative zone above the core:

        f(t) = r + (1 - r) exp(-t / tau),   r = M_cz / (M_cz + M_rad),
        tau = FINGERING_TAU_REF_MYR x FINGERING_DZ_REF / dZ,
        dZ = M_p (Z_p - Z_*) / (M_cz + M_p),

    with f = 1 where the planet is not richer in metals (no instability).  In a giant
    the radiative zone above the shell holds little mass (r ~ 1), so the effect is
    small; below a thin main-sequence envelope r << 1 and the signature fades within
    a few Myr (Théado & Vauclair 2012, ApJ 744, 123).

    Parameters
    ----------
    elapsed_myr : array_like
        Time since engulfment (Myr).
    m_planet_msun : array_like
        Planet mass reaching the envelope (M_sun).
    planet_z, star_z : array_like
        Metal mass fractions of the planet and of the stellar envelope.
    m_cz_msun, m_radiative_msun : array_like
        Convective envelope mass and the radiative mass between it and the core (M_sun).

    Returns
    -------
    ndarray
        Surviving fraction in (0, 1].
    """
    m_p = np.asarray(m_planet_msun, dtype=float)
    m_cz = np.asarray(m_cz_msun, dtype=float)
    dz = m_p * (np.asarray(planet_z, dtype=float) - np.asarray(star_z, dtype=float)) / (m_cz + m_p)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        tau = FINGERING_TAU_REF_MYR * FINGERING_DZ_REF / dz
        r = m_cz / (m_cz + np.clip(np.asarray(m_radiative_msun, dtype=float), 0.0, None))
        f = r + (1.0 - r) * np.exp(-np.clip(np.asarray(elapsed_myr, dtype=float), 0.0, None) / tau)
    return np.where((dz > 0) & np.isfinite(f), f, 1.0)
