"""Stellar parameters from photometry: Teff, extinction, bolometric corrections, L and R.

Every function here is a pure, vectorised function of numpy arrays (scalars work too,
and broadcast against arrays).  NaN in gives NaN out.  Where a published relation is
asked for a value outside the range it was calibrated on, the result is NaN and the
returned boolean ``valid`` mask is False: nothing is extrapolated silently.

The table-level entry point is :func:`derive_stellar_parameters`: it keeps every value
the catalog gives and derives the rest, recording for each row where each number came
from (``*_source`` columns) and why a value could not be derived (``deriv_note``).

All numbers are planning estimates from published empirical calibrations (Casagrande
et al. 2021, 2010; Alonso et al. 1999; Torres 2010; Andrae et al. 2018; Cardelli,
Clayton & Mathis 1989; Babusiaux et al. 2018); they are no substitute for a
spectroscopic analysis of the star.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np
import pandas as pd

from ..constants import LOGG_SUN, MBOL_SUN, TEFF_SUN_K
from ..errors import CatalogError, PrioritizeError

# --- Colour-Teff: Casagrande et al. 2021, MNRAS 507, 2684 (Gaia DR3 BP-RP) ----------
# Teff = a0 + a1 X + a2 X^2 + a3 X^3 + a4 X^5 + g (a5 + a6 X + a7 X^2 + a8 X^3 + a9 X^5)
#        + f (a10 + a11 X + a12 X^2 + a13 X^3) + a14 f g X
C21_COEFFS = (7980.8845, -4138.3457, 1264.9366, -130.4388, 0.0, 285.8393, -324.2196,
              106.8511, -4.9825, 0.0, 4.5138, -203.7774, 126.6981, -14.7442, 40.7376)
C21_BP_RP_MIN = 0.20
C21_BP_RP_MAX_DWARF = 2.00        # logg > 3.2
C21_BP_RP_MAX_GIANT = 2.55        # logg <= 3.2
C21_LOGG_SPLIT = 3.2
C21_LOGG_RANGE = (0.0, 5.0)
C21_FEH_RANGE = (-4.0, 0.6)
C21_SCATTER_K = 70.0              # from memory; MBM21 find 61 K (dwarfs) / 83 K (giants) for the same colour
C21_ZERO_POINT_K = 20.0           # Teff-scale zero-point uncertainty, Casagrande et al. 2021

# --- Colour-Teff from (B-V)0: theta = a0 + a1 X + a2 X^2 + a3 X f + a4 f + a5 f^2 ------
C10_B_V_COEFFS = (0.5665, 0.4809, -0.0060, -0.0613, -0.0042, -0.0055)
C10_B_V_RANGE = (0.18, 1.29)
C10_FEH_RANGE = (-5.0, 0.4)
C10_FEH_FLOOR = -3.5              # C10 Table 4 note: evaluate more metal-poor stars at -3.5
C10_SCATTER_K = 73.0              # Casagrande et al. 2010, Table 4

A99_B_V_BLUE_COEFFS = (0.5716, 0.5404, -0.06126, -0.04862, -0.01777, -0.007969)
A99_B_V_RED_COEFFS = (0.6177, 0.4354, -0.004025, 0.05204, -0.1127, -0.01385)
A99_B_V_BLUE_RANGE = (0.20, 0.80)
A99_B_V_RED_RANGE = (0.70, 1.70)
A99_FEH_RANGE = (-3.0, 0.5)       # range of the published tables, Alonso et al. 1999 abstract
A99_SCATTER_BLUE_K = 167.0        # from memory, Alonso et al. 1999 Table 2
A99_SCATTER_RED_K = 96.0          # from memory, Alonso et al. 1999 Table 2

# --- Extinction ------------------------------------------------------------------------
R_V_DEFAULT = 3.1                 # Cardelli, Clayton & Mathis 1989
A_6708_OVER_A_V = 0.795           # CCM89 A(6708 A)/A_V at R_V = 3.1 (the `extinction` library's ccm89)
# Babusiaux et al. 2018, eq. 1 / Table 1: k = c1 + c2 X + c3 X^2 + c4 X^3 + c5 A0 + c6 A0^2 + c7 X A0
GAIA_K_G = (0.9761, -0.1704, 0.0086, 0.0011, -0.0438, 0.0013, 0.0099)
GAIA_K_BP = (1.1517, -0.0871, -0.0333, 0.0173, -0.0230, 0.0006, 0.0043)
GAIA_K_RP = (0.6104, -0.0170, -0.0026, -0.0017, -0.0078, 0.00005, 0.0006)
GAIA_EXTINCTION_ITERATIONS = 6    # Newton steps for the intrinsic colour
GAIA_E_BP_RP_PER_EBV = 1.4        # E(BP-RP)/E(B-V) at X = 1, A0 = 0.3 (Babusiaux et al. 2018): starting guess

# --- Bolometric corrections -----------------------------------------------------------
# Andrae et al. 2018: BC_G = sum a_i (Teff - 5772)^i; pieces below / above 4000 K.
BC_G_COOL_COEFFS = (1.749, 1.977e-3, 3.737e-7, -8.966e-11, -4.183e-14)
BC_G_HOT_COEFFS = (6.000e-2, 6.731e-5, -6.647e-8, 2.859e-11, -7.197e-15)
BC_G_SPLIT_K = 4000.0
BC_G_TEFF_RANGE = (3300.0, 8000.0)
HEAVY_REDDENING_EBV = 3.0          # an E(B-V) above this is said to be unusual (common practice)
# Torres 2010, Table 1: BC_V = sum c_i (log Teff)^i; pieces split at log Teff 3.70 and 3.90.
BC_V_COEFFS = (
    (-0.190537291496456e5, 0.155144866764412e5, -0.421278819301717e4, 0.381476328422343e3),
    (-0.370510203809015e5, 0.385672629965804e5, -0.150651486316025e5, 0.261724637119416e4,
     -0.170623810323864e3),
    (-0.118115450538963e6, 0.137145973583929e6, -0.636233812100225e5, 0.147412923562646e5,
     -0.170587278406872e4, 0.788731721804990e2),
)
BC_V_LOG_TEFF_SPLITS = (3.70, 3.90)
BC_V_LOG_TEFF_RANGE = (3.30, 4.70)  # span of Flower's (1996) table, from memory

# --- Luminosity -----------------------------------------------------------------------
MAX_PARALLAX_REL_ERR = 0.20       # beyond ~20 % 1/parallax is a biased distance (Bailer-Jones 2015)

# --- Defaults of derive_stellar_parameters ------------------------------------------------
ASSUMED_FEH_ERR = 0.2             # dex, for the assumed solar [Fe/H]: ~ the spread of nearby disc stars (from memory)
LOGG_DWARF_DEFAULT = 4.0
LOGG_GIANT_DEFAULT = 2.5
ASSUMED_LOGG_ERR = 0.5            # dex, for a logg that is a guess or an assumption (a planning choice)
LOGG_GIANT_BELOW = 3.5            # B-V route: A99 (giants) below, C10 (dwarfs, subgiants) above; a planning choice
DWARF_STAGES = ("main_sequence", "turnoff", "subgiant")          # names of catalog.status.STAGES
GIANT_STAGES = ("lower_giant_branch", "upper_giant_branch", "red_clump")

_SLOPE_STEP = 1e-4                # step of the central differences used for error propagation
_BISECTION_STEPS = 48             # colour bracket of 2.35 mag -> 1e-14 mag


class Estimate(NamedTuple):
    """A derived quantity and where its relation is valid.

    Attributes
    ----------
    value : ndarray
        The quantity; NaN where ``valid`` is False.
    valid : ndarray of bool
        True where every input was finite and inside the relation's calibrated range.
    """

    value: np.ndarray
    valid: np.ndarray


class GaiaExtinction(NamedTuple):
    """Extinction in the Gaia bands (mag) and the intrinsic colour it was computed at."""

    a_g: np.ndarray
    a_bp: np.ndarray
    a_rp: np.ndarray
    bp_rp0: np.ndarray
    valid: np.ndarray


class Luminosity(NamedTuple):
    """log10(L/L_sun), validity and, where invalid, a short reason ("" where valid)."""

    logl_lsun: np.ndarray
    valid: np.ndarray
    reason: np.ndarray


def _as_float(values, name):
    """Convert to a float ndarray or raise a package error naming the argument."""
    try:
        return np.asarray(values, dtype=float)
    except (TypeError, ValueError) as exc:
        raise PrioritizeError(
            f"{name} must be a number or an array of numbers; got {values!r:.60}") from exc


def _broadcast(**named):
    """Float arrays of a common shape, or a package error naming the arguments."""
    arrays = [_as_float(value, name) for name, value in named.items()]
    try:
        return np.broadcast_arrays(*arrays)
    except ValueError as exc:
        shapes = ", ".join(f"{name} {array.shape}" for name, array in zip(named, arrays))
        raise PrioritizeError(f"array shapes do not match: {shapes}; pass arrays of one "
                              "length (or scalars)") from exc


def _within(x, bounds):
    """True where lower <= x <= upper (False for NaN)."""
    return (x >= bounds[0]) & (x <= bounds[1])


def _masked(value, valid):
    """The value where valid, NaN elsewhere, as a float array."""
    return np.where(valid, value, np.nan)


def _slope(function, args, position, step=_SLOPE_STEP):
    """Central-difference partial derivative of ``function`` in argument ``position``."""
    up, down = list(args), list(args)
    up[position] = args[position] + step
    down[position] = args[position] - step
    return (function(*up) - function(*down)) / (2.0 * step)


def _theta_polynomial(x, feh, coeffs):
    """theta = a0 + a1 X + a2 X^2 + a3 X f + a4 f + a5 f^2 (C10 / A99 form)."""
    a0, a1, a2, a3, a4, a5 = coeffs
    return a0 + a1 * x + a2 * x**2 + a3 * x * feh + a4 * feh + a5 * feh**2


# --------------------------------------------------------------------------------------
# Colour -> Teff
# --------------------------------------------------------------------------------------

def _c21_teff_unchecked(bp_rp0, logg, feh):
    """The C21 polynomial, evaluated without any range check."""
    a = C21_COEFFS
    x = bp_rp0
    return (a[0] + a[1] * x + a[2] * x**2 + a[3] * x**3 + a[4] * x**5
            + logg * (a[5] + a[6] * x + a[7] * x**2 + a[8] * x**3 + a[9] * x**5)
            + feh * (a[10] + a[11] * x + a[12] * x**2 + a[13] * x**3)
            + a[14] * feh * logg * x)


def _c21_colour_max(logg):
    """Reddest calibrated (BP-RP)0: 2.00 for logg > 3.2, 2.55 for logg <= 3.2."""
    return np.where(logg > C21_LOGG_SPLIT, C21_BP_RP_MAX_DWARF, C21_BP_RP_MAX_GIANT)


def _c21_inputs_valid(logg, feh):
    return _within(logg, C21_LOGG_RANGE) & _within(feh, C21_FEH_RANGE)


def teff_from_bp_rp(bp_rp0, logg, feh) -> Estimate:
    """Effective temperature from the dereddened Gaia DR3 colour (Casagrande et al. 2021).

    With X = (G_BP - G_RP)_0, g = log g and f = [Fe/H]::

        Teff = a0 + a1 X + a2 X^2 + a3 X^3 + a4 X^5
               + g (a5 + a6 X + a7 X^2 + a8 X^3 + a9 X^5)
               + f (a10 + a11 X + a12 X^2 + a13 X^3) + a14 f g X

    with the DR3 coefficients ``C21_COEFFS`` (never mix with the DR2 set).

    Parameters
    ----------
    bp_rp0 : array_like
        Dereddened (G_BP - G_RP)_0 from Gaia DR3 photometry (mag).
    logg : array_like
        Surface gravity log10(g / cm s^-2).
    feh : array_like
        [Fe/H] (dex).

    Returns
    -------
    Estimate
        ``value`` is Teff in K, NaN outside the calibrated range; ``valid`` the mask.

    Notes
    -----
    Valid for 0.20 <= X <= 2.00 when log g > 3.2 and 0.20 <= X <= 2.55 when
    log g <= 3.2; 0 <= log g <= 5; -4 <= [Fe/H] <= 0.6 (about 4000-8000 K).  The
    relation's scatter is taken as ``C21_SCATTER_K`` (from memory) and the zero point
    is uncertain by 20 K.  A planning estimate.

    References
    ----------
    Casagrande L. et al. 2021, MNRAS 507, 2684 (GALAH DR3 InfraRed Flux Method).
    """
    x, g, f = _broadcast(bp_rp0=bp_rp0, logg=logg, feh=feh)
    valid = (x >= C21_BP_RP_MIN) & (x <= _c21_colour_max(g)) & _c21_inputs_valid(g, f)
    return Estimate(_masked(_c21_teff_unchecked(x, g, f), valid), valid)


def _c21_turning_colour(logg, feh):
    """Bluest colour > 0.20 where the C21 Teff(X) stops falling, +inf if none.

    The DR3 fit has no X^5 terms (a4 = a9 = 0), so Teff is cubic in X and
    dTeff/dX = p0 + p1 X + p2 X^2 has closed-form roots.  For 1 <= log g <= 3.2 and
    [Fe/H] >= -0.5 Teff(X) has a minimum inside the giants' range near X = 2.25-2.55
    (found on a grid of log g and [Fe/H]).
    """
    a = C21_COEFFS
    p0 = a[1] + a[6] * logg + a[11] * feh + a[14] * feh * logg
    p1 = 2.0 * (a[2] + a[7] * logg + a[12] * feh)
    p2 = 3.0 * (a[3] + a[8] * logg + a[13] * feh)
    with np.errstate(invalid="ignore", divide="ignore"):
        root_disc = np.sqrt(p1**2 - 4.0 * p0 * p2)
        roots = np.stack([(-p1 - root_disc) / (2.0 * p2), (-p1 + root_disc) / (2.0 * p2)])
    roots = np.where(np.isfinite(roots) & (roots > C21_BP_RP_MIN), roots, np.inf)
    return roots.min(axis=0)


def bp_rp_from_teff(teff, logg, feh) -> Estimate:
    """Intrinsic Gaia DR3 (BP-RP)_0 for a Teff: the inverse of :func:`teff_from_bp_rp`.

    Solves Teff_C21(X, log g, [Fe/H]) = teff for X by bisection on arrays (48 halvings
    of the bracket, i.e. to ~1e-14 mag).  The bracket is 0.20 <= X <= X_max(log g),
    cut at the colour where Teff(X) stops falling (a turnover of the cubic fit in the
    reddest giants), so the inverse is single valued.

    Parameters
    ----------
    teff : array_like
        Effective temperature (K).
    logg : array_like
        Surface gravity log10(g / cm s^-2), 0-5.
    feh : array_like
        [Fe/H] (dex), -4 to 0.6.

    Returns
    -------
    Estimate
        ``value`` is (BP-RP)_0 in mag; NaN where the Teff is outside what the relation
        covers at that log g and [Fe/H] (roughly 4000-8000 K).  A synthetic colour for
        planning, not a measurement.

    References
    ----------
    Casagrande L. et al. 2021, MNRAS 507, 2684.
    """
    t, g, f = _broadcast(teff=teff, logg=logg, feh=feh)
    low = np.full(t.shape, C21_BP_RP_MIN)
    high = np.minimum(_c21_colour_max(g), _c21_turning_colour(g, f))
    hottest = _c21_teff_unchecked(low, g, f)
    coolest = _c21_teff_unchecked(high, g, f)
    valid = (t <= hottest) & (t >= coolest) & _c21_inputs_valid(g, f)
    for _ in range(_BISECTION_STEPS):
        middle = 0.5 * (low + high)
        too_hot = _c21_teff_unchecked(middle, g, f) > t
        low = np.where(too_hot, middle, low)
        high = np.where(too_hot, high, middle)
    return Estimate(_masked(0.5 * (low + high), valid), valid)


def _c10_teff_unchecked(b_v0, feh):
    return 5040.0 / _theta_polynomial(b_v0, np.maximum(feh, C10_FEH_FLOOR), C10_B_V_COEFFS)


def teff_from_b_v_dwarf(b_v0, feh) -> Estimate:
    """Teff of a dwarf or subgiant from (B-V)_0 (Casagrande et al. 2010).

    theta = 5040 K / Teff = a0 + a1 X + a2 X^2 + a3 X [Fe/H] + a4 [Fe/H] + a5 [Fe/H]^2
    with X = (B-V)_0 (Johnson) and the coefficients ``C10_B_V_COEFFS``.

    Parameters
    ----------
    b_v0 : array_like
        Dereddened Johnson (B-V)_0 (mag).
    feh : array_like
        [Fe/H] (dex).

    Returns
    -------
    Estimate
        ``value`` is Teff in K; NaN outside 0.18 <= (B-V)_0 <= 1.29 or
        -5.0 <= [Fe/H] <= 0.4.  Stars below [Fe/H] = -3.5 are evaluated at -3.5, as the
        paper's Table 4 note prescribes.  Scatter 73 K.  For dwarfs and subgiants only:
        use :func:`teff_from_b_v_giant` for giants.  A planning estimate.

    References
    ----------
    Casagrande L., Ramirez I., Melendez J., Bessell M., Asplund M. 2010, A&A 512, A54,
    eq. 3 and Table 4.
    """
    x, f = _broadcast(b_v0=b_v0, feh=feh)
    valid = _within(x, C10_B_V_RANGE) & _within(f, C10_FEH_RANGE)
    return Estimate(_masked(_c10_teff_unchecked(x, f), valid), valid)


def _a99_blend_weight(b_v0):
    """Weight of the red relation: 0 below 0.70, 1 above 0.80, linear in between."""
    overlap = (A99_B_V_RED_RANGE[0], A99_B_V_BLUE_RANGE[1])
    return np.clip((b_v0 - overlap[0]) / (overlap[1] - overlap[0]), 0.0, 1.0)


def _a99_teff_unchecked(b_v0, feh):
    weight = _a99_blend_weight(b_v0)
    t_blue = 5040.0 / _theta_polynomial(b_v0, feh, A99_B_V_BLUE_COEFFS)
    t_red = 5040.0 / _theta_polynomial(b_v0, feh, A99_B_V_RED_COEFFS)
    return (1.0 - weight) * t_blue + weight * t_red


def teff_from_b_v_giant(b_v0, feh) -> Estimate:
    """Teff of a giant from (B-V)_0 (Alonso, Arribas & Martinez-Roger 1999).

    theta = 5040 K / Teff = a0 + a1 X + a2 X^2 + a3 X [Fe/H] + a4 [Fe/H] + a5 [Fe/H]^2,
    with one coefficient set for 0.20 <= X <= 0.80 and another for 0.70 <= X <= 1.70.
    In the overlap 0.70-0.80 the two Teff are blended linearly in X (weight of the red
    relation (X - 0.70) / 0.10), so Teff is continuous; the two differ there by < 10 K
    at solar [Fe/H] and by ~70 K at [Fe/H] = -2.

    Parameters
    ----------
    b_v0 : array_like
        Dereddened Johnson (B-V)_0 (mag).
    feh : array_like
        [Fe/H] (dex).

    Returns
    -------
    Estimate
        ``value`` is Teff in K; NaN outside 0.20 <= (B-V)_0 <= 1.70 or
        -3.0 <= [Fe/H] <= +0.5.  The paper narrows the colour range for metal-poor
        bins (from memory); that refinement is not applied here.  Scatter ~167 K (blue) and ~96 K
        (red), from memory.  A planning estimate.

    References
    ----------
    Alonso A., Arribas S., Martinez-Roger C. 1999, A&AS 140, 261, eqs. for (B-V)
    in Table 2.
    """
    x, f = _broadcast(b_v0=b_v0, feh=feh)
    valid = (x >= A99_B_V_BLUE_RANGE[0]) & (x <= A99_B_V_RED_RANGE[1]) & _within(f, A99_FEH_RANGE)
    return Estimate(_masked(_a99_teff_unchecked(x, f), valid), valid)


def b_v_from_teff(teff, feh, giant) -> Estimate:
    """Intrinsic Johnson (B-V)_0 for a Teff: the inverse of :func:`teff_from_b_v_dwarf`
    (Casagrande et al. 2010) where ``giant`` is False and of :func:`teff_from_b_v_giant`
    (Alonso et al. 1999) where it is True.

    Solved by bisection on arrays over the relation's colour range (both Teff(X) fall
    monotonically there), so the round trip Teff -> (B-V)_0 -> Teff is exact.

    Parameters
    ----------
    teff : array_like
        Effective temperature (K).
    feh : array_like
        [Fe/H] (dex).
    giant : array_like of bool
        Which relation to invert.

    Returns
    -------
    Estimate
        (B-V)_0 in mag; NaN where the Teff lies outside what the relation covers at that
        [Fe/H] (C10: 0.18-1.29 mag, A99: 0.20-1.70 mag).  A synthetic colour for
        planning, not a measurement.

    References
    ----------
    Casagrande L. et al. 2010, A&A 512, A54; Alonso A., Arribas S., Martinez-Roger C.
    1999, A&AS 140, 261.
    """
    t, f, g = _broadcast(teff=teff, feh=feh, giant=giant)
    g = g.astype(bool)
    low = np.where(g, A99_B_V_BLUE_RANGE[0], C10_B_V_RANGE[0])
    high = np.where(g, A99_B_V_RED_RANGE[1], C10_B_V_RANGE[1])

    def relation(x):
        return np.where(g, _a99_teff_unchecked(x, f), _c10_teff_unchecked(x, f))

    feh_ok = np.where(g, _within(f, A99_FEH_RANGE), _within(f, C10_FEH_RANGE))
    valid = (t <= relation(low)) & (t >= relation(high)) & feh_ok
    for _ in range(_BISECTION_STEPS):
        middle = 0.5 * (low + high)
        too_hot = relation(middle) > t
        low = np.where(too_hot, middle, low)
        high = np.where(too_hot, high, middle)
    return Estimate(_masked(0.5 * (low + high), valid), valid)


# --------------------------------------------------------------------------------------
# Extinction
# --------------------------------------------------------------------------------------

def a_v_from_ebv(ebv, r_v=R_V_DEFAULT):
    """V-band extinction A_V = R_V E(B-V).

    Parameters
    ----------
    ebv : array_like
        Colour excess E(B-V) (mag); negative values give NaN.
    r_v : float
        Ratio of total to selective extinction; 3.1 for the diffuse interstellar medium.

    Returns
    -------
    ndarray
        A_V in mag.

    References
    ----------
    Cardelli J. A., Clayton G. C., Mathis J. S. 1989, ApJ 345, 245.
    """
    ebv = _as_float(ebv, "ebv")
    r_v = _as_float(r_v, "r_v")
    if r_v.ndim != 0 or not np.isfinite(r_v) or r_v <= 0.0:
        raise PrioritizeError(f"r_v must be a positive number (3.1 is the Galactic mean); got {r_v}")
    return np.where(ebv >= 0.0, r_v * ebv, np.nan)


def _gaia_k(coeffs, x, a0):
    c1, c2, c3, c4, c5, c6, c7 = coeffs
    return c1 + c2 * x + c3 * x**2 + c4 * x**3 + c5 * a0 + c6 * a0**2 + c7 * x * a0


def gaia_extinction_from_intrinsic(ebv, bp_rp0) -> GaiaExtinction:
    """Extinction in the Gaia G, BP and RP bands for a known intrinsic colour.

    A_m = k_m A_0 with A_0 = 3.1 E(B-V) and
    k_m = c1 + c2 X + c3 X^2 + c4 X^3 + c5 A_0 + c6 A_0^2 + c7 X A_0,  X = (BP-RP)_0.

    Parameters
    ----------
    ebv : array_like
        E(B-V) (mag), >= 0.
    bp_rp0 : array_like
        Intrinsic (BP-RP)_0 (mag).

    Returns
    -------
    GaiaExtinction
        A_G, A_BP, A_RP in mag, the colour used, and the validity mask (finite input,
        E(B-V) >= 0).  With E(B-V) = 0 all extinctions are 0 whatever the colour.

    Notes
    -----
    The coefficients were fitted for the Gaia DR2 passbands; with (E)DR3 photometry
    they are an approximation.  At X = 1, A_0 = 0.3 they give A_G/A_0 = 0.81,
    A_BP/A_0 = 1.04 and A_RP/A_0 = 0.59.

    References
    ----------
    Gaia Collaboration, Babusiaux C. et al. 2018, A&A 616, A10, eq. 1 and Table 1;
    method of Danielski C. et al. 2018, A&A 614, A19.
    """
    ebv, x = _broadcast(ebv=ebv, bp_rp0=bp_rp0)
    unreddened = ebv == 0.0
    valid = (ebv >= 0.0) & (np.isfinite(x) | unreddened)
    a0 = R_V_DEFAULT * ebv
    bands = [np.where(unreddened, 0.0, _masked(_gaia_k(coeffs, x, a0) * a0, valid))
             for coeffs in (GAIA_K_G, GAIA_K_BP, GAIA_K_RP)]
    return GaiaExtinction(*bands, _masked(x, valid), valid)


def _colour_excess(bp_rp0, a0):
    """E(BP-RP) = (k_BP - k_RP) A_0 at intrinsic colour bp_rp0."""
    return (_gaia_k(GAIA_K_BP, bp_rp0, a0) - _gaia_k(GAIA_K_RP, bp_rp0, a0)) * a0


def gaia_extinction(ebv, bp_rp_observed, n_iter=GAIA_EXTINCTION_ITERATIONS) -> GaiaExtinction:
    """Extinction in the Gaia bands from E(B-V) and the observed (reddened) BP-RP.

    The coefficients of :func:`gaia_extinction_from_intrinsic` depend on the intrinsic
    colour X = (BP-RP)_0, which is not observed.  X solves
    F(X) = X + E(BP-RP)(X, A_0) - (BP-RP)_obs = 0; it is found by Newton iteration on
    arrays, starting from X = (BP-RP)_obs - 1.4 E(B-V) (the ratio at X = 1, A_0 = 0.3).
    A plain fixed-point iteration converges slowly for red, strongly reddened stars
    (|dE(BP-RP)/dX| reaches ~0.6 at X = 2.4, A_0 = 4.6); six Newton steps recover X to
    < 1e-12 mag for -0.2 <= X <= 3.0 and E(B-V) <= 3 (measured on a grid).

    Parameters
    ----------
    ebv : array_like
        E(B-V) (mag), >= 0.
    bp_rp_observed : array_like
        Observed G_BP - G_RP (mag).
    n_iter : int
        Number of Newton steps (>= 1).

    Returns
    -------
    GaiaExtinction
        A_G, A_BP, A_RP (mag), the intrinsic colour (BP-RP)_0 and the validity mask.

    References
    ----------
    Gaia Collaboration, Babusiaux C. et al. 2018, A&A 616, A10, eq. 1 and Table 1.
    """
    if isinstance(n_iter, bool) or not isinstance(n_iter, (int, np.integer)) or n_iter < 1:
        raise PrioritizeError(f"n_iter must be a positive integer; got {n_iter!r}")
    ebv, observed = _broadcast(ebv=ebv, bp_rp_observed=bp_rp_observed)
    a0 = R_V_DEFAULT * ebv
    colour = observed - GAIA_E_BP_RP_PER_EBV * ebv
    for _ in range(n_iter):
        residual = colour + _colour_excess(colour, a0) - observed
        colour = colour - residual / (1.0 + _slope(_colour_excess, (colour, a0), 0))
    return gaia_extinction_from_intrinsic(ebv, colour)


def ebv_from_gaia_excess(ebp_rp, bp_rp_observed, n_iter=GAIA_EXTINCTION_ITERATIONS) -> Estimate:
    """E(B-V) from a colour excess E(BP-RP) (e.g. Gaia DR3 ``ebpminrp_gspphot``).

    Inverts E(BP-RP) = (k_BP - k_RP)(X, A_0) A_0 with X = (BP-RP)_obs - E(BP-RP) the
    intrinsic colour and E(B-V) = A_0 / 3.1, by fixed-point iteration on A_0 (the
    k's change by a few per cent per magnitude of A_0, so it converges in a few
    steps).  Without an observed colour X = 1 is used.

    Parameters
    ----------
    ebp_rp : array_like
        E(BP-RP) (mag), >= 0.
    bp_rp_observed : array_like
        Observed BP-RP (mag); NaN where not known.

    Returns
    -------
    Estimate
        E(B-V) (mag); invalid where E(BP-RP) is missing or negative.

    References
    ----------
    Gaia Collaboration, Babusiaux C. et al. 2018, A&A 616, A10, eq. 1 and Table 1.
    """
    excess, observed = _broadcast(ebp_rp=ebp_rp, bp_rp_observed=bp_rp_observed)
    x = np.where(np.isfinite(observed), observed - excess, 1.0)
    a0 = R_V_DEFAULT * excess / GAIA_E_BP_RP_PER_EBV
    for _ in range(n_iter):
        a0 = excess / (_gaia_k(GAIA_K_BP, x, a0) - _gaia_k(GAIA_K_RP, x, a0))
    valid = np.isfinite(excess) & (excess >= 0.0)
    return Estimate(_masked(a0 / R_V_DEFAULT, valid), valid)


def ebv_from_a_g(a_g, bp_rp_observed, n_iter=GAIA_EXTINCTION_ITERATIONS) -> Estimate:
    """E(B-V) from the G-band extinction A_G (e.g. Gaia DR3 ``ag_gspphot``).

    Inverts A_G = k_G(X, A_0) A_0 with the intrinsic colour X = (BP-RP)_obs -
    E(BP-RP)(X, A_0), iterating A_0 and X together; E(B-V) = A_0 / 3.1.  Without an
    observed colour X = 1 is used.

    Parameters
    ----------
    a_g : array_like
        A_G (mag), >= 0.
    bp_rp_observed : array_like
        Observed BP-RP (mag); NaN where not known.

    Returns
    -------
    Estimate
        E(B-V) (mag); invalid where A_G is missing or negative.

    References
    ----------
    Gaia Collaboration, Babusiaux C. et al. 2018, A&A 616, A10, eq. 1 and Table 1.
    """
    a_g, observed = _broadcast(a_g=a_g, bp_rp_observed=bp_rp_observed)
    known = np.isfinite(observed)
    a0 = a_g / _gaia_k(GAIA_K_G, 1.0, 0.0)
    x = np.where(known, observed, 1.0)
    for _ in range(n_iter):
        x = np.where(known, observed - _colour_excess(x, a0), 1.0)
        a0 = a_g / _gaia_k(GAIA_K_G, x, a0)
    valid = np.isfinite(a_g) & (a_g >= 0.0)
    return Estimate(_masked(a0 / R_V_DEFAULT, valid), valid)


# --------------------------------------------------------------------------------------
# Bolometric corrections
# --------------------------------------------------------------------------------------

def _piecewise_polynomial(x, splits, coefficient_sets, derivative=False):
    """Evaluate the piece of a piecewise polynomial that x falls in (x < split -> lower piece)."""
    piece = np.searchsorted(np.asarray(splits), x, side="right")
    result = np.full(x.shape, np.nan)
    for index, coeffs in enumerate(coefficient_sets):
        polynomial = np.polynomial.Polynomial(coeffs)
        if derivative:
            polynomial = polynomial.deriv()
        chosen = piece == index
        result[chosen] = polynomial(x[chosen])
    return result


def _bc_g_polynomial(teff, derivative=False):
    return _piecewise_polynomial(teff - TEFF_SUN_K, (BC_G_SPLIT_K - TEFF_SUN_K,),
                                 (BC_G_COOL_COEFFS, BC_G_HOT_COEFFS), derivative)


def _log_teff(teff):
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.log10(teff)


def bc_g(teff) -> Estimate:
    """Bolometric correction in the Gaia G band (Andrae et al. 2018).

    BC_G = sum_{i=0}^{4} a_i (Teff - 5772 K)^i, one coefficient set for
    4000-8000 K and another for 3300-4000 K.  For the Sun BC_G = +0.06 mag.

    Parameters
    ----------
    teff : array_like
        Effective temperature (K).

    Returns
    -------
    Estimate
        ``value`` is BC_G in mag, NaN outside 3300-8000 K.  Fitted to solar-metallicity
        MARCS spectra, so [Fe/H] and log g are ignored; a planning estimate.

    References
    ----------
    Andrae R. et al. 2018, A&A 616, A8, eq. 7 and Table 4.
    """
    t = _as_float(teff, "teff")
    valid = _within(t, BC_G_TEFF_RANGE)
    return Estimate(_masked(_bc_g_polynomial(t), valid), valid)


def bc_v(teff) -> Estimate:
    """Bolometric correction in Johnson V (Flower 1996 as corrected by Torres 2010).

    BC_V = sum_i c_i (log10 Teff)^i with three coefficient sets: log Teff < 3.70,
    3.70-3.90 and > 3.90 (Torres 2010, Table 1).  Torres pairs these with
    M_bol,sun = 4.73; this module uses the IAU value 4.74, a 0.004 dex shift in log L.

    Parameters
    ----------
    teff : array_like
        Effective temperature (K).

    Returns
    -------
    Estimate
        ``value`` is BC_V in mag, NaN outside 3.30 <= log Teff <= 4.70 (the span of
        Flower's table, from memory).  The pieces join with steps of up to 0.02 mag at
        log Teff = 3.70.  A planning estimate.

    References
    ----------
    Torres G. 2010, AJ 140, 1158, Table 1; Flower P. J. 1996, ApJ 469, 355.
    """
    log_t = _log_teff(_as_float(teff, "teff"))
    valid = _within(log_t, BC_V_LOG_TEFF_RANGE)
    value = _piecewise_polynomial(log_t, BC_V_LOG_TEFF_SPLITS, BC_V_COEFFS)
    return Estimate(_masked(value, valid), valid)


def bolometric_correction_error(teff, teff_err, band):
    """1-sigma error of a bolometric correction from a Teff error, to first order.

    sigma_BC = |dBC/dTeff| sigma_T; for BC_V, dBC/dTeff = (dBC_V/dlog Teff) / (Teff ln 10).

    Parameters
    ----------
    teff, teff_err : array_like
        Effective temperature and its 1-sigma error (K).
    band : {"G", "V"}
        "G" for :func:`bc_g` (Andrae et al. 2018), "V" for :func:`bc_v` (Torres 2010).

    Returns
    -------
    ndarray
        Error in mag; NaN where the bolometric correction itself is invalid.

    References
    ----------
    Andrae R. et al. 2018, A&A 616, A8; Torres G. 2010, AJ 140, 1158.
    """
    t, sigma = _broadcast(teff=teff, teff_err=teff_err)
    if band == "G":
        valid = bc_g(t).valid
        slope = _bc_g_polynomial(t, derivative=True)
    elif band == "V":
        valid = bc_v(t).valid
        slope = (_piecewise_polynomial(_log_teff(t), BC_V_LOG_TEFF_SPLITS, BC_V_COEFFS, derivative=True)
                 / (t * np.log(10.0)))
    else:
        raise PrioritizeError(f'band must be "G" or "V"; got {band!r}')
    return _masked(np.abs(slope) * sigma, valid)


# --------------------------------------------------------------------------------------
# Luminosity, radius, gravity
# --------------------------------------------------------------------------------------

def _log_luminosity(app_mag, distance_modulus, a_mag, bc):
    """log L/L_sun = -0.4 (m - mu - A + BC - M_bol,sun)."""
    return -0.4 * (app_mag - distance_modulus - a_mag + bc - MBOL_SUN)


def _luminosity_result(logl, checks):
    """Luminosity with the first failed check's text as the reason."""
    failed = [mask for mask, _ in checks]
    reason = np.select(failed, [text for _, text in checks], default="").astype(object)
    valid = ~np.logical_or.reduce(failed)
    return Luminosity(_masked(logl, valid), valid, reason)


def _photometry_checks(app_mag, a_mag, bc):
    return [(~np.isfinite(app_mag), "no magnitude"),
            (~np.isfinite(a_mag), "no extinction"),
            (~np.isfinite(bc), "no bolometric correction")]


def log_luminosity_from_parallax(app_mag, parallax_mas, a_mag, bc, parallax_mas_err=None) -> Luminosity:
    """Luminosity from an apparent magnitude, a parallax, extinction and a BC.

    M_bol = m - A + 5 log10(parallax / mas) - 10 + BC and
    log10(L / L_sun) = -0.4 (M_bol - 4.74), with M_bol,sun = 4.74 (IAU 2015 B2).

    Parameters
    ----------
    app_mag : array_like
        Apparent magnitude in the band of ``bc`` (mag).
    parallax_mas : array_like
        Parallax (mas), as given; apply any zero-point correction beforehand.
    a_mag : array_like
        Extinction in that band (mag).
    bc : array_like
        Bolometric correction in that band (mag).
    parallax_mas_err : array_like, optional
        1-sigma parallax error (mas).  When given, rows with error / parallax > 0.2
        are rejected: 1/parallax is then a biased distance.

    Returns
    -------
    Luminosity
        log10(L / L_sun); NaN, valid False and a reason ("parallax ≤ 0",
        "parallax error > 20%", "no parallax", "no magnitude", ...) where it cannot be
        computed.  No exception is raised for such rows.  A planning estimate.

    References
    ----------
    IAU 2015 Resolution B2 (Mamajek E. E. et al. 2015, arXiv:1510.06262);
    Bailer-Jones C. A. L. 2015, PASP 127, 994 (on inverting parallaxes).
    """
    app_mag, parallax, a_mag, bc, parallax_err = _broadcast(
        app_mag=app_mag, parallax_mas=parallax_mas, a_mag=a_mag, bc=bc,
        parallax_mas_err=np.nan if parallax_mas_err is None else parallax_mas_err)
    with np.errstate(invalid="ignore", divide="ignore"):
        distance_modulus = 10.0 - 5.0 * np.log10(parallax)
        imprecise = parallax_err / parallax > MAX_PARALLAX_REL_ERR
    checks = [(~np.isfinite(parallax), "no parallax"),
              (parallax <= 0.0, "parallax ≤ 0"),
              (imprecise, f"parallax error > {MAX_PARALLAX_REL_ERR:.0%}")]
    checks += _photometry_checks(app_mag, a_mag, bc)
    return _luminosity_result(_log_luminosity(app_mag, distance_modulus, a_mag, bc), checks)


def log_luminosity_from_distance(app_mag, distance_pc, a_mag, bc) -> Luminosity:
    """Luminosity from an apparent magnitude and a distance (e.g. a cluster's).

    log10(L / L_sun) = -0.4 (m - 5 log10(d / 10 pc) - A + BC - 4.74).

    Parameters
    ----------
    app_mag : array_like
        Apparent magnitude (mag).
    distance_pc : array_like
        Distance (pc).
    a_mag, bc : array_like
        Extinction and bolometric correction in the same band (mag).

    Returns
    -------
    Luminosity
        As :func:`log_luminosity_from_parallax`, with reasons "no distance" and
        "distance ≤ 0".  A planning estimate.

    References
    ----------
    IAU 2015 Resolution B2 (Mamajek E. E. et al. 2015, arXiv:1510.06262).
    """
    app_mag, distance, a_mag, bc = _broadcast(app_mag=app_mag, distance_pc=distance_pc,
                                              a_mag=a_mag, bc=bc)
    with np.errstate(invalid="ignore", divide="ignore"):
        distance_modulus = 5.0 * np.log10(distance) - 5.0
    checks = [(~np.isfinite(distance), "no distance"), (distance <= 0.0, "distance ≤ 0")]
    checks += _photometry_checks(app_mag, a_mag, bc)
    return _luminosity_result(_log_luminosity(app_mag, distance_modulus, a_mag, bc), checks)


def log_luminosity_error(parallax_mas, parallax_mas_err, mag_err, a_mag_err, bc_err):
    """1-sigma error of log10(L/L_sun) from a parallax-based luminosity, to first order.

    sigma_logL^2 = (2 / ln 10 * sigma_parallax / parallax)^2
                   + 0.16 (sigma_m^2 + sigma_A^2 + sigma_BC^2)

    The errors are taken as independent.  For a distance d with error sigma_d pass
    parallax = 1000 / d and parallax error = 1000 sigma_d / d^2.

    Parameters
    ----------
    parallax_mas, parallax_mas_err : array_like
        Parallax and its 1-sigma error (mas).
    mag_err, a_mag_err, bc_err : array_like
        1-sigma errors of the magnitude, extinction and bolometric correction (mag);
        use :func:`bolometric_correction_error` for the Teff part of the BC.

    Returns
    -------
    ndarray
        sigma of log10(L / L_sun) (dex).

    References
    ----------
    First-order propagation of log10 L = -0.4 (m - A + 5 log10 parallax - 10 + BC - 4.74).
    """
    parallax, parallax_err, mag_err, a_err, bc_err = _broadcast(
        parallax_mas=parallax_mas, parallax_mas_err=parallax_mas_err, mag_err=mag_err,
        a_mag_err=a_mag_err, bc_err=bc_err)
    with np.errstate(invalid="ignore", divide="ignore"):
        distance_term = 2.0 / np.log(10.0) * parallax_err / parallax
    return np.sqrt(distance_term**2 + 0.16 * (mag_err**2 + a_err**2 + bc_err**2))


def radius_from_l_teff(logl, teff):
    """Radius from luminosity and Teff by the Stefan-Boltzmann law.

    R / R_sun = (L / L_sun)^(1/2) (Teff_sun / Teff)^2 with Teff_sun = 5772 K.

    Parameters
    ----------
    logl : array_like
        log10(L / L_sun).
    teff : array_like
        Effective temperature (K); non-positive values give NaN.

    Returns
    -------
    ndarray
        Radius in nominal solar radii.

    References
    ----------
    IAU 2015 Resolution B3 (nominal solar values; Prsa A. et al. 2016, AJ 152, 41).
    """
    logl, t = _broadcast(logl=logl, teff=teff)
    positive = t > 0.0
    return _masked(10.0 ** (0.5 * logl) * (TEFF_SUN_K / np.where(positive, t, 1.0)) ** 2, positive)


def logg_from_mass_radius(mass_msun, radius_rsun):
    """Surface gravity log10(g / cm s^-2) = log g_sun + log10(M / M_sun) - 2 log10(R / R_sun).

    Parameters
    ----------
    mass_msun : array_like
        Mass (nominal solar masses).
    radius_rsun : array_like
        Radius (nominal solar radii).

    Returns
    -------
    ndarray
        log g with log g_sun = 4.438 (IAU 2015 nominal G M_sun and R_sun); NaN for
        non-positive inputs.

    References
    ----------
    IAU 2015 Resolution B3 (Prsa A. et al. 2016, AJ 152, 41).
    """
    mass, radius = _broadcast(mass_msun=mass_msun, radius_rsun=radius_rsun)
    positive = (mass > 0.0) & (radius > 0.0)
    with np.errstate(invalid="ignore", divide="ignore"):
        logg = LOGG_SUN + np.log10(mass) - 2.0 * np.log10(radius)
    return _masked(logg, positive)


# --------------------------------------------------------------------------------------
# The table-level entry point
# --------------------------------------------------------------------------------------

def _numeric_column(df, name):
    """A column as floats (NaN if absent); a CatalogError naming it if it holds text."""
    if name not in df.columns:
        return np.full(len(df), np.nan)
    values = pd.to_numeric(df[name], errors="coerce").to_numpy(dtype=float)
    bad = np.isnan(values) & df[name].notna().to_numpy()
    if bad.any():
        row = int(np.flatnonzero(bad)[0])
        raise CatalogError(f"non-numeric value {df[name].iloc[row]!r}; expected a number or "
                           "an empty cell", row=row + 1, column=name)
    return values


def _stage_in(df, stages):
    """True where the row's stage (canonical name, as catalog validation writes it) is in ``stages``."""
    if "stage" not in df.columns:
        return np.zeros(len(df), dtype=bool)
    return df["stage"].isin(stages).to_numpy(dtype=bool)


def _first_finite(*candidates):
    """Element-wise first finite value of several arrays and the index of the one used."""
    stacked = np.stack(np.broadcast_arrays(*candidates))
    finite = np.isfinite(stacked)
    index = np.where(finite.any(axis=0), finite.argmax(axis=0), len(candidates))
    value = np.take_along_axis(stacked, np.minimum(index, len(candidates) - 1)[None], 0)[0]
    return np.where(index < len(candidates), value, np.nan), index


def _zero_if_nan(values):
    return np.where(np.isfinite(values), values, 0.0)


def _add_note(notes, mask, text):
    """Append ``text`` to the notes of the rows in ``mask``, separated by '; '."""
    joined = np.where(notes == "", text, notes + "; " + text)
    return np.where(mask, joined, notes).astype(object)


def _teff_error(function, args, sigmas, scatter_k):
    """sqrt(scatter^2 + sum_i (dTeff/darg_i sigma_i)^2), to first order."""
    variance = np.asarray(scatter_k, dtype=float) ** 2
    for position, sigma in sigmas.items():
        variance = variance + (_slope(function, args, position) * sigma) ** 2
    return np.sqrt(variance)


def _relation_reason(colour_ok, feh_ok, name):
    """Why a colour-Teff relation gave no value for rows that had the colour."""
    return np.select([~colour_ok, ~feh_ok], [f"colour outside {name} range",
                                              f"[Fe/H] outside {name} range"],
                     default=f"logg outside {name} range").astype(object)


def _colour_reason(reason, rows, name, colour, observed, intrinsic, ebv, lo, hi, source):
    """The generic "colour outside <name> range" made precise for the rows in ``rows``:
    the observed and dereddened colour, the E(B-V) used, the relation and its range."""
    reason = np.asarray(reason, dtype=object).copy()
    hit = np.flatnonzero(rows & (reason == f"colour outside {name} range"))
    lo, hi = np.broadcast_to(lo, reason.shape), np.broadcast_to(hi, reason.shape)
    for i in hit:
        heavy = (f"; E(B-V) = {ebv[i]:.2f} is very large: check the reddening"
                 if ebv[i] > HEAVY_REDDENING_EBV else "")
        reason[i] = (f"({colour})0 = {intrinsic[i]:.2f} ({colour} = {observed[i]:.2f} dereddened with "
                     f"E(B-V) = {ebv[i]:.2f}) is outside the {source} colour-Teff range "
                     f"{lo[i]:.2f} to {hi[i]:.2f} mag: give teff_k{heavy}")
    return reason


def _bc_reason(reason, rows, teff, teff_range, relation):
    """The generic "no bolometric correction" made precise: which relation, its Teff range."""
    reason = np.asarray(reason, dtype=object).copy()
    hit = np.flatnonzero(rows & (reason == "no bolometric correction") & np.isfinite(teff))
    for i in hit:
        reason[i] = (f"Teff = {teff[i]:.0f} K is outside the range of {relation}, "
                     f"{teff_range[0]:.0f} to {teff_range[1]:.0f} K: give logl_lsun (or logg)")
    return reason


def _excess_per_ebv(band_extinction, bp_rp0, ebv):
    """d(extinction)/dE(B-V) at fixed intrinsic colour, for error propagation."""
    return R_V_DEFAULT * _slope(band_extinction, (bp_rp0, R_V_DEFAULT * ebv), 1)


def _a_g(bp_rp0, a0):
    return _gaia_k(GAIA_K_G, bp_rp0, a0) * a0


def _c21_route(bp_rp0, colour_sigma, logg, logg_sigma, feh, feh_sigma):
    """C21 Teff, its error and, where invalid, why."""
    estimate = teff_from_bp_rp(bp_rp0, logg, feh)
    error = _teff_error(_c21_teff_unchecked, (bp_rp0, logg, feh),
                        {0: colour_sigma, 1: logg_sigma, 2: feh_sigma},
                        np.hypot(C21_SCATTER_K, C21_ZERO_POINT_K))
    reason = _relation_reason((bp_rp0 >= C21_BP_RP_MIN) & (bp_rp0 <= _c21_colour_max(logg)),
                              _within(feh, C21_FEH_RANGE), "C21")
    return estimate, error, reason


def _b_v_route(b_v0, colour_sigma, feh, feh_sigma, giant):
    """Teff from (B-V)0 with A99 where ``giant`` else C10, its error and why not."""
    dwarf = teff_from_b_v_dwarf(b_v0, feh)
    a99 = teff_from_b_v_giant(b_v0, feh)
    sigmas = {0: colour_sigma, 1: feh_sigma}
    a99_scatter = A99_SCATTER_BLUE_K + _a99_blend_weight(b_v0) * (A99_SCATTER_RED_K - A99_SCATTER_BLUE_K)
    error = np.where(giant, _teff_error(_a99_teff_unchecked, (b_v0, feh), sigmas, a99_scatter),
                     _teff_error(_c10_teff_unchecked, (b_v0, feh), sigmas, C10_SCATTER_K))
    reason = np.where(giant,
                      _relation_reason(_within(b_v0, (A99_B_V_BLUE_RANGE[0], A99_B_V_RED_RANGE[1])),
                                       _within(feh, A99_FEH_RANGE), "A99"),
                      _relation_reason(_within(b_v0, C10_B_V_RANGE), _within(feh, C10_FEH_RANGE), "C10"))
    return np.where(giant, a99.value, dwarf.value), error, reason


def _luminosity_route(app_mag, a_mag, bc, distance_pc, parallax_mas, parallax_mas_err):
    """Luminosity from the distance where one is given, else from the parallax."""
    by_distance = log_luminosity_from_distance(app_mag, distance_pc, a_mag, bc)
    by_parallax = log_luminosity_from_parallax(app_mag, parallax_mas, a_mag, bc, parallax_mas_err)
    has_distance = np.isfinite(distance_pc)
    return Luminosity(*(np.where(has_distance, a, b) for a, b in zip(by_distance, by_parallax)))


def derive_stellar_parameters(df: pd.DataFrame, logg_guess=None) -> pd.DataFrame:
    """Teff, L, R and [Fe/H] for every row: catalog values where given, else derived.

    Rules, applied row by row (vectorised):

    * [Fe/H]: catalog, else 0.0 +- 0.2 dex ("assumed solar").
    * E(B-V): catalog (negative -> NaN and a note), else from ``ebp_rp`` (E(BP-RP),
      :func:`ebv_from_gaia_excess`), else from ``a_g_ext`` (A_G, :func:`ebv_from_a_g`),
      else 0 ("assumed 0"); its error is ``ebv_err`` when given, else 0.
    * Teff: catalog; else (BP-RP)_0 with Casagrande+2021 (observed BP-RP, or
      bp_mag - rp_mag, dereddened by :func:`gaia_extinction`), with log g from the
      catalog, else ``logg_guess``, else 4.0 for main_sequence/turnoff/subgiant and
      2.5 for giant-branch/red_clump stages, else 4.0; else (B-V)_0 = b_v - E(B-V) with
      Casagrande+2010 for dwarfs/subgiants and Alonso+1999 for giants (stage, else
      log g < 3.5, else a dwarf is assumed).  The error is the catalog's, or the
      relation's scatter (C21 70 K + 20 K zero point, C10 73 K, A99 ~167/96 K) combined
      to first order with the errors of the colour, E(B-V), log g (0.5 dex when guessed
      or assumed) and [Fe/H].
    * L: catalog; else G with BC_G (Andrae+2018) and A_G; else V with BC_V (Torres 2010)
      and A_V = 3.1 E(B-V).  The distance is ``distance_pc`` when given (cluster members;
      taken as exact), else the parallax (rejected when <= 0 or with > 20 % error).  Magnitude errors
      ``g_mag_err`` / ``v_mag_err`` are used when present, else taken as 0.
    * R: from L and Teff (Stefan-Boltzmann).

    Parameters
    ----------
    df : pandas.DataFrame
        Canonical columns, any of which may be absent or NaN: teff_k, teff_k_err, logg,
        logg_err, feh, feh_err, logl_lsun, logl_lsun_err, g_mag, bp_rp, bp_mag, rp_mag,
        v_mag, b_v, parallax_mas, parallax_mas_err, ebv, ebv_err, distance_pc, stage
        (canonical names of :data:`prioritize.catalog.status.STAGES`); the errors
        bp_rp_err, b_v_err, g_mag_err, v_mag_err are used when present.
    logg_guess : array_like, optional
        log g per row (or one value for all) to use in the colour-Teff relation where
        the catalog gives none, e.g. from a first pass on stellar tracks.

    Returns
    -------
    pandas.DataFrame
        Same index; columns teff_k, teff_k_err (K), teff_source, logl_lsun,
        logl_lsun_err (dex), logl_source, radius_rsun, radius_source, feh, feh_err (dex),
        feh_source, ebv_used, ebv_source, a_g_mag, a_v_mag (mag) and deriv_note (why a
        value could not be derived; "" when nothing is missing).  Planning estimates.

    Raises
    ------
    PrioritizeError
        If ``df`` is not a DataFrame or ``logg_guess`` does not match its length.
    CatalogError
        If a numeric column holds text.

    References
    ----------
    Casagrande et al. 2021, MNRAS 507, 2684; Casagrande et al. 2010, A&A 512, A54;
    Alonso et al. 1999, A&AS 140, 261; Gaia Collaboration, Babusiaux et al. 2018,
    A&A 616, A10; Andrae et al. 2018, A&A 616, A8; Torres 2010, AJ 140, 1158.
    """
    if not isinstance(df, pd.DataFrame):
        raise PrioritizeError(f"derive_stellar_parameters needs a pandas DataFrame; got {type(df).__name__}")
    n = len(df)
    col = {name: _numeric_column(df, name) for name in (
        "teff_k", "teff_k_err", "logg", "logg_err", "feh", "feh_err", "logl_lsun",
        "logl_lsun_err", "g_mag", "g_mag_err", "bp_rp", "bp_rp_err", "bp_mag", "rp_mag",
        "v_mag", "v_mag_err", "b_v", "b_v_err", "parallax_mas", "parallax_mas_err", "ebv",
        "ebv_err", "ebp_rp", "a_g_ext", "distance_pc")}
    guess = np.full(n, np.nan) if logg_guess is None else _as_float(logg_guess, "logg_guess")
    if guess.ndim > 1 or guess.size not in (1, n):
        raise PrioritizeError(f"logg_guess must be one value or one per row ({n}); got shape {guess.shape}")
    guess = np.broadcast_to(guess, (n,))
    dwarf_stage = _stage_in(df, DWARF_STAGES)
    giant_stage = _stage_in(df, GIANT_STAGES)
    notes = np.full(n, "", dtype=object)

    # [Fe/H] and E(B-V)
    has_feh = np.isfinite(col["feh"])
    feh = np.where(has_feh, col["feh"], 0.0)
    feh_err = np.where(has_feh, col["feh_err"], ASSUMED_FEH_ERR)
    feh_sigma = _zero_if_nan(feh_err)
    bp_rp_observed = np.where(np.isfinite(col["bp_rp"]), col["bp_rp"], col["bp_mag"] - col["rp_mag"])
    from_excess = ebv_from_gaia_excess(col["ebp_rp"], bp_rp_observed)
    from_a_g = ebv_from_a_g(col["a_g_ext"], bp_rp_observed)
    catalog_ebv, ebv_from = _first_finite(col["ebv"], from_excess.value, from_a_g.value)
    has_ebv = np.isfinite(catalog_ebv)
    negative_ebv = has_ebv & (catalog_ebv < 0.0)
    notes = _add_note(notes, negative_ebv, "ebv < 0")
    ebv = np.where(negative_ebv, np.nan, np.where(has_ebv, catalog_ebv, 0.0))
    ebv_sigma = np.where(ebv_from == 0, _zero_if_nan(col["ebv_err"]), 0.0)
    ebv_source = np.array(["catalog", "from E(BP-RP) (Babusiaux et al. 2018)",
                           "from A_G (Babusiaux et al. 2018)", "assumed 0"], dtype=object)[ebv_from]

    # log g for the colour-Teff relation
    stage_logg = np.select([dwarf_stage, giant_stage], [LOGG_DWARF_DEFAULT, LOGG_GIANT_DEFAULT], np.nan)
    logg_used, logg_from = _first_finite(col["logg"], guess, stage_logg, np.full(n, LOGG_DWARF_DEFAULT))
    logg_label = np.array(["catalog", "guess", "stage", "assumed"], dtype=object)[logg_from]
    logg_label = np.where(logg_from >= 2, logg_label + " " + np.char.mod("%.1f", logg_used).astype(object),
                          logg_label)
    logg_sigma = np.where(logg_from == 0, _zero_if_nan(col["logg_err"]), ASSUMED_LOGG_ERR)

    # Teff: catalog > C21 from (BP-RP)0 > (B-V)0
    bp_rp = np.where(np.isfinite(col["bp_rp"]), col["bp_rp"], col["bp_mag"] - col["rp_mag"])
    observed_ext = gaia_extinction(ebv, bp_rp)
    x0 = observed_ext.bp_rp0
    colour_sigma = np.hypot(_zero_if_nan(col["bp_rp_err"]),
                            _excess_per_ebv(_colour_excess, x0, ebv) * ebv_sigma)
    c21, c21_err, c21_reason = _c21_route(x0, colour_sigma, logg_used, logg_sigma, feh, feh_sigma)
    b_v0 = col["b_v"] - ebv
    logg_known = np.where(np.isfinite(col["logg"]), col["logg"], guess)
    giant_bv = giant_stage | (~dwarf_stage & (logg_known < LOGG_GIANT_BELOW))
    dwarf_assumed = ~giant_stage & ~dwarf_stage & ~np.isfinite(logg_known)
    bv_teff, bv_err, bv_reason = _b_v_route(b_v0, np.hypot(_zero_if_nan(col["b_v_err"]), ebv_sigma),
                                            feh, feh_sigma, giant_bv)
    bv_source = np.where(giant_bv, "b_v_a99", np.where(dwarf_assumed, "b_v_c10(dwarf assumed)", "b_v_c10"))
    has_teff = np.isfinite(col["teff_k"])
    use_c21 = ~has_teff & c21.valid
    use_bv = ~has_teff & ~use_c21 & np.isfinite(bv_teff)
    teff = np.select([has_teff, use_c21, use_bv], [col["teff_k"], c21.value, bv_teff], np.nan)
    teff_err = np.select([has_teff, use_c21, use_bv], [col["teff_k_err"], c21_err, bv_err], np.nan)
    teff_source = np.select([has_teff, use_c21, use_bv],
                            ["catalog", "bp_rp_c21(logg=" + logg_label + ")", bv_source], "none").astype(object)
    no_teff = ~np.isfinite(teff)
    has_bp_rp, has_b_v = np.isfinite(x0), np.isfinite(b_v0)
    c21_reason = _colour_reason(c21_reason, no_teff & has_bp_rp, "C21", "BP-RP", bp_rp, x0, ebv,
                                C21_BP_RP_MIN, _c21_colour_max(logg_used), "Casagrande et al. 2021")
    bv_lo = np.where(giant_bv, A99_B_V_BLUE_RANGE[0], C10_B_V_RANGE[0])
    bv_hi = np.where(giant_bv, A99_B_V_RED_RANGE[1], C10_B_V_RANGE[1])
    bv_reason = _colour_reason(_colour_reason(bv_reason, no_teff & has_b_v & ~giant_bv, "C10", "B-V", col["b_v"],
                                              b_v0, ebv, bv_lo, bv_hi, "Casagrande et al. 2010, dwarfs"),
                               no_teff & has_b_v & giant_bv, "A99", "B-V", col["b_v"], b_v0, ebv, bv_lo, bv_hi,
                               "Alonso et al. 1999, giants")
    notes = _add_note(notes, no_teff & has_bp_rp, "no Teff: " + c21_reason)
    notes = _add_note(notes, no_teff & has_b_v & ~has_bp_rp, "no Teff: " + bv_reason)
    notes = _add_note(notes, no_teff & ~has_bp_rp & ~has_b_v & ~negative_ebv, "no Teff: no colour given")

    # Extinction in G (at the observed colour, else at the colour C21 gives for Teff) and V
    colour_for_k = np.where(np.isfinite(x0), x0, bp_rp_from_teff(teff, logg_used, feh).value)
    a_g = np.where(np.isfinite(observed_ext.a_g), observed_ext.a_g,
                   gaia_extinction_from_intrinsic(ebv, colour_for_k).a_g)
    a_g_sigma = _zero_if_nan(_excess_per_ebv(_a_g, colour_for_k, ebv) * ebv_sigma)
    a_v = a_v_from_ebv(ebv)

    # Luminosity: catalog > G > V; distance_pc (taken as exact) > parallax
    has_distance = np.isfinite(col["distance_pc"])
    with np.errstate(invalid="ignore", divide="ignore"):
        parallax = np.where(has_distance, 1000.0 / col["distance_pc"], col["parallax_mas"])
    parallax_sigma = np.where(has_distance, 0.0, _zero_if_nan(col["parallax_mas_err"]))
    distance = (col["distance_pc"], col["parallax_mas"], col["parallax_mas_err"])
    teff_sigma = _zero_if_nan(teff_err)
    g_route = _luminosity_route(col["g_mag"], a_g, bc_g(teff).value, *distance)
    g_err = log_luminosity_error(parallax, parallax_sigma, _zero_if_nan(col["g_mag_err"]), a_g_sigma,
                                 bolometric_correction_error(teff, teff_sigma, "G"))
    v_route = _luminosity_route(col["v_mag"], a_v, bc_v(teff).value, *distance)
    v_err = log_luminosity_error(parallax, parallax_sigma, _zero_if_nan(col["v_mag_err"]),
                                 R_V_DEFAULT * ebv_sigma, bolometric_correction_error(teff, teff_sigma, "V"))
    has_logl = np.isfinite(col["logl_lsun"])
    use_g = ~has_logl & g_route.valid
    use_v = ~has_logl & ~use_g & v_route.valid
    logl = np.select([has_logl, use_g, use_v], [col["logl_lsun"], g_route.logl_lsun, v_route.logl_lsun], np.nan)
    logl_err = np.select([has_logl, use_g, use_v], [col["logl_lsun_err"], g_err, v_err], np.nan)
    distance_kind = np.where(has_distance, "distance", "parallax")
    logl_source = np.select([has_logl, use_g, use_v], ["catalog", "G+" + distance_kind, "V+" + distance_kind],
                            "none").astype(object)
    has_g, has_v = np.isfinite(col["g_mag"]), np.isfinite(col["v_mag"])
    no_logl = ~np.isfinite(logl)
    g_reason = _bc_reason(g_route.reason, no_logl & has_g, teff, BC_G_TEFF_RANGE,
                          "the G-band bolometric correction (Andrae et al. 2018)")
    v_reason = _bc_reason(v_route.reason, no_logl & has_v & ~has_g, teff,
                          tuple(10.0 ** np.array(BC_V_LOG_TEFF_RANGE)),
                          "the V-band bolometric correction (Torres 2010)")
    notes = _add_note(notes, no_logl & has_g, "no L: " + g_reason)
    notes = _add_note(notes, no_logl & has_v & ~has_g, "no L: " + v_reason)
    notes = _add_note(notes, no_logl & ~has_g & ~has_v, "no L: no G or V magnitude")

    radius = radius_from_l_teff(logl, teff)
    radius_source = np.where(np.isfinite(radius), "L+Teff", "none").astype(object)

    return pd.DataFrame({
        "teff_k": teff, "teff_k_err": teff_err, "teff_source": teff_source,
        "logl_lsun": logl, "logl_lsun_err": logl_err, "logl_source": logl_source,
        "radius_rsun": radius, "radius_source": radius_source,
        "feh": feh, "feh_err": feh_err,
        "feh_source": np.where(has_feh, "catalog", "assumed solar").astype(object),
        "ebv_used": ebv, "ebv_source": ebv_source,
        "a_g_mag": a_g, "a_v_mag": a_v, "deriv_note": notes,
    }, index=df.index)
