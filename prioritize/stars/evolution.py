"""Evolutionary stages along a track, and the RGB bump.

The track grid is resampled at equivalent evolutionary points (EEPs) with fixed
ranges per phase (``tracks.PHASE_EEPS``).  This module turns an EEP into the trade's
stage names (:data:`prioritize.catalog.status.STAGES`):

- ``main_sequence``: main-sequence EEPs before the last 15% of the phase
- ``turnoff``: the last 15% of the main sequence (core hydrogen nearly exhausted,
  the hook and the hottest point of the track for stars with convective cores)
- ``subgiant``: the Hertzsprung gap / subgiant branch
- ``lower_giant_branch``: first giant branch below the RGB bump
- ``upper_giant_branch``: first giant branch above the bump (or above the tip-side
  half of the branch when the track has no bump)
- ``red_clump``: core-helium burning

RGB bump: :func:`rgb_bump` takes it from the grid's envelope integration (the deepest
penetration of the envelope, :mod:`prioritize.stars.envelope`).  For grids without envelopes, the
interim :func:`rgb_bump_logl` gives the luminosity of the bump interpolated in
initial mass from approximate solar-metallicity values
(log L = 1.4, 1.5, 1.65, 1.9 at 0.8, 1.0, 1.5, 2.0 M_sun; from memory) and shifted
by -0.35 dex per dex of [Fe/H] (the bump is fainter in metal-rich stars;
Christensen-Dalsgaard 2015, MNRAS 453, 666; slope from memory).  Above 2.2 M_sun
helium ignites without a degenerate core and the track has no bump.
"""

from __future__ import annotations

import numpy as np

from ..catalog.status import STAGES

TURNOFF_FRACTION = 0.85
_BUMP_MASS = np.array([0.8, 1.0, 1.5, 2.0, 2.2])
_BUMP_LOGL = np.array([1.4, 1.5, 1.65, 1.9, 2.0])
BUMP_FEH_SLOPE = -0.35
NO_BUMP_ABOVE_MSUN = 2.2


def rgb_bump_logl(mass_msun, feh):
    """Interim log L/L_sun of the RGB bump; NaN for tracks without a bump."""
    mass = np.asarray(mass_msun, dtype=float)
    logl = np.interp(mass, _BUMP_MASS, _BUMP_LOGL) + BUMP_FEH_SLOPE * np.asarray(feh, dtype=float)
    return np.where(mass <= NO_BUMP_ABOVE_MSUN, logl, np.nan)


def stage_index(eep, logl, bump_logl, phase_eeps):
    """Index into :data:`STAGES` for points on tracks.

    Parameters
    ----------
    eep : array_like
        Fractional EEP of each point.
    logl : array_like
        log L/L_sun at the point.
    bump_logl : array_like
        log L of the track's RGB bump (NaN when the track has none).
    phase_eeps : dict
        ``{"main_sequence": (start, stop), "subgiant": ..., "giant_branch": ...,
        "core_he_burning": ...}`` half-open EEP ranges of the grid.

    Returns
    -------
    ndarray of int
        Stage index (-1 where the EEP is outside every phase).
    """
    eep = np.asarray(eep, dtype=float)
    ms0, ms1 = phase_eeps["main_sequence"]
    sg0, sg1 = phase_eeps["subgiant"]
    gb0, gb1 = phase_eeps["giant_branch"]
    he0, he1 = phase_eeps["core_he_burning"]
    turnoff_start = ms0 + TURNOFF_FRACTION * (ms1 - ms0)
    bump = np.asarray(bump_logl, dtype=float)
    above_bump = np.where(np.isfinite(bump), np.asarray(logl, dtype=float) >= bump,
                          eep >= 0.5 * (gb0 + gb1))
    out = np.full(eep.shape, -1, dtype=int)
    out[(eep >= ms0) & (eep < turnoff_start)] = 0
    out[(eep >= turnoff_start) & (eep < sg0)] = 1
    out[(eep >= sg0) & (eep < sg1)] = 2
    giant = (eep >= gb0) & (eep < gb1)
    out[giant & ~above_bump] = 3
    out[giant & above_bump] = 4
    out[(eep >= he0) & (eep <= he1)] = 5
    return out


def stage_names(index):
    """Stage names for stage indices (empty string for -1)."""
    names = np.array(STAGES + ("",), dtype=object)
    return names[np.asarray(index)]


def stage_eep_range(stage: str, phase_eeps):
    """Half-open EEP range (start, stop) covered by a stage name; giant-branch stages
    return the whole giant branch (the bump splits it per track)."""
    ms0, ms1 = phase_eeps["main_sequence"]
    turnoff_start = ms0 + TURNOFF_FRACTION * (ms1 - ms0)
    ranges = {
        "main_sequence": (ms0, turnoff_start),
        "turnoff": (turnoff_start, phase_eeps["subgiant"][0]),
        "subgiant": phase_eeps["subgiant"],
        "lower_giant_branch": phase_eeps["giant_branch"],
        "upper_giant_branch": phase_eeps["giant_branch"],
        "red_clump": phase_eeps["core_he_burning"],
    }
    return ranges[stage]


def rgb_bump(grid, mass, z):
    """RGB bump of each (initial mass, Z) track: (fractional EEP, log L/L_sun).

    From the grid's envelope integration where the grid carries a bump
    (:func:`prioritize.stars.envelope.rgb_bump_position`: the core reaches the deepest
    point of first dredge-up); there, a track without a
    bump (helium ignites first) gives NaN.  A grid without envelopes falls back to the
    interim luminosity of :func:`rgb_bump_logl` (EEP NaN)."""
    from .tracks import BUMP_COLUMN, rgb_bump_eep, z_to_feh

    mass, z = np.broadcast_arrays(np.asarray(mass, dtype=float), np.asarray(z, dtype=float))
    if BUMP_COLUMN not in grid.data:
        return np.full(mass.shape, np.nan), rgb_bump_logl(mass, z_to_feh(z))
    eep = rgb_bump_eep(grid, mass, z)
    logl = grid.interpolate(mass, z, np.where(np.isfinite(eep), eep, 0.0), columns=["logl"])["logl"]
    return eep, np.where(np.isfinite(eep), logl, np.nan)
