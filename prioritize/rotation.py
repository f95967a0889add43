"""Stellar rotation: measured v_eq, expected rotation, anomaly, spin-up by an engulfed planet.

Every function is a pure, vectorised numpy function (arrays in, arrays out); NaN in an
input means "not known" and gives NaN (or ``False`` / an empty note) in the output.
Values that are physically impossible (a negative radius, k² above 2/3, a limb-darkening
coefficient outside [0, 1]) raise :class:`~prioritize.errors.PrioritizeError` naming the
argument and the function.  All results are planning estimates.

The chain and the column names it fills (units in the name):

1. Measured rotation: ``veq_kms`` = 2πR/P (:func:`equatorial_velocity_kms`); whether
   v sin i exceeds it beyond the errors (:func:`vsini_consistency` → ``vsini_exceeds_veq``,
   ``vsini_note``); sin i (:func:`sin_i_estimate`).
2. Expected rotation and its 1σ spread: gyrochronology for dwarfs
   (:func:`gyro_period_barnes2007`, :func:`gyro_period_mh08`), the cluster's own
   sequence (:func:`fit_cluster_sequence`), or angular-momentum conservation from the
   main-sequence rotation typical of the mass (:func:`ms_rotation_velocity_kms`,
   :func:`expected_veq_conserved`); :func:`expected_rotation` chooses → ``veq_expected_kms``,
   ``veq_expected_spread_kms``, ``rot_expect_source``.
3. Anomaly: ``rot_anomaly_sigma`` (:func:`rotation_anomaly_sigma`), ``rapid_rotator``
   (:func:`rapid_rotator_flag`).
4. Spin-up by an engulfed planet: :func:`spin_up_velocity_kms` and its exact inverse
   :func:`planet_mass_for_spin_mjup` → ``m_planet_spin_mjup``; comparison with the
   lithium minimum planet (:func:`spin_lithium_consistency` → ``spin_li_consistency``).
5. Evidence: ``rotation_likelihood_ratio`` and ``rot_anomaly_sigma`` (:func:`rotation_evidence`).
6. Line width: ``rot_fwhm_angstrom`` (:func:`rotational_fwhm_angstrom`) for the
   observing-cost stage.

References
----------
Barnes 2007, ApJ 669, 1167; Mamajek & Hillenbrand 2008, ApJ 687, 1264; Carlberg et al.
2009, ApJ 700, 832 and 2011, ApJ 732, 39; Lau et al. 2025, A&A,
doi:10.1051/0004-6361/202452081; Sussholz, Mazeh & Faigler 2026, arXiv:2601.20008
(check values in tests/test_rotation.py).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import NamedTuple

import numpy as np
from scipy.optimize import least_squares
from scipy.stats import norm

from .catalog.status import STAGE_ALIASES, STAGES
from .constants import C_LIGHT_CGS, G_CGS, M_JUP_MSUN, M_SUN_G, R_SUN_CM
from .errors import ModelRangeError, PrioritizeError

SECONDS_PER_DAY = 86400.0                    # exact, by definition
R_SUN_KM = R_SUN_CM / 1e5                    # IAU 2015 nominal solar radius
C_KMS = C_LIGHT_CGS / 1e5                   # speed of light (km/s)

# Dimensionless moment of inertia k² = I/(M R²) [from memory; the two
# polytropes are re-derived from the Lane-Emden equation in tests/test_rotation.py].
K2_SUN = 0.070
K2_POLYTROPE_N3 = 0.075                      # radiative star (Eddington standard model)
K2_POLYTROPE_N15 = 0.205                     # fully convective star or envelope
K2_MAX = 2.0 / 3.0                           # thin spherical shell: the largest possible k²

# Gyrochronology, P = a [(B-V)_0 - c]^b t^n, t in Myr (Barnes 2007; Mamajek & Hillenbrand 2008).
BARNES2007 = {"a": (0.7725, 0.011), "b": (0.601, 0.024), "c": (0.4, 0.0), "n": (0.5189, 0.0070)}
BARNES2007_BV_RANGE = (0.4, 1.6)
MH08 = {"a": (0.407, 0.021), "b": (0.325, 0.024), "c": (0.495, 0.010), "n": (0.566, 0.008)}
MH08_BV_RANGE = (0.5, 0.9)
# Star-to-star scatter about a gyrochrone at fixed colour and age: ~10% in period is
# the usual allowance (from memory; common practice for clusters older than ~0.5 Gyr).
GYRO_INTRINSIC_SCATTER = 0.10

# Giants: v sin i >= 10 km/s is the traditional threshold for anomalous rotation
# (Carlberg et al. 2011, ApJ 732, 39: 2.2% of ~1300 K giants; Patton et al.,
# arXiv:2303.08151, "the traditional threshold" [both checked]).
GIANT_RAPID_VSINI_KMS = 10.0
RAPID_ROTATOR_FRACTION_GIANTS = 0.022        # Carlberg et al. 2011 [checked]
GIANT_STAGES = ("lower_giant_branch", "upper_giant_branch", "red_clump")
GYRO_STAGES = ("main_sequence", "turnoff")

# Typical main-sequence equatorial velocity (km/s) and its fractional 1σ spread, by mass,
# for the rotation a star carries off the main sequence.  Below the Kraft break the
# values are Barnes (2007) at the terminal-age main sequence (computed with B-V, t_MS
# and R_TAMS from memory: 1.0 Msun -> P ~ 40 d, R ~ 1.3 -> ~1.7 km/s; 1.2 Msun ->
# P ~ 17.5 d, R ~ 1.7 -> ~5 km/s).  The break itself, ~1.3 Msun / 6500 K, and ~100 km/s
# by 7000 K (~1.6 Msun) follow Sussholz, Mazeh & Faigler (2026, arXiv:2601.20008,
# Gaia DR3 line broadening) [checked].  The A-star values (160-210 km/s, A5-B8) are the
# handbook class-V means (Allen's Astrophysical Quantities, 4th ed., Cox 2000) [from
# memory]; A-star distributions are broad (Royer et al. 2007, A&A 463, 671), hence
# spreads of 40-60%.
_MS_MASS = np.array([0.7, 0.9, 1.0, 1.1, 1.2, 1.3, 1.4, 1.5, 1.6, 1.8, 2.0, 2.5, 3.0, 3.5])
_MS_VEQ = np.array([1.0, 1.3, 1.7, 3.0, 5.0, 10.0, 40.0, 70.0, 100.0, 130.0, 160.0, 190.0,
                    200.0, 210.0])
_MS_SPREAD = np.array([0.4, 0.4, 0.3, 0.3, 0.4, 0.6, 0.6, 0.5, 0.5, 0.4, 0.4, 0.4, 0.4, 0.4])

# The same population keyed by the observable instead of the model mass (dwarfs from
# 6000 K up; a model's mass at fixed Teff differs between track sets by ~0.1 Msun, which
# moves the mass table by a factor 2 through the break): mean v_eq of class V stars by
# Teff, ~10 km/s at F8 (6200 K), ~25 km/s at F5 (6500 K), ~100 km/s by 7000 K (Kraft
# 1967, ApJ 150, 551 [from memory]; Sussholz, Mazeh & Faigler 2026 [checked] for the
# break and 7000 K) and the A-star means above.
_MS_TEFF = np.array([6000.0, 6200.0, 6400.0, 6550.0, 6750.0, 7000.0, 7500.0, 8500.0, 10000.0,
                     12000.0, 14000.0])
_MS_TEFF_VEQ = np.array([4.0, 8.0, 14.0, 25.0, 55.0, 100.0, 130.0, 160.0, 190.0, 200.0, 210.0])
_MS_TEFF_SPREAD = np.array([0.5, 0.6, 0.6, 0.6, 0.6, 0.5, 0.5, 0.4, 0.4, 0.4, 0.4])

# Rotation and lithium agree when their planet masses are within this factor.
SPIN_LI_AGREEMENT_FACTOR = 3.0


# --------------------------------------------------------------------------- helpers

def _array(name, func, values):
    """``values`` as a float array; non-numeric input is a PrioritizeError."""
    try:
        return np.asarray(values, dtype=float)
    except (TypeError, ValueError) as exc:
        raise PrioritizeError(f"{func}: {name} must be numeric (got {values!r}); "
                              "pass numbers or NaN for unknown values") from exc


def _positive(name, func, values):
    """``values`` as a float array whose finite entries are all > 0."""
    arr = _array(name, func, values)
    bad = np.isfinite(arr) & (arr <= 0)
    if bad.any():
        index = np.flatnonzero(bad.ravel())[0]
        raise PrioritizeError(f"{func}: {name} must be > 0, got {arr.ravel()[index]!r} "
                              f"(element {index}); use NaN for an unknown value")
    return arr


def _error(name, func, values, like):
    """An uncertainty array (>= 0); ``None`` means zero."""
    if values is None:
        return np.zeros_like(like)
    arr = _array(name, func, values)
    bad = np.isfinite(arr) & (arr < 0)
    if bad.any():
        raise PrioritizeError(f"{func}: {name} must be >= 0 (an uncertainty); "
                              f"got {arr.ravel()[np.flatnonzero(bad.ravel())[0]]!r}")
    return np.nan_to_num(arr, nan=0.0)


def _k2(name, func, values):
    """k² = I/(M R²) in (0, 2/3]."""
    arr = _positive(name, func, values)
    if (np.isfinite(arr) & (arr > K2_MAX)).any():
        raise PrioritizeError(f"{func}: {name} = I/(M R^2) cannot exceed 2/3 (a thin shell); "
                              "typical values are 0.07-0.2 (from memory)")
    return arr


def _canonical_stage(stage, func):
    """Stage names mapped to the canonical list of catalog.status.STAGES ('' if missing)."""
    flat = np.asarray(stage, dtype=object)
    out = np.empty(flat.shape, dtype=object)
    for index, value in np.ndenumerate(flat):
        if value is None or (isinstance(value, float) and np.isnan(value)) or value == "":
            out[index] = ""
            continue
        key = str(value).strip().lower()
        key = STAGE_ALIASES.get(key, key)
        if key not in STAGES:
            raise PrioritizeError(f"{func}: unknown stage {value!r}; allowed: {', '.join(STAGES)} "
                                  "(or a common alias such as 'rgb', 'clump', 'ms')")
        out[index] = key
    return out


# ------------------------------------------------------------------ measured rotation

def equatorial_velocity_kms(radius_rsun, prot_d):
    """Equatorial velocity of a rigidly rotating star from its radius and period.

    v_eq = 2π R / P_rot.

    Parameters
    ----------
    radius_rsun : array_like
        Stellar radius (R_sun, IAU 2015 nominal 695,700 km).
    prot_d : array_like
        Surface rotation period (days), e.g. from spot modulation.

    Returns
    -------
    ndarray
        v_eq in km/s.  The spot period is that of the spots' latitude; with solar-like
        differential rotation the equatorial value is a few per cent higher.

    References
    ----------
    Gray, *The Observation and Analysis of Stellar Photospheres*, 3rd ed. (2005), ch. 18.
    """
    func = "equatorial_velocity_kms"
    radius = _positive("radius_rsun", func, radius_rsun)
    period = _positive("prot_d", func, prot_d)
    return 2.0 * np.pi * radius * R_SUN_KM / (period * SECONDS_PER_DAY)


def _veq_with_error(func, radius_rsun, radius_err, prot_d, prot_err):
    radius = _positive("radius_rsun", func, radius_rsun)
    period = _positive("prot_d", func, prot_d)
    veq = equatorial_velocity_kms(radius, period)
    rel = np.hypot(_error("radius_err", func, radius_err, radius) / radius,
                   _error("prot_err", func, prot_err, period) / period)
    return veq, veq * rel


def vsini_consistency(vsini_kms, vsini_err, radius_rsun, radius_err, prot_d, prot_err,
                      n_sigma=2.0):
    """Flag stars whose v sin i exceeds 2πR/P beyond the errors.

    Since sin i <= 1, a star is inconsistent when

        v sin i - v_eq > n_sigma * sqrt(σ_vsini² + σ_veq²),
        σ_veq = v_eq sqrt((σ_R/R)² + (σ_P/P)²).

    Causes: a wrong radius (e.g. an unresolved binary's photometry), a period that is
    a harmonic or belongs to a companion, or a v sin i inflated by macroturbulence or
    an unresolved double-lined spectrum.

    Parameters
    ----------
    vsini_kms, vsini_err : array_like
        Projected rotation velocity and its 1σ error (km/s); error None means 0.
    radius_rsun, radius_err : array_like
        Radius and 1σ error (R_sun).
    prot_d, prot_err : array_like
        Rotation period and 1σ error (days).
    n_sigma : float
        How many combined sigmas count as inconsistent (default 2).

    Returns
    -------
    exceeds : ndarray of bool
        True where v sin i exceeds v_eq beyond ``n_sigma``; False where consistent or
        where an input is missing (not checked).
    note : ndarray of str
        Why the row is flagged; empty where it is not.

    References
    ----------
    Gray (2005) ch. 18 for v sin i.
    """
    func = "vsini_consistency"
    if not np.isfinite(n_sigma) or n_sigma <= 0:
        raise PrioritizeError(f"{func}: n_sigma must be > 0, got {n_sigma!r}")
    vsini = _array("vsini_kms", func, vsini_kms)
    if (np.isfinite(vsini) & (vsini < 0)).any():
        raise PrioritizeError(f"{func}: vsini_kms must be >= 0")
    veq, veq_err = _veq_with_error(func, radius_rsun, radius_err, prot_d, prot_err)
    vsini, veq, veq_err = np.broadcast_arrays(vsini, veq, veq_err)
    sigma = np.hypot(_error("vsini_err", func, vsini_err, vsini), veq_err)
    excess = vsini - veq
    with np.errstate(divide="ignore", invalid="ignore"):
        z = np.where(sigma > 0, excess / sigma, np.where(excess > 0, np.inf, 0.0))
    exceeds = np.isfinite(excess) & (z > n_sigma)
    note = np.full(exceeds.shape, "", dtype=object)
    for index in zip(*np.nonzero(exceeds)):
        note[index] = (f"v sin i {vsini[index]:.1f} km/s exceeds 2piR/P = {veq[index]:.1f} km/s "
                       f"({z[index]:.1f} sigma): check radius, period (harmonic?) or binarity")
    return exceeds, note


def sin_i_estimate(vsini_kms, radius_rsun, prot_d, vsini_err=None, radius_err=None,
                   prot_err=None):
    """Inclination sine from v sin i and v_eq = 2πR/P.

    sin i = v sin i / v_eq, with σ(sin i) = sin i sqrt((σ_vsini/vsini)² + (σ_veq/v_eq)²)
    (first-order propagation, independent errors; written as
    sqrt((σ_vsini/v_eq)² + (sin i σ_veq/v_eq)²) so that v sin i = 0 works).

    Parameters
    ----------
    vsini_kms : array_like
        Projected rotation velocity (km/s).
    radius_rsun : array_like
        Radius (R_sun).
    prot_d : array_like
        Rotation period (days).
    vsini_err, radius_err, prot_err : array_like, optional
        1σ errors in the same units; None means 0.

    Returns
    -------
    sin_i, sin_i_err : ndarray
        Not clipped at 1: values above 1 show the same inconsistency as
        :func:`vsini_consistency`.  The propagated error is unreliable when v sin i is
        within ~2σ of zero (the ratio distribution is then far from Gaussian).

    References
    ----------
    Gray (2005) ch. 18.
    """
    func = "sin_i_estimate"
    vsini = _array("vsini_kms", func, vsini_kms)
    veq, veq_err = _veq_with_error(func, radius_rsun, radius_err, prot_d, prot_err)
    sin_i = vsini / veq
    vsini_sigma = _error("vsini_err", func, vsini_err, vsini)
    return sin_i, np.hypot(vsini_sigma / veq, sin_i * veq_err / veq)


# ------------------------------------------------------------------ gyrochronology

def _gyro_period(func, coefficients, bv_range, b_v0, age_myr, intrinsic_scatter):
    bv = _array("b_v0", func, b_v0)
    age = _positive("age_myr", func, age_myr)
    if not 0 <= intrinsic_scatter < 1:
        raise PrioritizeError(f"{func}: intrinsic_scatter is a fraction of the period "
                              f"in [0, 1), got {intrinsic_scatter!r}")
    (a, sa), (b, sb), (c, sc), (n, sn) = (coefficients[k] for k in "abcn")
    bv, age = np.broadcast_arrays(bv, age)
    inside = (bv >= bv_range[0]) & (bv > c) & (bv <= bv_range[1])
    x = np.where(inside, bv - c, np.nan)
    period = a * x ** b * age ** n
    var_ln = ((sa / a) ** 2 + (np.log(x) * sb) ** 2 + (b * sc / x) ** 2
              + (np.log(age) * sn) ** 2 + intrinsic_scatter ** 2)
    return period, period * np.sqrt(var_ln)


def gyro_period_barnes2007(b_v0, age_myr, intrinsic_scatter=GYRO_INTRINSIC_SCATTER):
    """Rotation period of a main-sequence dwarf from Barnes (2007) gyrochronology.

    P = a [(B-V)_0 - 0.4]^b t^n, t in Myr,
    a = 0.7725 ± 0.011, b = 0.601 ± 0.024, n = 0.5189 ± 0.0070.

    The 1σ spread combines the coefficient errors (treated as independent, which
    overstates it slightly because the fitted coefficients are correlated) with an
    intrinsic scatter:

        (σ_P/P)² = (σ_a/a)² + (ln x σ_b)² + (ln t σ_n)² + s²,   x = (B-V)_0 - 0.4.

    Parameters
    ----------
    b_v0 : array_like
        Dereddened B-V (mag).  Valid 0.4 < (B-V)_0 <= 1.6; NaN outside.
    age_myr : array_like
        Age (Myr).  The relation describes the slow-rotator ("I") sequence of stars
        older than ~0.1-0.5 Gyr on the main sequence; it does not apply to evolved stars.
    intrinsic_scatter : float
        Fractional star-to-star scatter s (default 0.10, common practice [from memory]).

    Returns
    -------
    period_d, spread_d : ndarray
        Period and its 1σ spread (days); planning estimates.

    References
    ----------
    Barnes, S. A. 2007, ApJ 669, 1167, eq. 3.
    """
    return _gyro_period("gyro_period_barnes2007", BARNES2007, BARNES2007_BV_RANGE, b_v0,
                        age_myr, intrinsic_scatter)


def gyro_period_mh08(b_v0, age_myr, intrinsic_scatter=GYRO_INTRINSIC_SCATTER):
    """Rotation period of a main-sequence dwarf from Mamajek & Hillenbrand (2008).

    P = a [(B-V)_0 - c]^b t^n, t in Myr,
    a = 0.407 ± 0.021, b = 0.325 ± 0.024, c = 0.495 ± 0.010, n = 0.566 ± 0.008.

    Spread as in :func:`gyro_period_barnes2007`, with the extra term (b σ_c / x)² for
    the colour offset, x = (B-V)_0 - c.

    Parameters
    ----------
    b_v0 : array_like
        Dereddened B-V (mag).  Valid 0.5 <= (B-V)_0 <= 0.9 (the calibrated F7-K2
        range); NaN outside.
    age_myr : array_like
        Age (Myr); main-sequence dwarfs older than ~0.1 Gyr.
    intrinsic_scatter : float
        Fractional star-to-star scatter (default 0.10 [from memory]).

    Returns
    -------
    period_d, spread_d : ndarray
        Period and its 1σ spread (days); planning estimates.

    References
    ----------
    Mamajek, E. E. & Hillenbrand, L. A. 2008, ApJ 687, 1264.
    """
    return _gyro_period("gyro_period_mh08", MH08, MH08_BV_RANGE, b_v0, age_myr,
                        intrinsic_scatter)


GYRO_RELATIONS = {"barnes2007": gyro_period_barnes2007, "mh08": gyro_period_mh08}


# ------------------------------------------------------- angular-momentum conservation

def ms_rotation_velocity_kms(mass_msun):
    """Typical main-sequence equatorial velocity by mass, with its spread.

    Interpolated (ln v linear in mass) in a table of the velocity a star carries off
    the main sequence: ~1-5 km/s below the Kraft break (spun down by magnetic braking;
    Barnes 2007 evaluated at the terminal-age main sequence), a steep rise through the
    break at ~1.3 M_sun / 6500 K to ~100 km/s at ~1.6 M_sun (Sussholz, Mazeh & Faigler
    2026 [checked]), and 160-210 km/s for A and late-B stars (handbook class-V means
    [from memory]).

    Parameters
    ----------
    mass_msun : array_like
        Stellar mass (M_sun).  Valid 0.7-3.5 M_sun; NaN outside.

    Returns
    -------
    veq_kms, spread_kms : ndarray
        Typical v_eq and its 1σ star-to-star spread (km/s; 30-60% of v_eq).  A
        population value, not a prediction for one star.

    References
    ----------
    Barnes, S. A. 2007, ApJ 669, 1167; Sussholz, A., Mazeh, T. & Faigler, S. 2026,
    arXiv:2601.20008; Cox, A. N. (ed.) 2000, *Allen's Astrophysical Quantities*, 4th ed.;
    Royer, F., Zorec, J. & Gómez, A. E. 2007, A&A 463, 671; Kraft, R. P. 1967, ApJ 150, 551.
    """
    mass = _positive("mass_msun", "ms_rotation_velocity_kms", mass_msun)
    inside = (mass >= _MS_MASS[0]) & (mass <= _MS_MASS[-1])
    clipped = np.clip(mass, _MS_MASS[0], _MS_MASS[-1])
    veq = np.exp(np.interp(clipped, _MS_MASS, np.log(_MS_VEQ)))
    spread = veq * np.interp(clipped, _MS_MASS, _MS_SPREAD)
    return np.where(inside, veq, np.nan), np.where(inside, spread, np.nan)


def ms_rotation_velocity_from_teff_kms(teff_k):
    """Typical main-sequence v_eq by Teff (km/s) and its spread, 6000-14000 K (NaN
    outside): the observable-keyed form of :func:`ms_rotation_velocity_kms` for dwarfs
    near and above the Kraft break (table ``_MS_TEFF``; Kraft 1967, ApJ 150, 551;
    Sussholz, Mazeh & Faigler 2026).  A population value, not a prediction for one star."""
    teff = np.asarray(teff_k, dtype=float)
    inside = (teff >= _MS_TEFF[0]) & (teff <= _MS_TEFF[-1])
    clipped = np.clip(np.nan_to_num(teff, nan=_MS_TEFF[0]), _MS_TEFF[0], _MS_TEFF[-1])
    veq = np.exp(np.interp(clipped, _MS_TEFF, np.log(_MS_TEFF_VEQ)))
    spread = veq * np.interp(clipped, _MS_TEFF, _MS_TEFF_SPREAD)
    return np.where(inside, veq, np.nan), np.where(inside, spread, np.nan)


# ------------------------------------------------------------------- cluster sequence

@dataclass(frozen=True)
class ClusterRotationSequence:
    """A cluster's own rotation sequence, ln P as a polynomial in colour.

    Attributes
    ----------
    coefficients : ndarray
        Polynomial coefficients of ln P (highest power first) in the scaled colour
        u = (color - color_center) / color_halfwidth.
    color_center, color_halfwidth : float
        The scaling.
    color_min, color_max : float
        Colour range of the stars used; :meth:`predict` gives NaN outside it.
    ln_period_scatter : float
        Robust 1σ scatter of ln P about the sequence, 1.4826 × MAD of the residuals.
    n_stars : int
        Stars used in the fit (finite values, positive weight).
    n_clipped : int
        Stars given no weight in the final fit (beyond ``clip_sigma``).
    """

    coefficients: np.ndarray
    color_center: float
    color_halfwidth: float
    color_min: float
    color_max: float
    ln_period_scatter: float
    n_stars: int
    n_clipped: int

    def predict(self, color):
        """Expected period and its 1σ spread at ``color``.

        Returns
        -------
        period_d, spread_d : ndarray
            Period (days) and spread = P × ``ln_period_scatter`` (days, first order in
            the log scatter); NaN outside [color_min, color_max] (no extrapolation).
        """
        x = _array("color", "ClusterRotationSequence.predict", color)
        inside = (x >= self.color_min) & (x <= self.color_max)
        period = np.exp(np.polyval(self.coefficients,
                                   (x - self.color_center) / self.color_halfwidth))
        period = np.where(inside, period, np.nan)
        return period, period * self.ln_period_scatter


def fit_cluster_sequence(color, prot_d, weights=None, degree=2, clip_sigma=4.0,
                         max_iterations=10):
    """Robust fit of a cluster's rotation sequence, period against colour.

    ln P = polynomial(color) of ``degree``, fitted with a soft-L1 (pseudo-Huber) loss
    whose scale is the robust scatter of the residuals, re-estimated each iteration;
    stars beyond ``clip_sigma`` robust sigmas are then given zero weight and the fit is
    repeated until the clipped set stops changing.  Rapid rotators (the candidates)
    therefore do not drag the sequence.  The scatter is 1.4826 × MAD of the ln P
    residuals of all used stars (unweighted, clipped stars included), so a handful of
    outliers barely widens it.

    Parameters
    ----------
    color : array_like
        Dereddened colour of each member (any colour, e.g. (B-V)_0 or BP-RP; mag).
    prot_d : array_like
        Rotation periods (days); non-finite or non-positive entries are skipped.
    weights : array_like, optional
        Non-negative weights (e.g. membership probability); 0 excludes a star.
    degree : int
        Polynomial degree in colour (default 2; 3 for sequences that span the
        steep blue end).
    clip_sigma : float
        Residuals (in robust sigmas) beyond which a star gets no weight (default 4).
    max_iterations : int
        Limit on re-weighting iterations.

    Returns
    -------
    ClusterRotationSequence
        With ``predict(color) -> (period_d, spread_d)``.

    Raises
    ------
    ModelRangeError
        Fewer than 3 × (degree + 1) usable stars, or no spread in colour.

    References
    ----------
    Huber, P. J. 1964, Ann. Math. Stat. 35, 73 (robust loss); scipy.optimize.least_squares
    (loss="soft_l1"); Rousseeuw & Croux 1993, JASA 88, 1273 (MAD scale, 1.4826).
    """
    func = "fit_cluster_sequence"
    x = _array("color", func, color).ravel()
    period = _array("prot_d", func, prot_d).ravel()
    if x.shape != period.shape:
        raise PrioritizeError(f"{func}: color and prot_d must have the same length "
                              f"({x.size} vs {period.size})")
    w = (np.ones_like(x) if weights is None
         else np.broadcast_to(_array("weights", func, weights), x.shape).ravel())
    if (w < 0).any():
        raise PrioritizeError(f"{func}: weights must be >= 0")
    if int(degree) != degree or degree < 0:
        raise PrioritizeError(f"{func}: degree must be a non-negative integer, got {degree!r}")
    use = np.isfinite(x) & np.isfinite(period) & (period > 0) & np.isfinite(w) & (w > 0)
    x, y, w = x[use], np.log(period[use]), w[use]
    need = 3 * (degree + 1)
    if x.size < need:
        raise ModelRangeError(f"{func}: {x.size} usable stars; a degree-{degree} sequence "
                              f"needs at least {need} (lower the degree or add members)")
    center, halfwidth = 0.5 * (x.max() + x.min()), 0.5 * (x.max() - x.min())
    if halfwidth <= 0:
        raise ModelRangeError(f"{func}: all stars have the same colour; cannot fit a sequence")
    u = (x - center) / halfwidth
    sqrt_w = np.sqrt(w)

    def robust_scale(residuals):
        return max(1.4826 * np.median(np.abs(residuals - np.median(residuals))), 1e-6)

    coefficients = np.polyfit(u, y, degree, w=sqrt_w)
    keep = np.ones(x.size, dtype=bool)
    for _ in range(max_iterations):
        scale = robust_scale(y - np.polyval(coefficients, u))
        fit_w = np.where(keep, sqrt_w, 0.0)
        result = least_squares(lambda p: fit_w * (np.polyval(p, u) - y), coefficients,
                               loss="soft_l1", f_scale=scale)
        coefficients = result.x
        residuals = y - np.polyval(coefficients, u)
        new_keep = np.abs(residuals) <= clip_sigma * robust_scale(residuals)
        if np.array_equal(new_keep, keep):
            break
        keep = new_keep
    residuals = y - np.polyval(coefficients, u)
    return ClusterRotationSequence(coefficients=coefficients, color_center=float(center),
                                   color_halfwidth=float(halfwidth), color_min=float(x.min()),
                                   color_max=float(x.max()),
                                   ln_period_scatter=float(robust_scale(residuals)),
                                   n_stars=int(x.size), n_clipped=int((~keep).sum()))


# ------------------------------------------------------------------------ anomaly

def rotation_anomaly_sigma(observed, observed_err, expected, expected_spread,
                           quantity="velocity"):
    """How many sigmas faster than expected a star rotates (positive = faster).

    quantity = "velocity" (v_eq or v sin i, km/s), linear:
        z = (v_obs - v_exp) / sqrt(σ_obs² + σ_exp²)
    quantity = "period" (days), in ln P because period scatter is multiplicative:
        z = (ln P_exp - ln P_obs) / sqrt((σ_obs/P_obs)² + (σ_exp/P_exp)²)

    A v sin i used as ``observed`` gives a lower bound on the anomaly (sin i <= 1).

    Parameters
    ----------
    observed, observed_err : array_like
        Measured value and 1σ error (None means 0).
    expected, expected_spread : array_like
        Expected value and its 1σ spread (e.g. from :func:`expected_rotation` or
        :meth:`ClusterRotationSequence.predict`).
    quantity : {"velocity", "period"}

    Returns
    -------
    ndarray
        The anomaly in sigma; NaN where an input is missing or the combined sigma is 0.

    References
    ----------
    Carlberg et al. 2011, ApJ 732, 39 (rotation as an engulfment tracer).
    """
    func = "rotation_anomaly_sigma"
    obs = _array("observed", func, observed)
    exp = _array("expected", func, expected)
    obs_err = _error("observed_err", func, observed_err, obs)
    exp_spread = _array("expected_spread", func, expected_spread)
    with np.errstate(divide="ignore", invalid="ignore"):
        if quantity == "velocity":
            num, den = obs - exp, np.hypot(obs_err, exp_spread)
        elif quantity == "period":
            obs, exp = _positive("observed", func, obs), _positive("expected", func, exp)
            num, den = np.log(exp) - np.log(obs), np.hypot(obs_err / obs, exp_spread / exp)
        else:
            raise PrioritizeError(f"{func}: quantity must be 'velocity' or 'period', "
                                  f"got {quantity!r}")
        return np.where(den > 0, num / den, np.nan)


# ----------------------------------------------------------- spin-up by engulfment

def _spin_lever(func, mass_msun, radius_rsun, m_spun_msun, k2, a_rsun):
    """√(G M a) / (k² M_spun R) in cgs: v_eq (cm/s) per gram of planet."""
    mass = _positive("mass_msun", func, mass_msun)
    radius = _positive("radius_rsun", func, radius_rsun)
    spun = _positive("m_spun_msun", func, m_spun_msun)
    if (spun > mass * (1 + 1e-12)).any():
        raise PrioritizeError(f"{func}: m_spun_msun (the spun-up region, e.g. the convective "
                              "envelope) cannot exceed the stellar mass")
    a = radius if a_rsun is None else _positive("a_rsun", func, a_rsun)
    k2 = _k2("k2", func, k2)
    return (np.sqrt(G_CGS * mass * M_SUN_G * a * R_SUN_CM)
            / (k2 * spun * M_SUN_G * radius * R_SUN_CM))


def spin_up_velocity_kms(m_planet_mjup, mass_msun, radius_rsun, m_spun_msun, k2, a_rsun=None):
    """Equatorial velocity gained by swallowing a planet's orbital angular momentum.

    ΔJ = M_p √(G M a), a ≈ R at engulfment (the orbital angular momentum at the
    stellar surface); the spun-up region (mass M_spun, usually the convective
    envelope, moment of inertia k² M_spun R²) rotates as a solid body:

        Δv_eq = ΔJ R / (k² M_spun R²) = M_p √(G M a) / (k² M_spun R).

    Parameters
    ----------
    m_planet_mjup : array_like
        Planet mass (M_J, IAU 2015 nominal).
    mass_msun : array_like
        Stellar mass (M_sun).
    radius_rsun : array_like
        Stellar radius (R_sun).
    m_spun_msun : array_like
        Mass of the region spun up (M_sun): the convective envelope for a giant, the
        whole star for a fully coupled one.
    k2 : array_like
        k² of that region relative to M_spun R² (giant envelopes ~0.1-0.2).
    a_rsun : array_like, optional
        Orbital radius where the angular momentum is deposited (default R).

    Returns
    -------
    ndarray
        Δv_eq (km/s); a planning estimate (hydrodynamic models find ≈1 km/s per hot
        Jupiter for a 1 M_sun, 4 R_sun giant; Lau et al. 2025).

    References
    ----------
    Carlberg, Majewski & Arras 2009, ApJ 700, 832; Lau et al. 2025, A&A,
    doi:10.1051/0004-6361/202452081 (check values in tests/test_rotation.py).
    """
    func = "spin_up_velocity_kms"
    m_planet = _array("m_planet_mjup", func, m_planet_mjup)
    if (np.isfinite(m_planet) & (m_planet < 0)).any():
        raise PrioritizeError(f"{func}: m_planet_mjup must be >= 0")
    lever = _spin_lever(func, mass_msun, radius_rsun, m_spun_msun, k2, a_rsun)
    return m_planet * M_JUP_MSUN * M_SUN_G * lever / 1e5


def planet_mass_for_spin_mjup(delta_veq_kms, mass_msun, radius_rsun, m_spun_msun, k2,
                              a_rsun=None):
    """Planet mass whose orbital angular momentum supplies a given v_eq excess.

    The exact inverse of :func:`spin_up_velocity_kms`:

        M_p = Δv_eq k² M_spun R / √(G M a),

    with Δv_eq = observed minus expected v_eq (``m_planet_spin_mjup``).  Zero where
    the star is not faster than expected (Δv_eq <= 0).

    Parameters
    ----------
    delta_veq_kms : array_like
        Missing equatorial velocity (km/s).
    mass_msun, radius_rsun, m_spun_msun, k2, a_rsun
        As in :func:`spin_up_velocity_kms`.

    Returns
    -------
    ndarray
        Planet mass (M_J), >= 0; NaN where an input is missing.  A planning estimate.

    References
    ----------
    Carlberg, Majewski & Arras 2009, ApJ 700, 832.
    """
    func = "planet_mass_for_spin_mjup"
    delta = _array("delta_veq_kms", func, delta_veq_kms)
    lever = _spin_lever(func, mass_msun, radius_rsun, m_spun_msun, k2, a_rsun)
    mass = np.maximum(delta, 0.0) * 1e5 / (lever * M_JUP_MSUN * M_SUN_G)
    return np.where(np.isnan(delta), np.nan, mass)


def spin_lithium_consistency(m_planet_spin, m_planet_min_li, factor=SPIN_LI_AGREEMENT_FACTOR):
    """Compare the planet that explains the spin with the smallest planet Li can see.

    Categories (per row), with r = m_planet_spin / m_planet_min_li:

    - ``"spin and Li agree"``: 1/factor <= r <= factor (default factor 3, i.e. within
      the ~0.5 dex uncertainty of either estimate).
    - ``"spin needs a bigger planet than Li"``: r > factor; the planet that explains
      the spin would leave a strong Li signature, so Li decides the case.
    - ``"spin needs a smaller planet than Li"``: r < 1/factor; a planet that explains
      the spin would leave Li below detection.
    - ``"no spin excess"``: m_planet_spin == 0 (not faster than expected).
    - ``"not assessed"``: an input is missing.

    Parameters
    ----------
    m_planet_spin : array_like
        Planet mass from the spin excess (:func:`planet_mass_for_spin_mjup`).
    m_planet_min_li : array_like
        Minimum planet mass for a detectable Li signature, same units.
    factor : float
        Agreement factor (> 1).

    Returns
    -------
    ndarray of str

    References
    ----------
    Carlberg, Majewski & Arras 2009, ApJ 700, 832 (spin); :mod:`prioritize.lithium.enrichment`
    (minimum planet for a Li signature).
    """
    func = "spin_lithium_consistency"
    if not factor > 1:
        raise PrioritizeError(f"{func}: factor must be > 1, got {factor!r}")
    spin = _array("m_planet_spin", func, m_planet_spin)
    li = _array("m_planet_min_li", func, m_planet_min_li)
    spin, li = np.broadcast_arrays(spin, li)
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = spin / li
    out = np.full(spin.shape, "not assessed", dtype=object)
    known = np.isfinite(spin) & ~np.isnan(li) & (li > 0)
    out[known & (ratio > factor)] = "spin needs a bigger planet than Li"
    out[known & (ratio < 1 / factor)] = "spin needs a smaller planet than Li"
    out[known & (ratio >= 1 / factor) & (ratio <= factor)] = "spin and Li agree"
    out[np.isfinite(spin) & (spin == 0)] = "no spin excess"
    return out


# ------------------------------------------------------------------ line broadening

def rotational_fwhm_angstrom(vsini_kms, wavelength_angstrom=6707.8, limb_darkening=0.6):
    """FWHM of the rotational broadening kernel with linear limb darkening.

    Gray's kernel, x = Δλ/Δλ_L, Δλ_L = λ v sin i / c:

        G(x) ∝ 2(1 - ε) √(1 - x²) + (π ε / 2)(1 - x²),   |x| <= 1.

    Half maximum, with s = √(1 - x²): (π ε/2) s² + 2(1 - ε) s - [(1 - ε) + π ε/4] = 0,
    solved in closed form, so FWHM = 2 x_½ Δλ_L with x_½ = √(1 - s²):
    2 x_½ = √3 = 1.732 for ε = 0, 1.559 for ε = 0.6, √2 = 1.414 for ε = 1.  The kernel
    is not Gaussian; combining it in quadrature with instrumental and thermal widths
    is an approximation good to ~10% (adequate for exposure planning).

    Parameters
    ----------
    vsini_kms : array_like
        Projected rotation velocity (km/s, >= 0).
    wavelength_angstrom : array_like
        Line wavelength (Å; default Li I 6707.8).
    limb_darkening : float
        Linear limb-darkening coefficient ε in [0, 1] (default 0.6, typical of
        photospheric lines in the optical).

    Returns
    -------
    ndarray
        FWHM (Å).

    References
    ----------
    Gray, D. F. 2005, *The Observation and Analysis of Stellar Photospheres*, 3rd ed.,
    eq. 18.14.
    """
    func = "rotational_fwhm_angstrom"
    eps = _array("limb_darkening", func, limb_darkening)
    if not np.all((eps >= 0) & (eps <= 1)):
        raise PrioritizeError(f"{func}: limb_darkening must be in [0, 1], got {limb_darkening!r}")
    vsini = _array("vsini_kms", func, vsini_kms)
    if (np.isfinite(vsini) & (vsini < 0)).any():
        raise PrioritizeError(f"{func}: vsini_kms must be >= 0")
    wavelength = _positive("wavelength_angstrom", func, wavelength_angstrom)
    quad, lin = np.pi * eps / 2, 2 * (1 - eps)
    const = (1 - eps) + np.pi * eps / 4
    s_half = 2 * const / (lin + np.sqrt(lin * lin + 4 * quad * const))
    return 2 * np.sqrt(1 - s_half ** 2) * wavelength * vsini / C_KMS


# ------------------------------------------------------- rotation evidence (likelihood)

GRID_VELOCITY_KMS = np.geomspace(0.05, 600.0, 140)     # integration grid for v_eq and v sin i
_LN_STEP = np.log(GRID_VELOCITY_KMS[1] / GRID_VELOCITY_KMS[0])
_SIN_I = np.sqrt(1.0 - ((np.arange(10) + 0.5) / 10) ** 2)   # random orientations: cos i uniform
# Quantiles of the age posterior for gyrochronology, denser in the tails so the young
# end (where fast dwarfs belong) is represented; weights are the probability between
# the midpoints of neighbouring quantiles.
AGE_QUANTILES = np.array([0.005, 0.02, 0.06, 0.15, 0.3, 0.5, 0.75, 0.93])
_EDGES = np.concatenate([[0.0], 0.5 * (AGE_QUANTILES[1:] + AGE_QUANTILES[:-1]), [1.0]])
AGE_WEIGHTS = np.diff(_EDGES)
AGE_NODES = AGE_QUANTILES.size
AGE_CLIP_MYR = (50.0, 13800.0)
# Isochrone ages say little about dwarfs that barely evolve within the age of the Galaxy
# (Soderblom 2010, ARA&A 48, 581): the formal posterior of a K dwarf is narrow only
# because model systematics (Teff scale, mixing length, [Fe/H]) are not in it.  For
# gyrochronology the placement's age posterior is mixed with its own prior (constant star
# formation over AGE_CLIP_MYR) with weight u = log2(t_MS / PRIOR_WEIGHT_T_MS_MYR) clipped
# to [0, 1]: u = 0 for stars whose main-sequence lifetime t_MS is shorter than half the age
# of the Universe, u = 1 for stars that outlive it (the ramp is a planning choice).
PRIOR_WEIGHT_T_MS_MYR = 6900.0
_MIX_AGE_GRID_MYR = np.geomspace(AGE_CLIP_MYR[0], AGE_CLIP_MYR[1], 400)


def age_prior_weight(t_ms_myr):
    """Weight of the age prior in the gyrochronology ages (see PRIOR_WEIGHT_T_MS_MYR)."""
    t = np.asarray(t_ms_myr, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        u = np.log2(t / PRIOR_WEIGHT_T_MS_MYR)
    return np.where(np.isfinite(t) & (t > 0), np.clip(u, 0.0, 1.0), 0.0)


def mixture_age_quantiles(ages_myr, prior_weight, quantiles):
    """Quantiles (n, Q) of (1 - u) x the empirical distribution of the age samples plus
    u x the constant-star-formation prior on AGE_CLIP_MYR (ages clipped to it)."""
    ages = np.clip(np.asarray(ages_myr, dtype=float), *AGE_CLIP_MYR)
    u = np.broadcast_to(np.asarray(prior_weight, dtype=float), (ages.shape[0],))
    q = np.asarray(quantiles, dtype=float)
    out = np.nanquantile(ages, q, axis=1).T if ages.size else np.empty((0, q.size))
    mix = np.flatnonzero(u > 0)
    if mix.size:
        g = _MIX_AGE_GRID_MYR
        lo, hi = AGE_CLIP_MYR
        f_prior = (g - lo) / (hi - lo)
        for a in range(0, mix.size, 500):
            rows = mix[a:a + 500]
            sub = ages[rows]
            valid = np.isfinite(sub)
            count = np.maximum(valid.sum(axis=1), 1)
            f_post = (np.where(valid, sub, np.inf)[:, :, None] <= g[None, None, :]).sum(axis=1) / count[:, None]
            f_post = np.where(valid.any(axis=1)[:, None], f_post, f_prior[None, :])
            f = (1.0 - u[rows, None]) * f_post + u[rows, None] * f_prior[None, :]
            for j, qq in enumerate(q):
                k = np.minimum((f < qq).sum(axis=1), g.size - 1)
                out[rows, j] = g[k]
    return out
GYRO_COLOR_RANGE = (0.5, 1.6)                  # stay clear of Barnes' divergence at (B-V)_0 = 0.4
KRAFT_BREAK_TEFF_K = 6250.0                    # above it no magnetic braking (Kraft 1967, ApJ 150, 551)
# Evolved stars (post-main-sequence braking): cool G/K subgiants, giants and clump stars rotate
# at v sin i ~1-5 km/s (de Medeiros & Mayor 1999, A&AS 139, 433; Carlberg et al. 2011: >= 10
# km/s in ~2% of giants, many of them binaries); hot subgiants keep part of their main-sequence
# rotation until they cross the rotational divide near G0 IV-III (Gray 1989, ApJ 347, 1021),
# and stars above the Kraft break brake quickly once they leave the main sequence (Sussholz,
# Mazeh & Faigler 2026, arXiv:2601.20008).  Values from memory.
EVOLVED_COOL_VEQ_KMS = 2.5
EVOLVED_COOL_LN_WIDTH = 0.45
EVOLVED_DIVIDE_TEFF_K = (5600.0, 6300.0)
HOT_LN_WIDTH = 0.6
MIN_LN_WIDTH = 0.15
DEFAULT_VSINI_ERROR_KMS = 1.0                  # when the catalog gives none (common practice)
RADIUS_REL_ERROR = 0.10
SPIN_VISIBLE_MAX = 0.5     # about half of engulfments leave no lasting spin-up (planning value)
# The engulfed planet's mass is not known: the spin-up is a mixture over multiples of the
# configured planet weighted like giant planets' mass function (dN/dlnM ∝ M^-0.31, Cumming
# et al. 2008; the weights are a planning choice).
SPIN_UP_MULTIPLES = (1.0, 3.0, 10.0)
SPIN_UP_WEIGHTS = (0.5, 0.3, 0.2)
DWARF_K2 = 0.08            # whole-star k^2 of a dwarf coupled by magnetic braking (Sun 0.070)
ENVELOPE_K2 = 0.2          # deep convective envelope ~ n = 1.5 polytrope (0.205)
ANOMALY_CLIP_SIGMA = 8.0


class RotationEvidence(NamedTuple):
    """Per-row rotation evidence (column names of the ranked table)."""

    veq_expected_kms: np.ndarray
    veq_expected_spread_kms: np.ndarray
    rot_expect_source: np.ndarray
    rot_anomaly_sigma: np.ndarray
    rotation_likelihood_ratio: np.ndarray
    spin_visible_fraction: np.ndarray


def engulfment_spin_up_kms(planet_mjup, mass_msun, radius_rsun, m_cz_msun, stage):
    """Equatorial velocity an engulfed planet's orbital angular momentum adds (km/s).

    :func:`spin_up_velocity_kms` with the region that is spun up: the whole star
    (k^2 = 0.08) for main-sequence and turnoff dwarfs, whose core and envelope are
    coupled on the braking timescale; the convective envelope (k^2 = 0.2, an n = 1.5
    polytrope) for subgiants and giants, whose envelope holds most of the moment of
    inertia.  ~1-2 km/s per Jupiter mass for a 1 M_sun, 4 R_sun giant (check values in
    tests/test_rotation.py; Carlberg, Majewski & Arras 2009; Lau et al. 2025)."""
    stage = np.asarray(stage, dtype=object)
    mass = np.asarray(mass_msun, dtype=float)
    dwarf = np.isin(stage, GYRO_STAGES)
    spun = np.where(dwarf, mass, np.clip(np.asarray(m_cz_msun, dtype=float), 1e-6, None))
    spun = np.minimum(spun, mass)
    k2 = np.where(dwarf, DWARF_K2, ENVELOPE_K2)
    return spin_up_velocity_kms(np.full(mass.shape, float(planet_mjup)), mass, radius_rsun, spun, k2)


def _lognormal_density(u, mu, s):
    return np.exp(-0.5 * ((np.log(u) - mu) / s) ** 2) / (u * s * np.sqrt(2 * np.pi))


def _population(stage, teff, mass, radius, b_v0, age_samples, cluster_period, cluster_ln, gyro,
                prior_weight=0.0):
    """Normal-population mixture of lognormals in v_eq: (mu, s, w) of shape (n, K) and the source."""
    n = stage.size
    k = AGE_NODES
    mu = np.full((n, k), np.nan)
    s = np.full((n, k), np.nan)
    w = np.zeros((n, k))
    source = np.full(n, "unavailable", dtype=object)
    dwarf = np.isin(stage, GYRO_STAGES)
    evolved = np.isin(stage, ("subgiant",) + GIANT_STAGES)
    two_pi_r = 2 * np.pi * radius * R_SUN_KM / SECONDS_PER_DAY
    # hot dwarfs: the main-sequence velocity of the mass
    v_ms, v_ms_spread = ms_rotation_velocity_kms(np.where(np.isfinite(mass), mass, np.nan))
    # dwarfs from 6000 K up: keyed by their Teff (the observable), not the model mass
    v_t, v_t_spread = ms_rotation_velocity_from_teff_kms(teff)
    by_teff = np.isfinite(v_t)
    v_dwarf = np.where(by_teff, v_t, v_ms)
    v_dwarf_spread = np.where(by_teff, v_t_spread, v_ms_spread)
    hot = dwarf & np.isfinite(v_dwarf)
    mu[hot, 0] = np.log(v_dwarf[hot])
    s[hot, 0] = np.maximum(np.log1p(v_dwarf_spread[hot] / v_dwarf[hot]), HOT_LN_WIDTH)
    w[hot, 0] = 1.0
    source[hot] = "hot_dwarf_empirical"
    # gyrochronology, marginalised over the age posterior
    gyro_ok = dwarf & (b_v0 >= GYRO_COLOR_RANGE[0]) & (b_v0 <= GYRO_COLOR_RANGE[1]) \
        & (teff <= KRAFT_BREAK_TEFF_K) & np.isfinite(radius)
    ages = np.clip(np.asarray(age_samples, dtype=float), *AGE_CLIP_MYR)
    has_age = np.isfinite(ages).any(axis=1)
    gyro_ok &= has_age
    if gyro_ok.any():
        u = np.broadcast_to(np.asarray(prior_weight, dtype=float), (n,))[gyro_ok]
        nodes = mixture_age_quantiles(ages[gyro_ok], u, AGE_QUANTILES)
        period, spread = GYRO_RELATIONS[gyro](np.repeat(b_v0[gyro_ok, None], k, axis=1), nodes)
        mu[gyro_ok] = np.log(two_pi_r[gyro_ok, None] / period)
        s[gyro_ok] = np.maximum(spread / period, MIN_LN_WIDTH)
        w[gyro_ok] = AGE_WEIGHTS[None, :]
        source[gyro_ok] = f"gyro_{gyro} (age-marginalised)"
    # the cluster's own sequence
    clus = dwarf & np.isfinite(cluster_period) & np.isfinite(radius)
    if clus.any():
        mu[clus] = np.nan
        w[clus] = 0.0
        mu[clus, 0] = np.log(two_pi_r[clus] / cluster_period[clus])
        s[clus, 0] = np.maximum(cluster_ln[clus], MIN_LN_WIDTH)
        w[clus, 0] = 1.0
        source[clus] = "cluster_sequence"
    # evolved stars: braked population by Teff
    ev = evolved & np.isfinite(teff)
    if ev.any():
        t0, t1 = EVOLVED_DIVIDE_TEFF_K
        hot_v = np.where(np.isfinite(v_ms), v_ms * np.clip(1.5 / np.where(radius > 0, radius, 1.5), 0.05, 1.0),
                         EVOLVED_COOL_VEQ_KMS)
        hot_v = np.maximum(hot_v, EVOLVED_COOL_VEQ_KMS)
        frac = np.clip((teff - t0) / (t1 - t0), 0.0, 1.0)
        median = np.exp(np.log(EVOLVED_COOL_VEQ_KMS) + frac * (np.log(hot_v) - np.log(EVOLVED_COOL_VEQ_KMS)))
        mu[ev, 0] = np.log(median[ev])
        s[ev, 0] = EVOLVED_COOL_LN_WIDTH + frac[ev] * (HOT_LN_WIDTH - EVOLVED_COOL_LN_WIDTH)
        w[ev, 0] = 1.0
        source[ev] = "evolved_empirical"
    return mu, s, w, source


def _observed_density(mu, s, w, is_vsini):
    """Density of the observed quantity on GRID_VELOCITY_KMS: (n, G)."""
    u = GRID_VELOCITY_KMS
    mu = np.where(w > 0, mu, 0.0)
    s = np.where(w > 0, s, 1.0)
    veq = np.einsum("nk,nkg->ng", w, _lognormal_density(u[None, None, :], mu[..., None], s[..., None]))
    if not is_vsini.any():
        return veq
    shifted = np.log(_SIN_I)[None, None, :, None]
    dens = _lognormal_density(u[None, None, None, :], mu[..., None, None] + shifted, s[..., None, None])
    vsini = np.einsum("nk,nkjg->ng", w, dens) / _SIN_I.size
    return np.where(is_vsini[:, None], vsini, veq)


def _likelihood_and_cdf(density, obs, err):
    u = GRID_VELOCITY_KMS
    du = u * _LN_STEP
    mass = density * du[None, :]
    z = (obs[:, None] - u[None, :]) / err[:, None]
    like = (mass * np.exp(-0.5 * z ** 2) / (err[:, None] * np.sqrt(2 * np.pi))).sum(axis=1)
    cdf = (mass * norm.cdf(z)).sum(axis=1) / np.maximum(mass.sum(axis=1), 1e-300)
    return like, cdf


def _quantiles_veq(mu, s, w, q):
    u = GRID_VELOCITY_KMS
    dens = _observed_density(mu, s, w, np.zeros(mu.shape[0], bool)) * (u * _LN_STEP)[None, :]
    cdf = np.cumsum(dens, axis=1)
    cdf = cdf / np.maximum(cdf[:, -1:], 1e-300)
    return np.stack([u[np.minimum((cdf < qq).sum(axis=1), u.size - 1)] for qq in q])


def rotation_evidence(stage, teff_k, mass_msun, radius_rsun, b_v0, age_samples_myr, veq_obs_kms,
                      veq_err_kms, vsini_kms, vsini_err_kms, spin_up_kms, lifetime_myr,
                      cluster_period_d=None, cluster_ln_scatter=None, gyro_relation="barnes2007",
                      other_cause_fraction=0.05, chunk=1000, age_prior_weight=None) -> RotationEvidence:
    """Rotation as evidence for a recent engulfment: a bounded likelihood ratio.

    1. Normal population of v_eq by stage (a mixture of lognormals): main-sequence and
       turnoff dwarfs below the Kraft break and inside 0.5 <= (B-V)_0 <= 1.6 from
       gyrochronology (Barnes 2007 or Mamajek & Hillenbrand 2008) at 8 quantiles of the
       star's age distribution: the placement's posterior mixed with its prior (constant
       star formation) with weight ``age_prior_weight`` (:func:`age_prior_weight`: 1 for
       dwarfs that outlive the Universe, whose isochrone ages carry no information;
       Soderblom 2010), so a fast K dwarf is first explained as a young star and is
       anomalous only if it is fast for every plausible age; cluster members from their cluster's
       own sequence; hot dwarfs (above the break, in the Li dip) from the main-sequence
       velocity of their Teff from 6000 K up (:func:`ms_rotation_velocity_from_teff_kms`),
       else of their mass (:func:`ms_rotation_velocity_kms`); subgiants, giants and
       clump stars from the braked population of evolved stars (module constants).
    2. The observed quantity: v_eq = 2 pi R / P (Gaussian error: period and 10% radius)
       or, without a period, v sin i with sin i for random orientations and a Gaussian
       error (1 km/s when none is given), integrated on a fixed velocity grid.
    3. Anomaly = Phi^-1(CDF of the observation under the normal population), clipped at
       +-8 sigma; ``rapid_rotator`` is anomaly >= threshold, so the two cannot disagree.
    4. Engulfment: every component's median shifted by the spin-up (m -> m + c dv, with
       c = 1, 3, 10 weighted 0.5/0.3/0.2 since the planet's mass is not known), seen for a
       fraction w of the signature's lifetime (dwarfs: w = t_brake / lifetime with
       t_brake the Barnes age of the spun-up period; evolved stars: w = 1; w <= 0.5):
       p(v | engulfed) = w p_shifted + (1 - w) p_normal,  g = p(v | engulfed) / p(v | normal),
       LR = g / ((1 - f) + f g), f = share of normal stars spun up by other causes.
       So LR >~ 1 - w_max = 0.5 and LR <= 1/f: a slow star is weak evidence against, a fast one
       gains at most 1/f (20 for f = 0.05).  No rotation data: LR = 1, anomaly NaN.

    Parameters
    ----------
    stage : array_like of str
        Canonical stage names ('' unknown).
    teff_k, mass_msun, radius_rsun, b_v0 : array_like
        Teff (K), mass (M_sun), radius (R_sun), dereddened B-V (mag).
    age_samples_myr : ndarray, shape (n, S)
        Age samples of the placement posterior (Myr).
    age_prior_weight : array_like, optional
        Per star, the weight u of the age prior in the gyrochronology ages (0: the
        posterior alone; :func:`age_prior_weight` of the main-sequence lifetime).
    veq_obs_kms, veq_err_kms, vsini_kms, vsini_err_kms : array_like
        Observed v_eq from a period (and error), v sin i (and error), km/s; NaN unknown.
    spin_up_kms : array_like
        Spin-up by the configured planet (:func:`engulfment_spin_up_kms`).
    lifetime_myr : array_like
        The signature's lifetime (Myr).
    cluster_period_d, cluster_ln_scatter : array_like, optional
        The member's cluster-sequence period and its ln scatter (NaN: none).
    gyro_relation : {"barnes2007", "mh08"}
    other_cause_fraction : float
        f in (0, 1).

    Returns
    -------
    RotationEvidence
        Planning estimates.

    References
    ----------
    Barnes 2007, ApJ 669, 1167; Mamajek & Hillenbrand 2008, ApJ 687, 1264; de Medeiros &
    Mayor 1999, A&AS 139, 433; Carlberg et al. 2011, ApJ 732, 39; Gray 1989, ApJ 347, 1021;
    Sussholz, Mazeh & Faigler 2026, arXiv:2601.20008.
    """
    func = "rotation_evidence"
    if gyro_relation not in GYRO_RELATIONS:
        raise PrioritizeError(f"{func}: gyro_relation must be one of {', '.join(GYRO_RELATIONS)}")
    if not 0.0 < other_cause_fraction < 1.0:
        raise PrioritizeError(f"{func}: other_cause_fraction must be in (0, 1)")
    stage = _canonical_stage(np.atleast_1d(np.asarray(stage, dtype=object)), func)
    n = stage.size
    arr = [np.broadcast_to(_array(name, func, v), (n,)).astype(float) for name, v in (
        ("teff_k", teff_k), ("mass_msun", mass_msun), ("radius_rsun", radius_rsun), ("b_v0", b_v0),
        ("veq_obs_kms", veq_obs_kms), ("veq_err_kms", veq_err_kms), ("vsini_kms", vsini_kms),
        ("vsini_err_kms", vsini_err_kms), ("spin_up_kms", spin_up_kms), ("lifetime_myr", lifetime_myr),
        ("cluster_period_d", np.nan if cluster_period_d is None else cluster_period_d),
        ("cluster_ln_scatter", np.nan if cluster_ln_scatter is None else cluster_ln_scatter))]
    teff, mass, radius, bv, veq, veq_err, vsini, vsini_err, dv, life, cper, cln = arr
    u_prior = np.broadcast_to(np.asarray(0.0 if age_prior_weight is None else age_prior_weight,
                                         dtype=float), (n,))
    u_prior = np.clip(np.nan_to_num(u_prior), 0.0, 1.0)
    ages = np.broadcast_to(np.asarray(age_samples_myr, dtype=float).reshape(n, -1), (n, np.size(age_samples_myr) // max(n, 1) or 1))
    out = {k: np.full(n, np.nan) for k in ("exp", "spread", "anom", "lr", "wvis")}
    source = np.full(n, "unavailable", dtype=object)
    for a in range(0, n, chunk):
        sl = slice(a, a + chunk)
        mu, s, w, src = _population(stage[sl], teff[sl], mass[sl], radius[sl], bv[sl], ages[sl],
                                    cper[sl], cln[sl], gyro_relation, u_prior[sl])
        source[sl] = src
        have = w.sum(axis=1) > 0
        q16, q50, q84 = _quantiles_veq(mu, s, w, (0.16, 0.5, 0.84))
        out["exp"][sl] = np.where(have, q50, np.nan)
        out["spread"][sl] = np.where(have, 0.5 * (q84 - q16), np.nan)
        use_veq = np.isfinite(veq[sl])
        obs = np.where(use_veq, veq[sl], vsini[sl])
        err = np.where(use_veq, np.hypot(np.nan_to_num(veq_err[sl]), 0.0),
                       np.where(np.isfinite(vsini_err[sl]) & (vsini_err[sl] > 0), vsini_err[sl],
                                DEFAULT_VSINI_ERROR_KMS))
        err = np.maximum(err, 0.05)
        known = have & np.isfinite(obs)
        wvis = _spin_visible(stage[sl], bv[sl], teff[sl], radius[sl], q50, np.nan_to_num(dv[sl]), life[sl])
        out["wvis"][sl] = np.where(have, wvis, np.nan)
        # the likelihoods only where there is an observation to weigh (the rest: LR 1)
        k = np.flatnonzero(known)
        lr = np.ones(known.size)
        anom = np.full(known.size, np.nan)
        if k.size:
            obs_k, err_k, dv_k = np.nan_to_num(obs[k]), err[k], np.nan_to_num(dv[sl][k])
            mu_k, s_k, w_k, is_vsini = mu[k], s[k], w[k], ~use_veq[k]
            like_n, cdf = _likelihood_and_cdf(_observed_density(mu_k, s_k, w_k, is_vsini), obs_k, err_k)
            m = np.exp(mu_k)
            like_e = np.zeros(like_n.shape)
            for multiple, weight in zip(SPIN_UP_MULTIPLES, SPIN_UP_WEIGHTS):
                mu_e = np.log(m + multiple * dv_k[:, None])
                like_e += weight * _likelihood_and_cdf(_observed_density(mu_e, s_k, w_k, is_vsini),
                                                       obs_k, err_k)[0]
            g = (wvis[k] * like_e + (1 - wvis[k]) * like_n) / np.maximum(like_n, 1e-300)
            f = other_cause_fraction
            lr_k = g / ((1 - f) + f * g)
            anom[k] = np.clip(norm.ppf(np.clip(cdf, 1e-300, 1 - 1e-16)), -ANOMALY_CLIP_SIGMA,
                              ANOMALY_CLIP_SIGMA)
            lr[k] = np.where(np.isfinite(lr_k), lr_k, 1.0)
        out["anom"][sl] = anom
        out["lr"][sl] = lr
    return RotationEvidence(out["exp"], out["spread"], source, out["anom"], out["lr"], out["wvis"])


def _spin_visible(stage, b_v0, teff, radius, v_normal, dv, lifetime):
    """Share of the signature's lifetime with the spin-up still seen (<= SPIN_VISIBLE_MAX)."""
    dwarf = np.isin(stage, GYRO_STAGES) & (teff <= KRAFT_BREAK_TEFF_K) & (b_v0 > BARNES2007["c"][0])
    a, b, n = BARNES2007["a"][0], BARNES2007["b"][0], BARNES2007["n"][0]
    with np.errstate(divide="ignore", invalid="ignore"):
        p_new = 2 * np.pi * radius * R_SUN_KM / SECONDS_PER_DAY / (v_normal + dv)
        t_brake = (p_new / (a * (b_v0 - 0.4) ** b)) ** (1.0 / n)
        frac = np.where(lifetime > 0, t_brake / lifetime, 1.0)
    frac = np.where(dwarf & np.isfinite(frac), frac, 1.0)
    return np.clip(frac, 0.0, SPIN_VISIBLE_MAX)
