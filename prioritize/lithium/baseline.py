"""The lithium baseline: what A(Li) stars like the candidate normally show.

This module holds the built-in *model prior*, used when the user gives no reference
population.  It is deliberately simple and weak — the output labels it
``baseline_source = "prior (model, not measured)"`` — and is built from the
population facts below (each value cites its source, or says "from memory").

1. **Main sequence**, as a function of the track's zero-age main-sequence Teff, its
   age (capped at the end of the main sequence) and [Fe/H]:

       A_MS = A_0 - D_pms(Teff_0) - c(Teff_0) sqrt(t / 1 Gyr) - D_dip(Teff_0, t, [Fe/H])

   A_0 = 3.26 (meteoritic; Asplund et al. 2009, ARA&A 47, 481); pre-main-sequence
   depletion D_pms growing towards cool stars (the Pleiades pattern, from memory);
   slow main-sequence depletion at rate c, calibrated so that a solar-Teff star reaches
   the Sun's A(Li) = 1.05 at 4.57 Gyr; and the mid-F lithium dip (Boesgaard &
   Tripicco 1986, ApJ 302, L49), a Gaussian in Teff_0 centred at 6600 K at solar
   metallicity and moving to cooler Teff at lower [Fe/H] (Balachandran 1995, ApJ 446,
   203; slope from memory), deepening over the first ~0.6 Gyr.

2. **First dredge-up.**  The layer that never burnt its lithium on the main sequence is
   the mass above the 2.5 MK isotherm at its shallowest (the track grid's
   ``m_li_preserved_msun``, minimised over the main sequence).  Once the convective
   envelope reaches below it,

       A(t) = A_MS(t_TAMS) + log10(M_preserved / M_cz,max(t)),

   a dilution of ~1.3-1.8 dex for 1-1.5 M_sun (standard models; Iben 1967, ApJ 147,
   624: a factor ~60 at 1 M_sun, from memory).  Observed post-dredge-up giants sit at
   or below the standard value: the distribution of first-ascent giants peaks below
   A(Li) ~ 0.8-1.0 (from memory) and only ~1% of giants exceed 1.5 dex (Brown et al. 1989, ApJS 71,
   293; Kumar et al. 2011, ApJ 730, L12), so the prior's post-dredge-up median is capped
   at :data:`POST_DREDGE_UP_CAP`, the cap applied in proportion to the dredge-up's
   progress (dilution / -1.5 dex) so that subgiants move smoothly towards it.

3. **Past the RGB bump** thermohaline mixing destroys surface lithium: Li falls by
   ≳ 1 dex between the bump and the tip in low-mass giants (Charbonnel & Zahn 2007,
   A&A 467, L15; the size is from memory).  The prior lowers A(Li) linearly in time
   from the bump to the tip by :data:`THERMOHALINE_DEPLETION_DEX`, and red-clump stars
   of tracks with a bump start from the tip value.  Most Li-rich giants are red-clump
   stars (Kumar et al. 2020, Nat. Astron. 4, 1059; Casey et al. 2019, ApJ 887, 73):
   lithium production near the helium flash is a confounder for engulfment in the
   clump.  The prior therefore gives clump stars that went through the flash a
   **Li-rich tail** (:data:`LI_RICH_TAIL_FRACTION`, :func:`tail_aware_significance`):
   a share f of normal clump stars lies above A(Li) = 1.5, falling off exponentially
   (:data:`LI_RICH_TAIL_SCALE_DEX`).  An enriched abundance is then only as
   significant as the chance that a normal clump star shows it, Gaussian core and
   tail together: an engulfment of ~1 M_J (A(Li) ~1) cannot stand out of the
   internally produced Li-rich giants (z <= 2.3), a brown dwarf that lifts A(Li) well
   above the tail can.

4. **Scatter by stage** (:data:`SCATTER_BY_STAGE_DEX`), wider in the Li dip; 0.3-0.5 dex
   at fixed Teff is the spread seen in clusters and field samples (common practice).

Below the detection limit an observed population is a set of upper limits; the
significance is then computed against the limit, not against the model's floor (see
``engine._lithium_at`` and :func:`censored_baseline`).
"""

from __future__ import annotations

import numpy as np

from ..catalog.status import STAGES
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
LI_DIP_CENTER_K = 6600.0          # at [Fe/H] = 0 (Boesgaard & Tripicco 1986; from memory)
LI_DIP_FEH_SLOPE_K = 300.0        # K per dex: cooler at lower [Fe/H] (Balachandran 1995; from memory)
LI_DIP_WIDTH_K = 170.0
LI_DIP_DEPTH_DEX = 2.0
LI_DIP_ONSET_GYR = 0.6

A_LI_FLOOR = -1.5                 # the model stops falling here (far below any detection limit)
PRESERVED_MASS_FRACTION = 0.02    # interim Li-preserving layer for grids without envelopes
POST_DREDGE_UP_CAP = 0.9          # median A(Li) of post-dredge-up giants at most (see module doc)
COMPLETE_DREDGE_UP_DEX = -1.5     # dilution of a completed first dredge-up (Iben 1967; from memory)
THERMOHALINE_DEPLETION_DEX = 1.0  # bump -> tip (Charbonnel & Zahn 2007; from memory)

# Intrinsic scatter of the prior by stage (dex; common practice, from memory): dwarfs
# and subgiants ~0.35 (rotation- and age-driven spread at fixed Teff), lower giant
# branch 0.3 (post-dredge-up abundances are set mostly by mass), wider above the bump
# and in the clump (thermohaline mixing of varying efficiency); with the capped median
# this puts ~1% of giants above the Li-rich line (tests/test_baseline.py).
SCATTER_BY_STAGE_DEX = {"main_sequence": 0.35, "turnoff": 0.35, "subgiant": 0.35,
                        "lower_giant_branch": 0.30, "upper_giant_branch": 0.35, "red_clump": 0.35}
LI_DIP_EXTRA_SCATTER_DEX = 0.4    # added in quadrature at the dip's centre (its floor is ragged)
LI_RICH_A_LI = 1.5                # the classic Li-rich line for giants (Iben 1967; Brown et al. 1989)

# Li-rich tail of normal red-clump stars, as a share of the clump above A(Li) = 1.5.
# About 1% of field giants are Li-rich (Brown et al. 1989, ApJS 71, 293; Casey et al.
# 2019, ApJ 887, 73) and most of them are red-clump stars (Kumar et al. 2020, Nat.
# Astron. 4, 1059), which points to production near the helium flash; we adopt 1% of
# clump stars (from memory; the published fractions range ~0.5-2%).  Only clump stars
# that went through the flash carry it: initial masses below ~2 M_sun at solar
# metallicity ignite helium degenerately (Girardi 1999, MNRAS 308, 818; the limit is
# from memory).  Upper-branch giants have no separate tail here: their Li-rich share
# is small and the prior's 0.35-dex scatter covers the spread.
LI_RICH_TAIL_FRACTION = {"red_clump": 0.01}
HELIUM_FLASH_MAX_MASS_MSUN = 2.0
# The tail falls off as exp(-(A - 1.5) / 0.5 dex): most Li-rich clump giants lie at
# A(Li) 1.5-2.5 and a few % above the meteoritic 3.3 ("super Li-rich"; Kumar et al.
# 2011, ApJ 730, L12; from memory).
LI_RICH_TAIL_SCALE_DEX = 0.5


def li_dip_center_k(feh):
    """Centre of the lithium dip in zero-age main-sequence Teff (K) at [Fe/H]."""
    return LI_DIP_CENTER_K + LI_DIP_FEH_SLOPE_K * np.nan_to_num(np.asarray(feh, dtype=float))


def _dip_shape(teff_zams_k, feh):
    return np.exp(-0.5 * ((np.asarray(teff_zams_k, dtype=float) - li_dip_center_k(feh))
                          / LI_DIP_WIDTH_K) ** 2)


def main_sequence_lithium(teff_zams_k, age_gyr, feh=0.0):
    """Prior A(Li) of a main-sequence star.

    Parameters
    ----------
    teff_zams_k : array_like
        Teff of the star's track at the zero-age main sequence (K).
    age_gyr : array_like
        Age in Gyr; pass the main-sequence lifetime for evolved stars (depletion on
        the main sequence stops when the star leaves it).
    feh : array_like
        [Fe/H] (dex); moves the lithium dip (see the module docstring).

    Returns
    -------
    ndarray
        A(Li) on the main sequence, floored at :data:`A_LI_FLOOR`.
    """
    teff = np.asarray(teff_zams_k, dtype=float)
    age = np.clip(np.asarray(age_gyr, dtype=float), 0.0, None)
    pms = np.interp(teff, _PMS_TEFF, _PMS_DEPLETION)
    ms = main_sequence_depletion_rate(teff) * np.sqrt(age)
    dip = LI_DIP_DEPTH_DEX * _dip_shape(teff, feh) * np.clip(age / LI_DIP_ONSET_GYR, 0.0, 1.0)
    return np.maximum(A_LI_METEORITIC - pms - ms - dip, A_LI_FLOOR)


def main_sequence_depletion_rate(teff_zams_k):
    """Rate c (dex per sqrt(Gyr)) of the slow main-sequence depletion, A = ... - c sqrt(t).

    The same star's accreted lithium is mixed down to the burning layer by the same
    process, so the lifetime of a main-sequence signature uses the e-folding time this
    rate implies (:func:`main_sequence_efolding_myr`)."""
    return np.interp(np.asarray(teff_zams_k, dtype=float), _MS_TEFF, _MS_RATE)


def main_sequence_efolding_myr(teff_zams_k, age_myr):
    """e-folding time (Myr) of surface lithium implied by the prior's main-sequence depletion.

    dA/dt = c / (2 sqrt(t)) dex per Gyr, so tau = log10(e) 2 sqrt(t) / c (Gyr); infinite
    where the prior does not deplete (c = 0)."""
    c = main_sequence_depletion_rate(teff_zams_k)
    t_gyr = np.maximum(np.asarray(age_myr, dtype=float), 1.0) / 1e3
    with np.errstate(divide="ignore"):
        return np.where(c > 0, np.log10(np.e) * 2.0 * np.sqrt(t_gyr) / c * 1e3, np.inf)


def li_preserving_mass_interim(mass_msun):
    """Mass (M_sun) of the outer layers that keep their lithium on the main sequence,
    for grids without the envelope integration: 2% of the mass (the standard dilution
    of 30-60x for post-dredge-up envelopes of ~0.7-0.85 M)."""
    return PRESERVED_MASS_FRACTION * np.asarray(mass_msun, dtype=float)


def dredge_up_dilution(m_cz_msun, m_preserved_msun):
    """log10 dilution factor (<= 0) once M_cz exceeds the lithium-preserving mass."""
    m_cz = np.asarray(m_cz_msun, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.minimum(0.0, np.log10(np.asarray(m_preserved_msun, dtype=float) / m_cz))


def thermohaline_depletion(age_myr, bump_age_myr, tip_age_myr, in_clump,
                           depletion_dex=THERMOHALINE_DEPLETION_DEX):
    """Depletion (dex, <= 0) by thermohaline mixing above the RGB bump.

    Linear in time from 0 at the bump to -``depletion_dex`` at the tip (default
    THERMOHALINE_DEPLETION_DEX; ``[baseline] thermohaline_depletion_dex`` in the
    config); the full amount in the red clump; zero on tracks without a bump (NaN bump
    age) and before the bump.  Model predictions of this depletion differ between
    evolution codes by orders of magnitude in Li (Lattanzio et al. 2015, MNRAS 446,
    2673), so it is a planning assumption; observed upper-RGB field giants sit at
    A(Li) <~ 0 (Gratton et al. 2000, A&A 354, 169)."""
    age = np.asarray(age_myr, dtype=float)
    bump = np.asarray(bump_age_myr, dtype=float)
    tip = np.asarray(tip_age_myr, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        frac = np.clip((age - bump) / (tip - bump), 0.0, 1.0)
    frac = np.where(np.asarray(in_clump, dtype=bool), 1.0, frac)
    return np.where(np.isfinite(bump) & np.isfinite(tip), -float(depletion_dex) * frac, 0.0)


def prior_baseline(teff_zams_k, feh, age_gyr, ms_lifetime_gyr, m_cz_max_msun, m_preserved_msun,
                   thermohaline_dex=0.0):
    """Prior A(Li) (median) at a point of a star's track.

    Parameters
    ----------
    teff_zams_k : array_like
        Zero-age main-sequence Teff of the track (K).
    feh : array_like
        [Fe/H] (dex).
    age_gyr, ms_lifetime_gyr : array_like
        Current age and the track's main-sequence lifetime (Gyr).
    m_cz_max_msun : array_like
        Deepest convective envelope reached so far (M_sun); dilution never reverses.
    m_preserved_msun : array_like
        Lithium-preserving mass (M_sun).
    thermohaline_dex : array_like
        Depletion above the bump (:func:`thermohaline_depletion`).

    Returns
    -------
    a_li, a_ms, dilution : ndarray
        Baseline A(Li), its main-sequence value and the first-dredge-up dilution (dex).
    """
    a_ms = main_sequence_lithium(teff_zams_k, np.minimum(age_gyr, ms_lifetime_gyr), feh)
    dilution = dredge_up_dilution(m_cz_max_msun, m_preserved_msun)
    a = a_ms + dilution
    # the observed post-dredge-up ceiling is approached as the dredge-up proceeds
    progress = np.clip(dilution / COMPLETE_DREDGE_UP_DEX, 0.0, 1.0)
    a = a - np.clip(a - POST_DREDGE_UP_CAP, 0.0, None) * progress + thermohaline_dex
    return np.maximum(a, A_LI_FLOOR), a_ms, dilution


def prior_scatter(stage_index, teff_zams_k, feh):
    """Intrinsic scatter (dex) of the prior by stage, widened in quadrature inside the
    lithium dip.

    ``stage_index`` indexes ``catalog.status.STAGES`` (as ``stars.evolution.stage_index``
    returns it); -1 (unknown) gets the dwarfs' 0.35 dex."""
    table = np.array([SCATTER_BY_STAGE_DEX[s] for s in STAGES] + [0.35])
    idx = np.asarray(stage_index, dtype=int)
    base = table[np.where(idx >= 0, idx, len(STAGES))]
    dwarf = (idx >= 0) & (idx <= STAGES.index("subgiant"))
    extra = np.where(dwarf, LI_DIP_EXTRA_SCATTER_DEX * _dip_shape(teff_zams_k, feh), 0.0)
    return np.hypot(base, extra)


def censored_baseline(a_base, a_detection_limit):
    """The baseline a measured enrichment is compared with.

    Where the population's lithium lies below the detection limit, the observed
    comparison sample is a set of upper limits at that limit: a candidate is enriched
    only if it stands above the *limit* by the scatter, so the comparison level is
    max(A_base, A_limit) (a censored comparison rather than one against the model's
    floor)."""
    lim = np.asarray(a_detection_limit, dtype=float)
    return np.where(np.isfinite(lim), np.fmax(a_base, lim), a_base)


def tail_fraction(stage_index, initial_mass_msun):
    """Share of normal stars of the stage in the Li-rich tail
    (:data:`LI_RICH_TAIL_FRACTION`): clump stars that went through the helium flash
    (initial mass below :data:`HELIUM_FLASH_MAX_MASS_MSUN`); 0 elsewhere."""
    table = np.array([LI_RICH_TAIL_FRACTION.get(s, 0.0) for s in STAGES] + [0.0])
    idx = np.asarray(stage_index, dtype=int)
    share = table[np.where(idx >= 0, idx, len(STAGES))]
    return np.where(np.asarray(initial_mass_msun, dtype=float) < HELIUM_FLASH_MAX_MASS_MSUN, share, 0.0)


def _log_tail_sf(a):
    """log P(A > a) within the Li-rich tail (1 below the Li-rich line)."""
    return -np.clip(np.asarray(a, dtype=float) - LI_RICH_A_LI, 0.0, None) / LI_RICH_TAIL_SCALE_DEX


def tail_aware_significance(a_new, a_compared, sigma, tail):
    """Significance (Gaussian-equivalent sigma) of ``a_new`` against a normal
    population that is a Gaussian core (``a_compared``, ``sigma``) plus a Li-rich tail
    holding a share ``tail`` of the stars:

        p = (1 - f) Q((a - a_c) / sigma) + f exp(-(a - 1.5)_+ / s),   z = Q^-1(p)

    with Q the Gaussian upper tail.  Where f = 0 this is exactly (a - a_c) / sigma.
    Computed in logarithms so that large z keep their precision."""
    from scipy.special import log_ndtr, ndtri_exp

    a_new, a_compared, sigma, tail = np.broadcast_arrays(
        *(np.asarray(v, dtype=float) for v in (a_new, a_compared, sigma, tail)))
    z = (a_new - a_compared) / sigma
    with np.errstate(divide="ignore", invalid="ignore"):
        log_p = np.logaddexp(np.log1p(-tail) + log_ndtr(-z),
                             np.log(tail) + _log_tail_sf(a_new))
        mixed = -ndtri_exp(np.minimum(log_p, 0.0))
    return np.where((tail > 0) & np.isfinite(z), mixed, z)


def abundance_for_significance(z_target, a_compared, sigma, tail, iterations=60):
    """The A(Li) whose :func:`tail_aware_significance` equals ``z_target`` (bisection;
    (a_c + z sigma) where there is no tail, higher where the tail dominates)."""
    a_compared, sigma, tail = np.broadcast_arrays(
        *(np.asarray(v, dtype=float) for v in (a_compared, sigma, tail)))
    lo = a_compared + z_target * sigma
    hi = np.fmax(lo, LI_RICH_A_LI) + 40.0 * LI_RICH_TAIL_SCALE_DEX
    for _ in range(iterations):
        mid = 0.5 * (lo + hi)
        below = tail_aware_significance(mid, a_compared, sigma, tail) < z_target
        lo, hi = np.where(below, mid, lo), np.where(below, hi, mid)
    return np.where(tail > 0, 0.5 * (lo + hi), a_compared + z_target * sigma)
