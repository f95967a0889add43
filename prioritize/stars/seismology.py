"""Mass, radius and surface gravity from global asteroseismic parameters.

The scaling relations tie the frequency of maximum oscillation power nu_max to the
surface gravity and the large frequency separation Delta nu to the mean density:

    nu_max / nu_max,sun = (M / M_sun) (R / R_sun)^-2 (Teff / Teff_sun)^-1/2
    Delta nu / (f_Dnu Delta nu_sun) = (M / M_sun)^1/2 (R / R_sun)^-3/2

so that

    M / M_sun = (nu_max / nu_max,sun)^3 (Delta nu / f_Dnu Delta nu_sun)^-4 (Teff / Teff_sun)^3/2
    R / R_sun = (nu_max / nu_max,sun) (Delta nu / f_Dnu Delta nu_sun)^-2 (Teff / Teff_sun)^1/2

with the solar references of Huber et al. (2011) and Teff_sun of IAU 2015 B3.  f_Dnu
is an optional correction factor on Delta nu (1 = the plain relations); published
model-based factors are of a few per cent and differ between the red giant branch and
the red clump.  The relations hold for solar-like oscillators (main-sequence stars
below ~6500 K, subgiants, red giants); they are planning estimates, good to a few per
cent in R and ~10 per cent in M for giants.  Functions take and return numpy arrays.

References
----------
Brown T. M., Gilliland R. L., Noyes R. W., Ramsey L. W. 1991, ApJ 368, 599 (nu_max and
the acoustic cut-off).  Kjeldsen H., Bedding T. R. 1995, A&A 293, 87 (the scaling
relations).  Huber D. et al. 2011, ApJ 743, 143 (solar nu_max 3090 +- 30 uHz,
Delta nu 135.1 +- 0.1 uHz).  Prsa A. et al. 2016, AJ 152, 41 (IAU 2015 Resolution B3:
Teff_sun = 5772 K).  Sharma S. et al. 2016, ApJ 822, 15 (corrections to Delta nu).
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

from ..constants import LOGG_SUN, TEFF_SUN_K

NUMAX_SUN_UHZ = 3090.0        # +- 30 uHz, Huber et al. 2011
DNU_SUN_UHZ = 135.1           # +- 0.1 uHz, Huber et al. 2011


class SeismicParameters(NamedTuple):
    """Scaling-relation results, each with its 1-sigma error (NaN where not computable)."""

    mass_msun: np.ndarray
    mass_err_msun: np.ndarray
    radius_rsun: np.ndarray
    radius_err_rsun: np.ndarray
    logg: np.ndarray
    logg_err: np.ndarray
    logl_lsun: np.ndarray
    logl_err: np.ndarray
    valid: np.ndarray


def scaling_relations(numax_uhz, dnu_uhz, teff_k, numax_err=0.0, dnu_err=0.0, teff_err=0.0,
                      f_dnu=1.0) -> SeismicParameters:
    """Mass, radius, log g and log L from nu_max, Delta nu and Teff.

    Errors are propagated to first order in the logarithms (independent inputs):
    (sigma_M/M)^2 = (3 s_numax)^2 + (4 s_dnu)^2 + (1.5 s_teff)^2 and
    (sigma_R/R)^2 = s_numax^2 + (2 s_dnu)^2 + (0.5 s_teff)^2 with s the fractional
    errors; log g = log g_sun + log(nu_max/nu_max,sun) + 0.5 log(Teff/Teff_sun);
    L = R^2 (Teff/Teff_sun)^4.

    Parameters
    ----------
    numax_uhz, dnu_uhz : array_like
        nu_max and Delta nu (micro-Hz), > 0.
    teff_k : array_like
        Effective temperature (K), > 0.
    numax_err, dnu_err, teff_err : array_like, optional
        1-sigma errors in the same units (NaN counts as 0).
    f_dnu : array_like, optional
        Correction factor on Delta nu (1 = none).

    Returns
    -------
    SeismicParameters
        NaN and ``valid`` False where an input is missing or not positive.
    """
    numax, dnu, teff, f = np.broadcast_arrays(*(np.asarray(x, dtype=float) for x in
                                                (numax_uhz, dnu_uhz, teff_k, f_dnu)))
    valid = (numax > 0) & (dnu > 0) & (teff > 0) & (f > 0)
    with np.errstate(invalid="ignore", divide="ignore"):
        x = numax / NUMAX_SUN_UHZ
        y = dnu / (f * DNU_SUN_UHZ)
        t = teff / TEFF_SUN_K
        mass = x**3 * y**-4 * t**1.5
        radius = x * y**-2 * t**0.5
        s_nu = np.nan_to_num(np.asarray(numax_err, dtype=float) / numax)
        s_dnu = np.nan_to_num(np.asarray(dnu_err, dtype=float) / dnu)
        s_t = np.nan_to_num(np.asarray(teff_err, dtype=float) / teff)
        mass_rel = np.sqrt((3 * s_nu) ** 2 + (4 * s_dnu) ** 2 + (1.5 * s_t) ** 2)
        radius_rel = np.sqrt(s_nu**2 + (2 * s_dnu) ** 2 + (0.5 * s_t) ** 2)
        logg = LOGG_SUN + np.log10(x) + 0.5 * np.log10(t)
        logg_err = np.sqrt(s_nu**2 + (0.5 * s_t) ** 2) / np.log(10)
        logl = 2 * np.log10(radius) + 4 * np.log10(t)
        logl_err = np.sqrt((2 * radius_rel) ** 2 + (4 * s_t) ** 2) / np.log(10)

    def masked(v):
        return np.where(valid, v, np.nan)

    return SeismicParameters(masked(mass), masked(mass * mass_rel), masked(radius), masked(radius * radius_rel),
                             masked(logg), masked(logg_err), masked(logl), masked(logl_err), valid)
