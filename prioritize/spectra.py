"""Spectroscopy: Li line strengths, line widths, EW errors and the lines worth taking.

Everything here is a pure, vectorised numpy function (arrays in, arrays out; bare
floats carry their unit in the argument name).  The numbers are planning estimates:
they say roughly how strong a line will be and what S/N it needs, not what a
spectrum will show.

Contents
--------
- :func:`ew_li6708_mA`, :func:`ew_li6104_mA` -- equivalent widths of the Li I
  resonance doublet and subordinate line from a compact fit to a published 3D
  non-LTE grid; :func:`ew_model_valid` says where the fit holds.
- :func:`curve_of_growth_slope`, :func:`a_li_error_from_ew_error` -- from an EW error
  to an abundance error.
- :func:`line_fwhm_angstrom` -- the observed width of
  the Li feature.
- :func:`sigma_ew_mA`, :func:`snr_needed` -- the Cayrel (1988) EW error and its inverse.
- :data:`DIAGNOSTIC_LINES`, :func:`lines_to_measure` -- the lines and features worth
  taking in the same exposure, and whether an instrument covers and reaches them.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING

import astropy.constants as const
import astropy.units as u
import numpy as np

from .constants import K_B_CGS
from .errors import PrioritizeError
from .rotation import rotational_fwhm_angstrom

if TYPE_CHECKING:
    from .instruments import Instrument

C_KMS = const.c.to_value(u.km / u.s)    # speed of light (km/s), via astropy
AMU_G = u.u.to(u.g)                     # atomic mass unit (g), CODATA via astropy
MASS_LI7_U = 7.016003                   # 7Li atomic mass (u), AME2016 (Wang et al. 2017)

LI6708_WAVELENGTH_A = 6707.8            # gf-weighted centre of the 7Li doublet (air), from the components
# Li I 2s 2S1/2 - 2p 2P3/2, 2P1/2 (air wavelengths) and their absorption oscillator strengths
# (log gf = -0.002, -0.303): NIST Atomic Spectra Database (Kramida et al.), values from the
# calculations of Yan, Tambasco & Drake 1998, Phys. Rev. A 57, 1652 [from memory]; the 2:1
# ratio of the fine-structure components is exact in LS coupling.
LI6708_COMPONENTS_A = (6707.761, 6707.912)   # doublet components (air)
LI6708_COMPONENT_F = (0.4982, 0.2491)        # oscillator strengths f_ik
LI6708_LOG_GF = 0.17                    # total log gf of the doublet: log10 of the summed g f (g = 2)
LI6104_WAVELENGTH_A = 6103.6            # Li I 2p-3d subordinate line (air), from memory
LI6104_LOG_GF = 0.58                    # total log gf, from memory
LI6104_CHI_EV = 1.848                   # lower-level excitation potential (eV), from memory

CAYREL_COEFFICIENT = 1.5                # sigma_EW = 1.5 sqrt(FWHM dx) / (S/N), Cayrel 1988
DEFAULT_MICROTURBULENCE_KMS = 1.3       # typical of FGK dwarfs (~1.0-1.2) and giants (~1.3-1.5) [M]
DEFAULT_LIMB_DARKENING = 0.6            # linear limb-darkening coefficient near 6700 A for FGK stars [M]
GIANT_LOGG = 3.5                        # below this, giant-only diagnostics (CN, C2, [O I]) apply

# --- Compact fit to the 3D non-LTE Li 6708 grid (see ew_li6708_mA) -------------
# Weak-line part: log10 W_weak = sum of the terms below (theta = 5040/Teff).
_WEAK = dict(const=-7.75424, a_li=1.01774, theta=9.02131, logg=0.307627, feh=-0.156733,
             theta2=-1.20097, theta_logg=-0.222952, logg2=-0.00926031, feh_theta=0.0954874)
# Saturation scale: log10 W_s (mA), with x = log10(Teff/5000) and gamma = logg - 3.5.
_SATURATION = dict(const=2.60279, x=-0.0731633, gamma=0.0151908, feh=-0.0141605,
                   x2=2.92189, gamma2=0.010361, x_gamma=-0.276475)
_TRANSITION_Q = 0.807796
# Onset of the damping (square-root) part of the curve of growth: log10 y_d.
_DAMPING = dict(const=2.07413, x=-1.2431, gamma=-0.117777)
# Li 6104: weak-line scaling from the 6708 line plus a fitted 3D non-LTE offset.
_LI6104_OFFSET = dict(const=-0.270304, theta=-0.375353)
_LI6104_SATURATION = dict(const=2.59546, x=0.124973)
_LI6104_TRANSITION_Q = 0.785475

# Model domain (inside the Stagger grid of Wang et al. 2021 as sampled by breidablik).
TEFF_MIN_K, TEFF_MAX_K = 4000.0, 7000.0
LOGG_MIN, LOGG_MAX = 1.5, 5.0
FEH_MIN, FEH_MAX = -1.0, 0.25
A_LI_MIN, A_LI_MAX = -0.5, 4.0
EW_ACCURATE_MAX_MA = 300.0              # below this the fit reproduces the grid A(Li) to 0.1 dex


def _arrays(*values):
    return np.broadcast_arrays(*(np.asarray(v, dtype=float) for v in values))


def _require(condition: np.ndarray, message: str) -> None:
    """Raise a package error if any finite entry breaks ``condition`` (NaN passes through)."""
    if np.any(~condition):
        raise PrioritizeError(message)


def ew_model_valid(teff, logg, feh):
    """Where the Li equivalent-width fit holds (boolean array).

    The domain follows the coverage of the 3D model-atmosphere grid the fit was made
    to: 4000-7000 K, log g 1.5-5.0, [Fe/H] -1.0 to +0.25, with the hot edge rising
    with gravity (T_max = 4600 K below log g 2; 5500 K at log g 2-3; then +1000 K per
    dex of log g up to 7000 K) and dwarfs (log g > 2.75) starting at 4500 K.

    Parameters
    ----------
    teff : array_like
        Effective temperature (K).
    logg : array_like
        Surface gravity, log10(g / cm s^-2).
    feh : array_like
        [Fe/H] (dex).

    Returns
    -------
    numpy.ndarray of bool

    References
    ----------
    Wang E. X. et al. 2021, MNRAS 500, 2159 (the grid and its coverage).
    """
    teff, logg, feh = _arrays(teff, logg, feh)
    t_max = np.where(logg < 2.0, 4600.0, np.clip(5500.0 + 1000.0 * (logg - 3.0), 5500.0, TEFF_MAX_K))
    t_min = np.where(logg <= 2.75, TEFF_MIN_K, 4500.0)
    return ((teff >= t_min) & (teff <= t_max) & (logg >= LOGG_MIN) & (logg <= LOGG_MAX)
            & (feh >= FEH_MIN) & (feh <= FEH_MAX))


def _log_weak_ew_li6708(teff, logg, feh, a_li):
    theta = 5040.0 / teff
    w = _WEAK
    return (w["const"] + w["a_li"] * a_li + w["theta"] * theta + w["logg"] * logg + w["feh"] * feh
            + w["theta2"] * theta**2 + w["theta_logg"] * theta * logg + w["logg2"] * logg**2
            + w["feh_theta"] * feh * theta)


def _li6708_parts(teff, logg, feh, a_li):
    """Return (y, W_s, y_d): weak-line strength in units of the saturation scale."""
    x = np.log10(teff / 5000.0)
    gamma = logg - 3.5
    s = _SATURATION
    log_ws = (s["const"] + s["x"] * x + s["gamma"] * gamma + s["feh"] * feh + s["x2"] * x**2
              + s["gamma2"] * gamma**2 + s["x_gamma"] * x * gamma)
    d = _DAMPING
    y_d = 10.0 ** (d["const"] + d["x"] * x + d["gamma"] * gamma)
    y = 10.0 ** (_log_weak_ew_li6708(teff, logg, feh, a_li) - log_ws)
    return y, 10.0**log_ws, y_d


def _saturating(y, q):
    """The Doppler-core saturation law y / (1 + y^q)^(1/q)."""
    return y / (1.0 + y**q) ** (1.0 / q)


def ew_li6708_mA(teff, logg, feh, a_li):
    """Equivalent width of the Li I 6708 A resonance doublet (3D non-LTE), in mA.

    A compact curve of growth:

    - weak line: log10 W_weak = c0 + c1 A(Li) + c2 theta + c3 log g + c4 [Fe/H]
      + c5 theta^2 + c6 theta log g + c7 (log g)^2 + c8 [Fe/H] theta, theta = 5040/Teff
      (weak-line theory gives c1 = 1 and a theta slope of I - chi - 0.754 = 4.64 for a
      mostly ionised species; the fit finds 1.018 and an equivalent local slope);
    - saturation: with y = W_weak / W_s,
      W = sqrt( [W_s y / (1 + y^q)^(1/q)]^2 + W_s^2 y^2 / (y_d (1 + y)) ),
      a Doppler core that flattens at W_s joined to a damping part growing as sqrt(y);
      log10 W_s and log10 y_d are low-order polynomials in log10(Teff/5000), log g - 3.5
      and [Fe/H].

    The 20 coefficients were fitted by least squares, in abundance units (residual in
    log W divided by the local curve-of-growth slope), to 3D non-LTE equivalent widths
    from the ``breidablik`` 1.5.1 interpolator of the Wang et al. (2021) grid, sampled
    every 125 K, 0.25 dex in log g, at [Fe/H] = -1, -0.5, -0.25, 0, +0.25 and every
    0.125 dex in A(Li) from -0.5 to 4.0, inside :func:`ew_model_valid`.

    Accuracy (measured): A(Li) recovered from the grid within 0.09 dex for
    W <= 300 mA (rms 0.02 dex), 0.15 dex to 400 mA, 0.25 dex to 500 mA; the EW table
    in tests/test_spectra.py (``breidablik``, Wang et al. 2021) is matched within 0.04 dex.
    Outside :func:`ew_model_valid` the
    function extrapolates; callers should flag such rows.

    Parameters
    ----------
    teff : array_like
        Effective temperature (K); fitted for 4000-7000 K.
    logg : array_like
        log10 surface gravity (cgs); fitted for 1.5-5.0.
    feh : array_like
        [Fe/H] (dex); fitted for -1.0 to +0.25.
    a_li : array_like
        A(Li) = 12 + log10(N_Li/N_H); fitted for -0.5 to 4.0.

    Returns
    -------
    numpy.ndarray
        Equivalent width (mA), a planning estimate.

    References
    ----------
    Wang E. X., Nordlander T., Asplund M. et al. 2021, MNRAS 500, 2159 (3D non-LTE grid).
    Gray D. F., *The Observation and Analysis of Stellar Photospheres*, 3rd ed.,
    ch. 16 (curve of growth).
    """
    teff, logg, feh, a_li = _arrays(teff, logg, feh, a_li)
    y, w_s, y_d = _li6708_parts(teff, logg, feh, a_li)
    core = w_s * _saturating(y, _TRANSITION_Q)
    return np.sqrt(core**2 + w_s**2 * y**2 / (y_d * (1.0 + y)))


def a_li_for_weak_ew(teff, logg, feh, ew_mA):
    """A(Li) whose Li 6708 line has equivalent width ``ew_mA`` in the weak-line regime.

    The exact inverse of the weak-line part of :func:`ew_li6708_mA` (linear in A(Li)):
    A = (log10 W - [c0 + c2 theta + ...]) / c1.  Accurate where W is far below the
    saturation scale (~400-500 mA), i.e. for detection limits of a few mA; used for
    the A(Li) below which a baseline population is a set of upper limits.

    Parameters
    ----------
    teff, logg, feh : array_like
        Effective temperature (K), log10 g (cgs), [Fe/H] (dex).
    ew_mA : array_like
        Equivalent width (mA), > 0.

    Returns
    -------
    numpy.ndarray
        A(Li) (dex); a planning estimate.

    References
    ----------
    Wang E. X. et al. 2021, MNRAS 500, 2159 (the grid the fit follows).
    """
    teff, logg, feh, ew = _arrays(teff, logg, feh, ew_mA)
    rest = _log_weak_ew_li6708(teff, logg, feh, np.zeros_like(teff))
    with np.errstate(divide="ignore", invalid="ignore"):
        return (np.log10(ew) - rest) / _WEAK["a_li"]


def curve_of_growth_slope(teff, logg, feh, a_li):
    """Slope s = d log10 W / d A(Li) of the Li 6708 curve of growth.

    Analytic derivative of :func:`ew_li6708_mA`: with S the Doppler-core term and D the
    damping term (W^2 = S^2 + D^2),
    s = c1 [S^2/(1 + y^q) + D^2 (1 - y/(2(1 + y)))] / W^2.
    s = c1 ~ 1 for weak lines and falls towards 0.1-0.3 on the flat part.

    Parameters
    ----------
    teff, logg, feh, a_li : array_like
        As in :func:`ew_li6708_mA`.

    Returns
    -------
    numpy.ndarray
        Dimensionless slope.

    References
    ----------
    Gray D. F., *The Observation and Analysis of Stellar Photospheres*, 3rd ed., ch. 16.
    """
    teff, logg, feh, a_li = _arrays(teff, logg, feh, a_li)
    y, w_s, y_d = _li6708_parts(teff, logg, feh, a_li)
    core2 = (w_s * _saturating(y, _TRANSITION_Q)) ** 2
    damp2 = w_s**2 * y**2 / (y_d * (1.0 + y))
    dlnw_dlny = (core2 / (1.0 + y**_TRANSITION_Q) + damp2 * (1.0 - y / (2.0 * (1.0 + y)))) / (core2 + damp2)
    return _WEAK["a_li"] * dlnw_dlny


def ew_li6104_mA(teff, logg, feh, a_li):
    """Equivalent width of the Li I 6103.6 A subordinate line (3D non-LTE), in mA.

    Weak-line scaling from the 6708 line (both lines of neutral Li; W/lambda is
    proportional to lambda gf 10^(-theta chi)):
    log10 W_weak(6104) = log10 W_weak(6708) + 2 log10(6103.6/6707.8) + (0.58 - 0.17)
    - 1.848 theta + d0 + d1 (theta - 1),
    where d0 + d1 (theta - 1) is a fitted 3D non-LTE offset (about -0.27 dex), then the
    saturation law W = W_s y / (1 + y^q)^(1/q) with log10 W_s = a + b log10(Teff/5000).
    Fitted to the ``breidablik`` 1.5.1 3D non-LTE model of this line over the domain
    of :func:`ew_model_valid`, W(6104) <= 250 mA: within 0.08 dex (rms 0.02 dex).
    The line is useful only when A(Li) >~ 2.5 in cool giants.

    Parameters
    ----------
    teff, logg, feh, a_li : array_like
        As in :func:`ew_li6708_mA`.

    Returns
    -------
    numpy.ndarray
        Equivalent width (mA), a planning estimate.

    References
    ----------
    Wang E. X. et al. 2021, MNRAS 500, 2159 (3D non-LTE grid for 6104 and 6708).
    Gray D. F., *The Observation and Analysis of Stellar Photospheres*, 3rd ed., ch. 16.
    """
    teff, logg, feh, a_li = _arrays(teff, logg, feh, a_li)
    theta = 5040.0 / teff
    offset = _LI6104_OFFSET["const"] + _LI6104_OFFSET["theta"] * (theta - 1.0)
    log_weak = (_log_weak_ew_li6708(teff, logg, feh, a_li)
                + 2.0 * np.log10(LI6104_WAVELENGTH_A / LI6708_WAVELENGTH_A)
                + (LI6104_LOG_GF - LI6708_LOG_GF) - LI6104_CHI_EV * theta + offset)
    log_ws = _LI6104_SATURATION["const"] + _LI6104_SATURATION["x"] * np.log10(teff / 5000.0)
    w_s = 10.0**log_ws
    return w_s * _saturating(10.0 ** (log_weak - log_ws), _LI6104_TRANSITION_Q)


def a_li_error_from_ew_error(sigma_ew_mA, ew_mA, cog_slope=1.0):
    """Abundance error from an equivalent-width error (linear propagation).

    sigma_A = log10(e) sigma_EW / (EW s), with s = d log10 EW / d A(Li)
    (s = 1 for weak lines; :func:`curve_of_growth_slope` for the 6708 line).
    Valid while sigma_EW << EW; for a marginal detection the error is asymmetric.

    Parameters
    ----------
    sigma_ew_mA : array_like
        EW uncertainty (mA).
    ew_mA : array_like
        Equivalent width (mA), > 0.
    cog_slope : array_like, optional
        Curve-of-growth slope s (> 0).

    Returns
    -------
    numpy.ndarray
        sigma A(Li) in dex.

    References
    ----------
    Cayrel R. 1988, IAU Symp. 132, p. 345; Gray D. F., *The Observation and Analysis of
    Stellar Photospheres*, 3rd ed., ch. 16.
    """
    sigma_ew_mA, ew_mA, cog_slope = _arrays(sigma_ew_mA, ew_mA, cog_slope)
    _require(~(ew_mA <= 0), "a_li_error_from_ew_error: ew_mA must be positive")
    _require(~(cog_slope <= 0), "a_li_error_from_ew_error: cog_slope must be positive")
    return math.log10(math.e) * sigma_ew_mA / (ew_mA * cog_slope)


def _doublet_fwhm(separation_a: float, weights: tuple[float, float]) -> float:
    """FWHM of the Gaussian with the same second moment as two lines of given weights."""
    w1, w2 = weights
    return 2.0 * math.sqrt(2.0 * math.log(2.0)) * math.sqrt(w1 * w2) / (w1 + w2) * separation_a


LI6708_DOUBLET_FWHM_A = _doublet_fwhm(LI6708_COMPONENTS_A[1] - LI6708_COMPONENTS_A[0],
                                      LI6708_COMPONENT_F)
"""Width added in quadrature for the unresolved 7Li doublet (0.151 A apart, weights 2:1):
the FWHM of a Gaussian with the blend's second moment, 2 sqrt(2 ln 2) sqrt(w1 w2)/(w1 + w2) d
= 0.168 A."""


def line_fwhm_angstrom(resolving_power, teff, vsini_kms, wavelength=LI6708_WAVELENGTH_A,
                       intrinsic_fwhm=LI6708_DOUBLET_FWHM_A,
                       microturbulence_kms=DEFAULT_MICROTURBULENCE_KMS,
                       atomic_mass_u=MASS_LI7_U, limb_darkening=DEFAULT_LIMB_DARKENING):
    """Observed FWHM of a line: instrument, thermal, rotation and intrinsic width.

    FWHM^2 = (lambda/R)^2 + FWHM_D^2 + FWHM_rot^2 + FWHM_intrinsic^2, with
    FWHM_D = 2 sqrt(ln 2) (lambda/c) sqrt(2 k T / m + xi^2) (Gaussian Doppler core of
    the atom of mass m with microturbulence xi) and
    FWHM_rot = f(eps) lambda v sin i / c (:func:`prioritize.rotation.rotational_fwhm_angstrom`, 1.56 for
    eps = 0.6).  Adding widths in quadrature is exact for Gaussians only; the
    rotational kernel is flatter, so for v sin i >> other widths the estimate is a
    planning approximation good to ~10%.  The default intrinsic width stands for the
    unresolved 7Li doublet (:data:`LI6708_DOUBLET_FWHM_A`); pass 0 for a single line.
    Saturation, damping wings and blends (Fe I 6707.4) are ignored.

    Parameters
    ----------
    resolving_power : array_like
        Spectrograph resolving power R = lambda / dlambda (> 0).
    teff : array_like
        Temperature for thermal broadening (K, > 0); the effective temperature is used
        as the line-forming temperature.
    vsini_kms : array_like
        Projected rotational velocity (km/s, >= 0).
    wavelength : float, optional
        Line wavelength (A).
    intrinsic_fwhm : float, optional
        Extra width added in quadrature (A).
    microturbulence_kms : float, optional
        Microturbulence (km/s); typical 1-1.5.
    atomic_mass_u : float, optional
        Mass of the absorbing atom (u); 7Li by default.
    limb_darkening : float, optional
        Linear limb-darkening coefficient for the rotational kernel.

    Returns
    -------
    numpy.ndarray
        FWHM (A).

    References
    ----------
    Gray D. F., *The Observation and Analysis of Stellar Photospheres*, 3rd ed.,
    ch. 11 (thermal and microturbulent broadening), ch. 18 (rotation).
    """
    resolving_power, teff, vsini_kms = _arrays(resolving_power, teff, vsini_kms)
    _require(~(resolving_power <= 0), "line_fwhm_angstrom: resolving_power must be positive")
    _require(~(teff <= 0), "line_fwhm_angstrom: teff must be positive (K)")
    _require(~(vsini_kms < 0), "line_fwhm_angstrom: vsini_kms must not be negative")
    instrumental = wavelength / resolving_power
    doppler_kms = np.sqrt(2.0 * K_B_CGS * teff / (atomic_mass_u * AMU_G) / 1e10 + microturbulence_kms**2)
    thermal = 2.0 * math.sqrt(math.log(2.0)) * wavelength * doppler_kms / C_KMS
    rotational = rotational_fwhm_angstrom(vsini_kms, wavelength, limb_darkening)
    return np.sqrt(instrumental**2 + thermal**2 + rotational**2 + intrinsic_fwhm**2)


def sigma_ew_mA(snr, fwhm_A, pixel_A):
    """EW uncertainty from photon noise (Cayrel 1988), in mA.

    sigma_EW = 1.5 sqrt(FWHM dx) / (S/N), with FWHM the line's width and dx the pixel
    size (both A) and S/N per pixel.  The 1.5 is the Gaussian value
    sqrt(3) (pi/(8 ln 2))^(1/4) = 1.503.  Continuum-placement error is not included
    (add it in quadrature).

    Parameters
    ----------
    snr : array_like
        Signal-to-noise ratio per pixel in the continuum (> 0).
    fwhm_A : array_like
        Line FWHM (A, > 0).
    pixel_A : array_like
        Pixel width (A, > 0).

    Returns
    -------
    numpy.ndarray
        sigma_EW (mA).

    References
    ----------
    Cayrel R. 1988, in IAU Symp. 132, *The Impact of Very High S/N Spectroscopy on
    Stellar Physics*, p. 345.
    """
    snr, fwhm_A, pixel_A = _arrays(snr, fwhm_A, pixel_A)
    _require(~(snr <= 0), "sigma_ew_mA: snr must be positive")
    _require(~((fwhm_A <= 0) | (pixel_A <= 0)), "sigma_ew_mA: fwhm_A and pixel_A must be positive")
    return 1000.0 * CAYREL_COEFFICIENT * np.sqrt(fwhm_A * pixel_A) / snr


def snr_needed(delta_ew_mA, fwhm_A, pixel_A, k_sigma=3.0, n_obs_difference=False):
    """S/N per pixel needed to detect an EW difference at k sigma (Cayrel 1988).

    S/N = k 1.5 sqrt(FWHM dx) / dEW, times sqrt(2) when the difference is between
    two spectra of equal S/N (``n_obs_difference=True``); for a single spectrum
    against a model the model's error is neglected.

    Parameters
    ----------
    delta_ew_mA : array_like
        EW difference to detect (mA, > 0): e.g. EW(enriched) - EW(baseline).
    fwhm_A : array_like
        Line FWHM (A), e.g. from :func:`line_fwhm_angstrom`.
    pixel_A : array_like
        Pixel width (A).
    k_sigma : float, optional
        Significance of the detection.
    n_obs_difference : bool, optional
        True when two observations are differenced.

    Returns
    -------
    numpy.ndarray
        S/N per pixel in the continuum near the line; inf where delta_ew_mA is 0.

    References
    ----------
    Cayrel R. 1988, IAU Symp. 132, p. 345.
    """
    delta_ew_mA, fwhm_A, pixel_A = _arrays(delta_ew_mA, fwhm_A, pixel_A)
    _require(~(delta_ew_mA < 0), "snr_needed: delta_ew_mA must not be negative")
    _require(~((fwhm_A <= 0) | (pixel_A <= 0)), "snr_needed: fwhm_A and pixel_A must be positive")
    if not k_sigma > 0:
        raise PrioritizeError(f"snr_needed: k_sigma must be positive, got {k_sigma!r}")
    factor = math.sqrt(2.0) if n_obs_difference else 1.0
    with np.errstate(divide="ignore"):
        return factor * k_sigma * 1000.0 * CAYREL_COEFFICIENT * np.sqrt(fwhm_A * pixel_A) / delta_ew_mA


# --- Lines worth taking in the same exposure ------------------------------------

@dataclass(frozen=True)
class DiagnosticLine:
    """One line or feature of :data:`DIAGNOSTIC_LINES`.

    ``min_snr`` is the S/N per pixel at 6708 A and ``min_resolving_power`` the R under
    which the feature is rarely usable (common practice, order of magnitude);
    for the Li lines the reach is computed from the predicted EW instead.
    """

    key: str
    label: str
    wavelength_angstrom: float
    species: str
    tells: str
    source: str
    giants_only: bool = False
    min_snr: float = 0.0
    min_resolving_power: float = 0.0


_TC = "refractory abundance for the condensation-temperature slope"
_TC_SOURCE = ("Melendez et al. 2009 ApJ 704, L66; Spina et al. 2021 Nat. Astron. 5, 1163; "
              "condensation temperatures from Lodders 2003 ApJ 591, 1220")
# Refractory lines near Li 6708 (air wavelengths, A): key, wavelength, species.
_REFRACTORY_LINES = (
    ("fe6703", 6703.57, "Fe I"), ("fe6705", 6705.10, "Fe I"), ("fe6710", 6710.32, "Fe I"),
    ("fe6713", 6713.74, "Fe I"), ("ca6717", 6717.68, "Ca I"), ("al6696", 6696.02, "Al I"),
    ("al6698", 6698.67, "Al I"), ("si6721", 6721.848, "Si I"), ("ni6643", 6643.63, "Ni I"),
    ("ni6767", 6767.77, "Ni I"),
)

DIAGNOSTIC_LINES: tuple[DiagnosticLine, ...] = (
    DiagnosticLine("li6708", "Li I 6707.8", 6707.8, "Li I",
                   "lithium abundance: the engulfment signature",
                   "Wang et al. 2021 MNRAS 500, 2159 (3D non-LTE)"),
    DiagnosticLine("li6104", "Li I 6103.6", 6103.6, "Li I",
                   "lithium abundance from an unsaturated line when Li is high",
                   "Wang et al. 2021 MNRAS 500, 2159 (3D non-LTE); line data from memory"),
    DiagnosticLine("li6_li7", "6Li/7Li (6708 profile)", 6708.0, "Li I",
                   "6Li survives only briefly: any 6Li points to fresh accretion",
                   "Israelian et al. 2001 Nature 411, 163",
                   min_snr=400.0, min_resolving_power=100000.0),
    DiagnosticLine("vsini", "v sin i (line widths)", 6708.0, "many",
                   "rotation: spin-up by the engulfed planet's angular momentum",
                   "Carlberg et al. 2009 ApJ 700, 832; Carlberg et al. 2011 ApJ 732, 39",
                   min_snr=30.0, min_resolving_power=20000.0),
    DiagnosticLine("c13n8004", "13CN 8004.7", 8004.7, "13CN",
                   "12C/13C: a normal ratio with high Li favours engulfment over internal Li production",
                   "from memory", giants_only=True, min_snr=100.0, min_resolving_power=40000.0),
    DiagnosticLine("cn8000", "CN 7995-8010", 8000.0, "12CN",
                   "[C/N] after first dredge-up (mass and mixing)", "from memory",
                   giants_only=True, min_snr=80.0, min_resolving_power=20000.0),
    DiagnosticLine("c2_5135", "C2 5135", 5135.0, "C2", "carbon abundance for [C/N]", "from memory",
                   giants_only=True, min_snr=60.0, min_resolving_power=20000.0),
    DiagnosticLine("c2_5635", "C2 5635", 5635.0, "C2", "carbon abundance for [C/N]", "from memory",
                   giants_only=True, min_snr=60.0, min_resolving_power=20000.0),
    DiagnosticLine("oi6300", "[O I] 6300.3", 6300.3, "[O I]",
                   "oxygen, needed to turn CN and C2 strengths into C and N", "from memory",
                   giants_only=True, min_snr=100.0, min_resolving_power=40000.0),
    DiagnosticLine("be3130", "Be II 3130.4", 3130.42, "Be II",
                   "beryllium burns at 3.5 MK: Be with Li separates accretion from production",
                   "Asplund et al. 2009 ARA&A 47, 481 (A(Be)); burning temperature from memory; "
                   "the blue flux of F-K stars is far below that at 6708 A, hence "
                   "the high S/N asked at 6708 A", min_snr=300.0, min_resolving_power=30000.0),
) + tuple(
    DiagnosticLine(key, f"{species} {wavelength:.1f}", wavelength, species, _TC, _TC_SOURCE,
                   min_snr=150.0, min_resolving_power=40000.0)
    for key, wavelength, species in _REFRACTORY_LINES
)
"""Lines and features worth taking with Li 6708: wavelength (A, air), species, what it
tells about engulfment, and the source.  Reach thresholds are common practice [M]."""

SHORT_SNR_NOTE = " (S/N short)"
SHORT_RESOLUTION_NOTE = " (R short)"


def lines_to_measure(teff, logg, a_li_enriched, snr_planned, instrument: Instrument, *,
                     feh=0.0, vsini_kms=0.0, k_sigma=3.0):
    """The diagnostic lines worth taking for each star, and those the instrument misses.

    Per star, from :data:`DIAGNOSTIC_LINES`: Li 6708 always; Li 6104 only when its
    predicted EW at the enriched abundance reaches k sigma_EW at the planned S/N;
    CN, 13CN, C2 and [O I] for giants (log g < 3.5); Be II 3130, the refractory lines
    near 6700 A and v sin i for every star.  A line is *covered* when its wavelength
    lies inside the instrument's simultaneous coverage.  A covered line that is not
    reachable is listed with the suffix " (S/N short)" (planned S/N below its
    threshold; for Li 6708, enriched EW below k sigma_EW) or " (R short)" (resolving
    power below its threshold).  Thresholds are common practice and planning
    estimates.

    Parameters
    ----------
    teff, logg : array_like
        Effective temperature (K) and log g (cgs), one entry per star.
    a_li_enriched : array_like
        A(Li) the star would show after engulfment.
    snr_planned : array_like
        Planned S/N per pixel at 6708 A.
    instrument : Instrument
        Provides coverage, resolving power and pixel sampling.
    feh : array_like, optional
        [Fe/H] (dex).
    vsini_kms : array_like, optional
        v sin i (km/s) for the Li line width.
    k_sigma : float, optional
        Detection significance for the Li lines.

    Returns
    -------
    lines : list of list of str
        Per star, labels of the covered diagnostics (with reach suffixes).
    coverage_missing : list of list of str
        Per star, labels of the diagnostics that apply but fall outside the coverage.

    References
    ----------
    Cayrel R. 1988, IAU Symp. 132, p. 345; Wang et al. 2021, MNRAS 500, 2159; each line's
    own source in :data:`DIAGNOSTIC_LINES`.
    """
    teff, logg, a_li, snr, feh, vsini = _arrays(teff, logg, a_li_enriched, snr_planned, feh, vsini_kms)
    teff, logg, a_li, snr, feh, vsini = (np.atleast_1d(v) for v in (teff, logg, a_li, snr, feh, vsini))
    _require(~(snr <= 0), "lines_to_measure: snr_planned must be positive")
    resolving_power = instrument.resolving_power
    pixel_6708 = instrument.pixel_width_angstrom(LI6708_WAVELENGTH_A)
    pixel_6104 = instrument.pixel_width_angstrom(LI6104_WAVELENGTH_A)
    width_6708 = line_fwhm_angstrom(resolving_power, teff, vsini)
    width_6104 = line_fwhm_angstrom(resolving_power, teff, vsini, wavelength=LI6104_WAVELENGTH_A,
                                    intrinsic_fwhm=0.0)
    li6708_reached = ew_li6708_mA(teff, logg, feh, a_li) >= k_sigma * sigma_ew_mA(snr, width_6708, pixel_6708)
    li6104_detectable = ew_li6104_mA(teff, logg, feh, a_li) >= k_sigma * sigma_ew_mA(snr, width_6104, pixel_6104)
    giant = logg < GIANT_LOGG

    lines: list[list[str]] = [[] for _ in range(teff.size)]
    missing: list[list[str]] = [[] for _ in range(teff.size)]
    for line in DIAGNOSTIC_LINES:
        if line.key == "li6708":
            applies, reached = np.ones(teff.size, bool), li6708_reached
        elif line.key == "li6104":
            applies, reached = li6104_detectable, np.ones(teff.size, bool)
        else:
            applies = giant if line.giants_only else np.ones(teff.size, bool)
            reached = snr >= line.min_snr
        resolved = resolving_power >= line.min_resolving_power
        covered = bool(instrument.covers(line.wavelength_angstrom))
        for i in np.flatnonzero(applies):
            if not covered:
                missing[i].append(line.label)
            elif not resolved:
                lines[i].append(line.label + SHORT_RESOLUTION_NOTE)
            elif not reached[i]:
                lines[i].append(line.label + SHORT_SNR_NOTE)
            else:
                lines[i].append(line.label)
    return lines, missing
