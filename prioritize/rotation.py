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
5. Score factor: ``p_engulfed_rotation`` (:func:`engulfment_prior_odds`).
6. Line width: ``rot_fwhm_angstrom`` (:func:`rotational_fwhm_angstrom`) for the
   observing-cost stage.

References
----------
SCIENCE.md §11 (formulas and check values).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import NamedTuple

import numpy as np
from scipy.optimize import least_squares

from .catalog.status import STAGE_ALIASES, STAGES
from .constants import C_LIGHT_CGS, G_CGS, M_JUP_MSUN, M_SUN_G, R_SUN_CM
from .errors import ModelRangeError, PrioritizeError

SECONDS_PER_DAY = 86400.0                    # exact, by definition
R_SUN_KM = R_SUN_CM / 1e5                    # IAU 2015 nominal solar radius
C_KMS = C_LIGHT_CGS / 1e5                   # speed of light (km/s)

# Dimensionless moment of inertia k² = I/(M R²) [from memory, SCIENCE.md §11; the two
# polytropes are re-derived from the Lane-Emden equation in tests/test_rotation.py].
K2_SUN = 0.070
K2_POLYTROPE_N3 = 0.075                      # radiative star (Eddington standard model)
K2_POLYTROPE_N15 = 0.205                     # fully convective star or envelope
K2_MAX = 2.0 / 3.0                           # thin spherical shell: the largest possible k²
K2_EVOLVED = 0.1                             # whole-star default for subgiants and giants

# Gyrochronology, P = a [(B-V)_0 - c]^b t^n, t in Myr (SCIENCE.md §11 [V]).
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

# Rotation and lithium agree when their planet masses are within this factor.
SPIN_LI_AGREEMENT_FACTOR = 3.0
# Engulfment prior: odds that a star recently swallowed a planet, before its rotation is
# looked at.  At most the rapid-rotator fraction of giants (2%), since binaries and
# mergers also make rapid rotators; the shift is the anomaly (sigma) a typical
# engulfment produces (1-2 km/s for a hot Jupiter, SCIENCE §11, against ~1 km/s spreads).
ENGULFMENT_BASE_ODDS = 0.02
ENGULFMENT_SHIFT_SIGMA = 2.0
OTHER_CAUSE_FRACTION = 0.05


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
                              "typical values are 0.07-0.2 (SCIENCE.md §11)")
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
    SCIENCE.md §11; Gray (2005) ch. 18 for v sin i.
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
    Gray (2005) ch. 18; SCIENCE.md §11.
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
    Barnes, S. A. 2007, ApJ 669, 1167, eq. 3; SCIENCE.md §11.
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
    Mamajek, E. E. & Hillenbrand, L. A. 2008, ApJ 687, 1264; SCIENCE.md §11.
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


def expected_veq_conserved(mass_msun, radius_rsun, radius_ms_rsun, k2_now, k2_ms):
    """Expected v_eq of an evolved (or hot) star from angular-momentum conservation.

    Solid-body rotation of the whole star, J = k² M R² Ω = k² M R v_eq, conserved
    from the main sequence (no wind loss, no core-envelope decoupling):

        v_now = v_MS(M) (k²_MS R_MS) / (k²_now R_now),

    with v_MS from :func:`ms_rotation_velocity_kms`.  The spread is that of v_MS,
    scaled the same way.  Magnetic braking after the main sequence (cool subgiants and
    giants) makes the true value lower; a star rotating faster than this is anomalous
    with more confidence than one rotating slower.

    Parameters
    ----------
    mass_msun : array_like
        Stellar mass (M_sun), 0.7-3.5; NaN outside.
    radius_rsun : array_like
        Present radius (R_sun).
    radius_ms_rsun : array_like
        Radius near the end of the main sequence, where v_MS applies (R_sun; from the
        tracks).
    k2_now, k2_ms : array_like
        k² = I/(M R²) now and on the main sequence: Sun 0.070, n = 3 polytrope 0.075,
        n = 1.5 polytrope 0.205, giants ~0.1-0.2 (SCIENCE.md §11 [from memory]).

    Returns
    -------
    veq_kms, spread_kms : ndarray
        Expected v_eq and its 1σ spread (km/s); planning estimates.

    References
    ----------
    SCIENCE.md §11; Kippenhahn, Weigert & Weiss, *Stellar Structure and Evolution*
    (moments of inertia of polytropes).
    """
    func = "expected_veq_conserved"
    radius = _positive("radius_rsun", func, radius_rsun)
    radius_ms = _positive("radius_ms_rsun", func, radius_ms_rsun)
    ratio = (_k2("k2_ms", func, k2_ms) * radius_ms) / (_k2("k2_now", func, k2_now) * radius)
    veq_ms, spread_ms = ms_rotation_velocity_kms(mass_msun)
    return veq_ms * ratio, spread_ms * ratio


class ExpectedRotation(NamedTuple):
    """Expected equatorial velocity per row (column names of the ranked table)."""

    veq_expected_kms: np.ndarray
    veq_expected_spread_kms: np.ndarray
    rot_expect_source: np.ndarray


def expected_rotation(stage, radius_rsun, b_v0=np.nan, age_myr=np.nan, mass_msun=np.nan,
                      radius_ms_rsun=np.nan, k2_now=None, k2_ms=K2_POLYTROPE_N3,
                      gyro_relation="barnes2007", intrinsic_scatter=GYRO_INTRINSIC_SCATTER,
                      cluster_sequence=None, cluster_color=np.nan):
    """Expected v_eq and its spread, choosing the method per row.

    1. Main-sequence and turnoff stars with a cluster sequence and a colour inside its
       range: the cluster's own sequence (``"cluster_sequence"``).
    2. Otherwise main-sequence and turnoff dwarfs inside the gyrochronology colour range
       with an age: v = 2πR/P_gyro, spread from the period spread (``"gyro_barnes2007"``
       or ``"gyro_mh08"``).
    3. Otherwise (hot dwarfs, subgiants, giants): angular-momentum conservation from the
       typical main-sequence velocity of the mass (``"conserved_ms_rotation"``).
    4. ``"unavailable"`` with NaN when the inputs for none of these are known.

    Parameters
    ----------
    stage : array_like of str
        Evolutionary stage (catalog.status.STAGES or an alias).
    radius_rsun : array_like
        Present radius (R_sun).
    b_v0, age_myr : array_like
        Dereddened B-V (mag) and age (Myr), for gyrochronology.
    mass_msun, radius_ms_rsun : array_like
        Mass (M_sun) and main-sequence radius (R_sun), for conservation.
    k2_now, k2_ms : array_like
        k² now and on the main sequence (default 0.075, n = 3 polytrope); k2_now None
        means ``K2_EVOLVED`` (0.1) for subgiants and giants and k2_ms otherwise; see
        :func:`expected_veq_conserved`.
    gyro_relation : {"barnes2007", "mh08"}
    intrinsic_scatter : float
        Fractional gyrochronology scatter (default 0.10).
    cluster_sequence : ClusterRotationSequence, optional
        From :func:`fit_cluster_sequence`.
    cluster_color : array_like
        The colour the cluster sequence was fitted in.

    Returns
    -------
    ExpectedRotation
        ``veq_expected_kms``, ``veq_expected_spread_kms`` (1σ, km/s) and
        ``rot_expect_source`` per row; planning estimates.

    References
    ----------
    SCIENCE.md §11; see the functions named above.
    """
    func = "expected_rotation"
    if gyro_relation not in GYRO_RELATIONS:
        raise PrioritizeError(f"{func}: gyro_relation must be one of "
                              f"{', '.join(GYRO_RELATIONS)}, got {gyro_relation!r}")
    stages = _canonical_stage(stage, func)
    radius = _positive("radius_rsun", func, radius_rsun)
    shape = np.broadcast_shapes(stages.shape, radius.shape, np.shape(b_v0), np.shape(age_myr),
                                np.shape(mass_msun), np.shape(radius_ms_rsun),
                                np.shape(cluster_color))
    stages = np.broadcast_to(stages, shape)
    radius = np.broadcast_to(radius, shape)
    dwarf = np.isin(stages, GYRO_STAGES)

    veq = np.full(shape, np.nan)
    spread = np.full(shape, np.nan)
    source = np.full(shape, "unavailable", dtype=object)

    if k2_now is None:
        evolved = np.isin(stages, ("subgiant",) + GIANT_STAGES)
        k2_now = np.where(evolved, K2_EVOLVED, k2_ms)
    conserved_v, conserved_s = expected_veq_conserved(mass_msun, radius, radius_ms_rsun,
                                                      k2_now, k2_ms)
    conserved_v, conserved_s = (np.broadcast_to(a, shape) for a in (conserved_v, conserved_s))
    use = np.isfinite(conserved_v)
    veq[use], spread[use], source[use] = conserved_v[use], conserved_s[use], "conserved_ms_rotation"

    def take(period, period_spread, label):
        period = np.broadcast_to(period, shape)
        rel = np.broadcast_to(period_spread, shape) / period
        ok = dwarf & np.isfinite(period) & np.isfinite(radius)
        v = equatorial_velocity_kms(radius[ok], period[ok])
        veq[ok], spread[ok], source[ok] = v, v * rel[ok], label

    age = _array("age_myr", func, age_myr)
    age = np.where(np.isfinite(age) & (age > 0), age, np.nan)
    take(*GYRO_RELATIONS[gyro_relation](b_v0, age, intrinsic_scatter), f"gyro_{gyro_relation}")
    if cluster_sequence is not None:
        take(*cluster_sequence.predict(cluster_color), "cluster_sequence")
    return ExpectedRotation(veq, spread, source)


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
    SCIENCE.md §11 (rotation as an engulfment tracer).
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


def rapid_rotator_flag(vsini_kms, stage, expected_veq_kms=np.nan, expected_spread_kms=np.nan,
                       giant_threshold_kms=GIANT_RAPID_VSINI_KMS, dwarf_n_sigma=3.0):
    """Flag rapid rotators by the trade's thresholds.

    - Giants (lower/upper giant branch, red clump): v sin i >= 10 km/s, the traditional
      threshold (Carlberg et al. 2011: ~2% of K giants; single G/K giants show 1-3 km/s).
    - Dwarfs, turnoff stars and subgiants, whose normal rotation depends strongly on
      mass and age: v sin i > v_exp + n σ_exp with the expectation from
      :func:`expected_rotation` (default n = 3).  Because sin i <= 1 this is anomalous
      at any inclination.  Without an expectation the row is not flagged.

    Parameters
    ----------
    vsini_kms : array_like
        Projected rotation velocity (km/s).
    stage : array_like of str
        Evolutionary stage (catalog.status.STAGES or an alias); missing -> not flagged.
    expected_veq_kms, expected_spread_kms : array_like
        Expected v_eq and its 1σ spread (km/s), for non-giants.
    giant_threshold_kms : float
        Giant threshold (default 10 km/s).
    dwarf_n_sigma : float
        Non-giant threshold in sigmas above the expectation (default 3).

    Returns
    -------
    ndarray of bool

    References
    ----------
    Carlberg, J. K. et al. 2011, ApJ 732, 39; Patton, R. A. et al., arXiv:2303.08151;
    SCIENCE.md §11.
    """
    func = "rapid_rotator_flag"
    vsini = _array("vsini_kms", func, vsini_kms)
    stages = _canonical_stage(stage, func)
    expected = _array("expected_veq_kms", func, expected_veq_kms)
    spread = _array("expected_spread_kms", func, expected_spread_kms)
    vsini, stages, expected, spread = np.broadcast_arrays(vsini, stages, expected, spread)
    giant = np.isin(stages, GIANT_STAGES) & (vsini >= giant_threshold_kms)
    other = (~np.isin(stages, GIANT_STAGES)) & (stages != "")
    with np.errstate(invalid="ignore"):
        fast = other & (vsini > expected + dwarf_n_sigma * spread)
    return giant | fast


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
    SCIENCE.md §11 (formula and check values); Carlberg, Majewski & Arras 2009, ApJ
    700, 832; Lau et al. 2025, A&A, doi:10.1051/0004-6361/202452081.
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
    SCIENCE.md §11.
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
    SCIENCE.md §11 and §18.
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


def engulfment_prior_odds(rot_anomaly_sigma, base_odds=ENGULFMENT_BASE_ODDS,
                          engulfed_shift_sigma=ENGULFMENT_SHIFT_SIGMA,
                          other_cause_fraction=OTHER_CAUSE_FRACTION):
    """Probability of a recent engulfment given the rotation anomaly (``p_engulfed_rotation``).

    Two hypotheses for the anomaly z: recent engulfment, z ~ N(μ, 1),
    μ = ``engulfed_shift_sigma``; no engulfment, z ~ (1 - f) N(0, 1) + f N(μ, 1), where
    the fraction f of stars spun up by something else (tidal locking in binaries,
    mergers) shows the same anomaly.  With g = N(z; μ, 1)/N(z; 0, 1) = exp(μ z - μ²/2)
    the likelihood ratio is LR = g / ((1 - f) + f g) and, with prior odds O,

        p = O LR / (1 + O LR),

    monotonic in z, equal to the prior O/(1 + O) at z = μ/2, and saturating at
    odds O/f for large anomalies: a fast rotator is a better candidate, never a sure
    one.  f = 0 recovers the pure logistic.  Equal widths keep it monotonic (unequal
    ones make LR rise again for very negative z).
    Defaults: O = 0.02, about the fraction of giants that are rapid rotators
    (Carlberg et al. 2011), an upper bound because tidally locked binaries and mergers
    also spin stars up; μ = 2, a hot Jupiter's 1-2 km/s spin-up against a ~1 km/s
    expected spread (SCIENCE.md §11).  A missing z gives the prior.

    Parameters
    ----------
    rot_anomaly_sigma : array_like
        Rotation anomaly (sigma, positive = faster; :func:`rotation_anomaly_sigma`).
    base_odds : float
        Prior odds O > 0.
    engulfed_shift_sigma : float
        Mean anomaly μ > 0 of a recently engulfing star.
    other_cause_fraction : float
        f in [0, 1): fraction of non-engulfing stars with an engulfment-like anomaly
        (default 0.05, a planning choice: binaries make up a large share of rapidly
        rotating giants; from memory).

    Returns
    -------
    ndarray
        p_engulfed_rotation in [0, 1]; a planning weight, not a calibrated probability.

    References
    ----------
    Carlberg, J. K. et al. 2011, ApJ 732, 39; SCIENCE.md §11, §20.
    """
    func = "engulfment_prior_odds"
    if not (np.isfinite(base_odds) and base_odds > 0):
        raise PrioritizeError(f"{func}: base_odds must be > 0, got {base_odds!r}")
    if not (np.isfinite(engulfed_shift_sigma) and engulfed_shift_sigma > 0):
        raise PrioritizeError(f"{func}: engulfed_shift_sigma must be > 0, "
                              f"got {engulfed_shift_sigma!r}")
    if not (0.0 <= other_cause_fraction < 1.0):
        raise PrioritizeError(f"{func}: other_cause_fraction must be in [0, 1), "
                              f"got {other_cause_fraction!r}")
    z = _array("rot_anomaly_sigma", func, rot_anomaly_sigma)
    mu = engulfed_shift_sigma
    log_g = np.where(np.isnan(z), 0.0, mu * z - mu * mu / 2)
    # ln LR = ln g - ln((1 - f) + f g), written to stay finite for large |ln g|
    f = other_cause_fraction
    log_lr = log_g - np.logaddexp(np.log1p(-f), (np.log(f) if f > 0 else -np.inf) + log_g)
    log_odds = np.log(base_odds) + log_lr
    return 0.5 * (1.0 + np.tanh(0.5 * log_odds))


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
