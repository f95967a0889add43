"""The lithium baseline: what A(Li) stars like the candidate normally show.

This module holds the built-in *model prior* (SCIENCE.md §17), used when the user
gives no reference population.  It is deliberately simple and weak — the output
labels it ``baseline_source = "prior"`` — and consists of two factors:

1. Main-sequence lithium as a function of the star's zero-age main-sequence Teff and
   its age (capped at the end of the main sequence):

       A_MS = A_0 - D_pms(Teff_0) - c(Teff_0) sqrt(t / 1 Gyr) - D_dip(Teff_0, t)

   with A_0 = 3.26 (meteoritic; Asplund et al. 2009), pre-main-sequence depletion
   D_pms growing towards cool stars, slow main-sequence depletion (rate c) calibrated
   so that a solar-Teff star reaches the Sun's A(Li) = 1.05 at 4.57 Gyr, and the mid-F
   lithium dip near Teff_0 = 6400-6800 K (Boesgaard & Tripicco 1986, ApJ 302, L49)
   deepening over the first ~0.6 Gyr.  The node values are read off the familiar
   open-cluster patterns (Pleiades, Hyades, M67) from memory; they are a prior, not
   a fit.

2. First-dredge-up dilution once the convective envelope reaches below the layer
   that kept its lithium:

       A(t) = A_MS + log10(M_preserved / M_cz(t))   when M_cz > M_preserved.

   M_preserved is the mass above the 2.5 MK isotherm on the main sequence (§16).
   Until the envelope integration supplies it, :func:`li_preserving_mass_interim`
   takes 2% of the stellar mass, which reproduces the standard first-dredge-up
   dilution of 30-60x (1.5-1.8 dex; Iben 1967, ApJ 147, 624) for the track's
   post-dredge-up envelope of ~0.7-0.85 M.

The prior's scatter is a configuration value (0.3-0.5 dex is the spread seen in
clusters at fixed Teff; common practice).
"""

from __future__ import annotations

import numpy as np

from ..constants import A_LI_METEORITIC

# Pre-main-sequence depletion (dex) at zero-age main-sequence Teff (K); from memory
# of the Pleiades pattern (A(Li) ~3.2 at 6000 K, ~2.9 at 5500 K, ~2.5 at 5000 K, ~1.6 at 4500 K).
_PMS_TEFF = np.array([3800.0, 4500.0, 5000.0, 5500.0, 6000.0])
_PMS_DEPLETION = np.array([3.0, 1.6, 0.75, 0.35, 0.0])

# Main-sequence depletion rate c (dex per sqrt(Gyr)).  At the Sun's Teff_0 (~5650 K on
# the ZAMS) c is fixed by A(Li, 4.57 Gyr) = 1.05; F stars above ~6200 K deplete little.
_MS_TEFF = np.array([4500.0, 5650.0, 6000.0, 6250.0])
_MS_RATE = np.array([1.0, 0.93, 0.45, 0.0])

# Lithium dip: Gaussian in Teff_0, full depth reached by ~0.6 Gyr (Hyades age).
LI_DIP_CENTER_K = 6600.0
LI_DIP_WIDTH_K = 170.0
LI_DIP_DEPTH_DEX = 2.0
LI_DIP_ONSET_GYR = 0.6

A_LI_FLOOR = -0.5            # below this nothing is measurable; the prior stops falling
PRESERVED_MASS_FRACTION = 0.02


def main_sequence_lithium(teff_zams_k, age_gyr):
    """Prior A(Li) of a main-sequence star.

    Parameters
    ----------
    teff_zams_k : array_like
        Teff of the star's track at the zero-age main sequence (K).
    age_gyr : array_like
        Age in Gyr; pass the main-sequence lifetime for evolved stars (depletion on
        the main sequence stops when the star leaves it).

    Returns
    -------
    ndarray
        A(Li) on the main sequence, floored at -0.5.
    """
    teff = np.asarray(teff_zams_k, dtype=float)
    age = np.clip(np.asarray(age_gyr, dtype=float), 0.0, None)
    pms = np.interp(teff, _PMS_TEFF, _PMS_DEPLETION)
    ms = np.interp(teff, _MS_TEFF, _MS_RATE) * np.sqrt(age)
    dip = (LI_DIP_DEPTH_DEX * np.exp(-0.5 * ((teff - LI_DIP_CENTER_K) / LI_DIP_WIDTH_K) ** 2)
           * np.clip(age / LI_DIP_ONSET_GYR, 0.0, 1.0))
    return np.maximum(A_LI_METEORITIC - pms - ms - dip, A_LI_FLOOR)


def li_preserving_mass_interim(mass_msun):
    """Mass (M_sun) of the outer layers that keep their lithium on the main sequence.

    Interim value 0.02 M until the grid carries the mass above the 2.5 MK isotherm
    from the envelope integration; see the module docstring for the calibration.
    """
    return PRESERVED_MASS_FRACTION * np.asarray(mass_msun, dtype=float)


def dredge_up_dilution(m_cz_msun, m_preserved_msun):
    """log10 dilution factor (<= 0) once M_cz exceeds the lithium-preserving mass."""
    m_cz = np.asarray(m_cz_msun, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.minimum(0.0, np.log10(np.asarray(m_preserved_msun, dtype=float) / m_cz))


def prior_baseline(teff_zams_k, age_gyr, ms_lifetime_gyr, m_cz_max_msun, m_preserved_msun,
                   scatter_dex):
    """Prior A(Li) and its scatter for a star at some point of its track.

    Parameters
    ----------
    teff_zams_k : array_like
        Zero-age main-sequence Teff of the track (K).
    age_gyr : array_like
        Current age (Gyr).
    ms_lifetime_gyr : array_like
        Main-sequence lifetime of the track (Gyr).
    m_cz_max_msun : array_like
        Deepest convective envelope reached so far (M_sun); dilution never reverses.
    m_preserved_msun : array_like
        Lithium-preserving mass (M_sun).
    scatter_dex : float
        Intrinsic scatter of the prior.

    Returns
    -------
    (ndarray, ndarray)
        Baseline A(Li) and its 1-sigma scatter (dex).
    """
    a_ms = main_sequence_lithium(teff_zams_k, np.minimum(age_gyr, ms_lifetime_gyr))
    a = np.maximum(a_ms + dredge_up_dilution(m_cz_max_msun, m_preserved_msun), A_LI_FLOOR)
    return a, np.full_like(a, scatter_dex, dtype=float)
