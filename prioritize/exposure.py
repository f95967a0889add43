"""Exposure time: photons at 6708 A from a star's magnitude, and the CCD equation.

The public functions take numpy arrays (one entry per star) and accept astropy
Quantities for every dimensional argument (areas in m^2 or cm^2, diameters in any
length, times in any time unit, pixel widths in A or nm, throughputs as fractions or
percent); bare floats are read in the unit named in the argument's description.
Inside, everything is a plain float in cgs/A/s.

All exposure times are planning estimates; the observatory's own exposure-time
calculator and rules prevail.

Contents
--------
- :func:`r_c_from_v`, :func:`r_c_from_gaia` -- Cousins R from V and B-V, or Gaia G and BP-RP.
- :func:`collecting_area_cm2` -- a telescope's unobstructed area.
- :func:`photon_flux_6708` -- stellar photons at 6708 A after interstellar and
  atmospheric extinction.
- :func:`sky_rate_per_pixel`, :func:`signal_rate_per_pixel` -- count rates per pixel.
- :func:`snr_for_exposure`, :func:`exposure_for_snr` -- the CCD equation and its exact
  inverse.
- :func:`clip_exposure`, :func:`plan_exposure` -- floor, ceiling and overheads for an
  :class:`~prioritize.instruments.Instrument`.
"""

from __future__ import annotations

import math
import warnings
from typing import TYPE_CHECKING, NamedTuple

import astropy.constants as const
import astropy.units as u
import numpy as np

from .errors import PrioritizeError, PrioritizeWarning
from .spectra import LI6708_WAVELENGTH_A, _require
from .stars.photometry import A_6708_OVER_A_V

if TYPE_CHECKING:
    from .instruments import Instrument

F_LAMBDA_RC_ZERO = 217.7e-11   # erg s^-1 cm^-2 A^-1 at R_C = 0; Bessell, Castelli & Plez 1998, Table A2
PHOTONS_RC_ZERO_6708 = F_LAMBDA_RC_ZERO / (const.h.cgs.value * const.c.cgs.value / (LI6708_WAVELENGTH_A * 1e-8))
"""Photons s^-1 cm^-2 A^-1 at 6708 A for R_C = 0 (735; Bessell, Castelli & Plez 1998, Table A2)."""
DEFAULT_EXTINCTION_COEFF = 0.07  # mag per airmass near 6700 A at a good site (ESO La Silla; Buton et al. 2013)

# Cousins R from V: V - R_C = 0.508 (B - V) + 0.040, for 0.3 < B - V < 0.9.
_V_MINUS_RC = (0.040, 0.508)
_B_V_RANGE = (0.3, 0.9)
# Gaia EDR3: G - R_C as a polynomial in x = BP - RP, valid 0 < x < 4 (Riello et al. 2021).
_G_MINUS_RC = (-0.02275, 0.3961, -0.1243, -0.01396, 0.003775)
_BP_RP_RANGE = (0.0, 4.0)

EXPOSURE_OK = "ok"
EXPOSURE_AT_FLOOR = "floor"       # the S/N is reached sooner; the exposure is raised to the floor
EXPOSURE_AT_CEILING = "ceiling"   # the S/N is not reached within the longest exposure allowed


def _value(quantity, unit, name: str, function: str):
    """A Quantity converted to ``unit``, or a bare number read in ``unit``, as a float array."""
    if isinstance(quantity, u.Quantity):
        try:
            return np.asarray(quantity.to_value(unit), dtype=float)
        except u.UnitConversionError as exc:
            raise PrioritizeError(f"{function}: {name} must be in units convertible to "
                                  f"'{unit}', got '{quantity.unit}'") from exc
    try:
        return np.asarray(quantity, dtype=float)
    except (TypeError, ValueError) as exc:
        raise PrioritizeError(f"{function}: {name} must be a number or an astropy Quantity, "
                              f"got {quantity!r}") from exc


def _count_value(quantity, unit, name: str, function: str):
    """Like :func:`_value` for counts: a Quantity may carry ``electron`` or not."""
    if isinstance(quantity, u.Quantity) and quantity.unit.is_equivalent(u.electron * unit):
        quantity = quantity / u.electron
    return _value(quantity, unit, name, function)


def _warn_outside(colour, bounds, name: str, function: str) -> None:
    lo, hi = bounds
    outside = np.count_nonzero((colour < lo) | (colour > hi))
    if outside:
        warnings.warn(f"{function}: {outside} value(s) of {name} outside the calibrated range "
                      f"{lo} to {hi}; the relation is extrapolated there", PrioritizeWarning,
                      stacklevel=3)


def r_c_from_v(v, b_v):
    """Cousins R magnitude from Johnson V and B-V.

    R_C = V - (0.508 (B - V) + 0.040), a linear fit to Johnson-Cousins photometry of
    field stars, calibrated for 0.3 < B - V < 0.9 (a warning is issued outside it).
    Check: B - V = 0.653 (solar twin) gives V - R_C = 0.372, against 0.365 from the
    Gaia EDR3 relations at BP - RP = 0.82 (see the tests).  Use dereddened or
    observed colours consistently with the magnitude passed.

    Parameters
    ----------
    v : array_like
        Johnson V (mag).
    b_v : array_like
        B - V (mag).

    Returns
    -------
    numpy.ndarray
        R_C (mag).

    References
    ----------
    Skiff B. A., Johnson-Cousins BVRI photometry of faint field stars (LONEOS),
    Lowell Observatory, as compiled in the colour-conversion notes of aerith.net.
    """
    v, b_v = np.broadcast_arrays(np.asarray(v, dtype=float), np.asarray(b_v, dtype=float))
    _warn_outside(b_v, _B_V_RANGE, "b_v", "r_c_from_v")
    return v - (_V_MINUS_RC[0] + _V_MINUS_RC[1] * b_v)


def r_c_from_gaia(g, bp_rp):
    """Cousins R magnitude from Gaia (E)DR3 G and BP - RP.

    G - R_C = -0.02275 + 0.3961 x - 0.1243 x^2 - 0.01396 x^3 + 0.003775 x^4,
    x = BP - RP, valid for 0 < x < 4 (a warning is issued outside it).

    Parameters
    ----------
    g : array_like
        Gaia G (mag).
    bp_rp : array_like
        G_BP - G_RP (mag).

    Returns
    -------
    numpy.ndarray
        R_C (mag).

    References
    ----------
    Riello M. et al. 2021, A&A 649, A3, Tables C.1 (range) and C.2 (coefficients);
    Gaia EDR3 documentation, photometric relationships with other systems.
    """
    g, bp_rp = np.broadcast_arrays(np.asarray(g, dtype=float), np.asarray(bp_rp, dtype=float))
    _warn_outside(bp_rp, _BP_RP_RANGE, "bp_rp", "r_c_from_gaia")
    return g - np.polynomial.polynomial.polyval(bp_rp, _G_MINUS_RC)


R_C_SOURCES = ("catalog R_C", "G+BP-RP (Riello et al. 2021)", "V+B-V",
               "G+BP-RP from Teff (Casagrande et al. 2021)", "V+B-V from Teff (Casagrande et al. 2010)",
               "V+B-V from Teff (Alonso et al. 1999)", "")
"""How :func:`r_c_from_catalog` found R_C, in its order of preference ('' = no magnitude)."""


def r_c_from_catalog(*, r_mag, g_mag, bp_rp, v_mag, b_v, teff, logg, feh, ebv, giant):
    """Cousins R_C for the exposure from whatever photometry a star has.

    In order: a measured R_C; G with the observed BP-RP (:func:`r_c_from_gaia`); V with
    the observed B-V (:func:`r_c_from_v`); then, without the colour, G or V with the
    colour the star's Teff implies -- (BP-RP)_0 from Casagrande et al. 2021
    (:func:`~prioritize.stars.photometry.bp_rp_from_teff`) or (B-V)_0 from Casagrande
    et al. 2010 (dwarfs, subgiants) or Alonso et al. 1999 (giants)
    (:func:`~prioritize.stars.photometry.b_v_from_teff`), reddened by E(B-V) (Babusiaux
    et al. 2018 for Gaia; E(B-V) itself for B-V) to the observed colour.

    Parameters
    ----------
    r_mag, g_mag, bp_rp, v_mag, b_v : array_like
        Observed photometry (mag); NaN where absent.
    teff, logg, feh : array_like
        The star's adopted parameters (K, dex, dex).
    ebv : array_like
        E(B-V) (mag) used for the star.
    giant : array_like of bool
        Giants take the Alonso et al. (1999) B-V relation.

    Returns
    -------
    r_c : ndarray
        R_C (mag), NaN where nothing gives it.
    source : ndarray of str
        The entry of :data:`R_C_SOURCES` used.
    """
    from .stars.photometry import b_v_from_teff, bp_rp_from_teff, gaia_extinction_from_intrinsic

    arrays = np.broadcast_arrays(*(np.asarray(x, dtype=float) for x in
                                   (r_mag, g_mag, bp_rp, v_mag, b_v, teff, logg, feh, ebv)))
    r_mag, g_mag, bp_rp, v_mag, b_v, teff, logg, feh, ebv = arrays
    giant = np.broadcast_to(np.asarray(giant, dtype=bool), r_mag.shape)
    ebv0 = np.where(np.isfinite(ebv), ebv, 0.0)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PrioritizeWarning)   # colour ranges: the source says which relation
        from_gaia = r_c_from_gaia(g_mag, bp_rp)
        from_v = r_c_from_v(v_mag, b_v)
        bp_rp0 = bp_rp_from_teff(teff, np.where(np.isfinite(logg), logg, 4.0), feh).value
        reddening = gaia_extinction_from_intrinsic(ebv0, bp_rp0)
        from_g_teff = r_c_from_gaia(g_mag, bp_rp0 + reddening.a_bp - reddening.a_rp)
        from_v_teff = r_c_from_v(v_mag, b_v_from_teff(teff, feh, giant).value + ebv0)
    choices = [r_mag, from_gaia, from_v, from_g_teff, from_v_teff, from_v_teff]
    usable = [np.isfinite(c) for c in choices]
    usable[4] = usable[4] & ~giant
    usable[5] = usable[5] & giant
    pick = np.select(usable, np.arange(len(choices)), default=len(choices))
    value = np.select(usable, choices, default=np.nan)
    return value, np.array(R_C_SOURCES, dtype=object)[pick]


def collecting_area_cm2(diameter, central_obstruction=0.0):
    """Unobstructed collecting area pi/4 D^2 (1 - epsilon^2), in cm^2.

    Parameters
    ----------
    diameter : float, array_like or Quantity
        Primary diameter; bare numbers are metres.
    central_obstruction : float or array_like
        Secondary diameter / primary diameter, 0 to < 1.

    Returns
    -------
    numpy.ndarray
        Area (cm^2).
    """
    d_cm = _value(diameter, u.cm, "diameter", "collecting_area_cm2")
    if not isinstance(diameter, u.Quantity):
        d_cm = d_cm * 100.0
    obstruction = _value(central_obstruction, u.dimensionless_unscaled, "central_obstruction",
                         "collecting_area_cm2")
    _require(~(d_cm <= 0), "collecting_area_cm2: diameter must be positive")
    _require(~((obstruction < 0) | (obstruction >= 1)),
             "collecting_area_cm2: central_obstruction must lie in 0 to <1 (a diameter ratio)")
    return math.pi / 4.0 * d_cm**2 * (1.0 - obstruction**2)


def photon_flux_6708(r_c_mag, a_v=0.0, airmass=1.0, extinction_coeff=DEFAULT_EXTINCTION_COEFF):
    """Stellar photon flux at 6708 A reaching the telescope, photons s^-1 cm^-2 A^-1.

    n = 735 x 10^(-0.4 (R_C + 0.795 A_V + k X)).  The zero point is the R_C = 0 flux
    density of Bessell, Castelli & Plez (1998) divided by the photon energy at 6708 A;
    using the band's flux density at 6708 A assumes a flat spectrum across R_C (a few
    per cent for FGK stars).

    Parameters
    ----------
    r_c_mag : array_like
        Apparent Cousins R magnitude, not corrected for extinction (mag).
    a_v : array_like, optional
        Interstellar V-band extinction to add (mag); pass 0 if ``r_c_mag`` is observed.
    airmass : array_like, optional
        Airmass X (>= 1).
    extinction_coeff : array_like, optional
        Atmospheric extinction k near 6700 A (mag per airmass); 0.07 by default,
        0.10-0.15 with dust.

    Returns
    -------
    numpy.ndarray
        Photon flux density.

    References
    ----------
    Bessell M. S., Castelli F. & Plez B. 1998, A&A 333, 231, Table A2;
    Cardelli J. A., Clayton G. C. & Mathis J. S. 1989, ApJ 345, 245.
    """
    r_c_mag, a_v, airmass, k = np.broadcast_arrays(*(np.asarray(x, dtype=float) for x in
                                                    (r_c_mag, a_v, airmass, extinction_coeff)))
    _require(~(airmass < 1), "photon_flux_6708: airmass must be at least 1")
    _require(~(a_v < 0), "photon_flux_6708: a_v must not be negative")
    return PHOTONS_RC_ZERO_6708 * 10.0 ** (-0.4 * (r_c_mag + A_6708_OVER_A_V * a_v + k * airmass))


def signal_rate_per_pixel(r_c_mag, telescope_area, throughput, pixel_width, *, a_v=0.0,
                          airmass=1.0, extinction_coeff=DEFAULT_EXTINCTION_COEFF):
    """Detected stellar electrons per second in one spectral pixel at 6708 A.

    rate = n(6708) A_tel eta dlambda_pix (:func:`photon_flux_6708`).

    Parameters
    ----------
    r_c_mag : array_like
        Cousins R (mag).
    telescope_area : float, array_like or Quantity
        Collecting area; bare numbers are cm^2.
    throughput : float, array_like or Quantity
        Total efficiency (fraction 0-1, or a dimensionless/percent Quantity).
    pixel_width : float, array_like or Quantity
        Wavelength width of one pixel; bare numbers are A.
    a_v, airmass, extinction_coeff : array_like, optional
        As in :func:`photon_flux_6708`.

    Returns
    -------
    numpy.ndarray
        Electrons per second per spectral pixel.

    References
    ----------
    Bessell, Castelli & Plez 1998, A&A 333, 231 (zero point); the general CCD equation
    (e.g. Howell S. B., *Handbook of CCD Astronomy*, 2nd ed., ch. 4).
    """
    function = "signal_rate_per_pixel"
    area = _value(telescope_area, u.cm**2, "telescope_area", function)
    eta = _value(throughput, u.dimensionless_unscaled, "throughput", function)
    pixel = _value(pixel_width, u.AA, "pixel_width", function)
    _require(~(area <= 0), f"{function}: telescope_area must be positive")
    _require(~((eta <= 0) | (eta > 1)), f"{function}: throughput must lie in (0, 1]")
    _require(~(pixel <= 0), f"{function}: pixel_width must be positive")
    return photon_flux_6708(r_c_mag, a_v, airmass, extinction_coeff) * area * eta * pixel


def sky_rate_per_pixel(sky_mag_per_arcsec2, aperture_on_sky, telescope_area, throughput,
                       pixel_width, n_pix_spatial):
    """Sky electrons per second in one detector pixel (one spectral x one spatial pixel).

    S_sky = 735 x 10^(-0.4 mu) Omega A_tel eta dlambda_pix / n_pix, with mu the sky
    surface brightness in R_C mag arcsec^-2 and Omega the fibre or slit solid angle;
    the light of the aperture is spread over n_pix spatial pixels.

    Parameters
    ----------
    sky_mag_per_arcsec2 : array_like
        Sky brightness near 6708 A (R_C mag per square arcsecond); ~20.8 in a dark night.
    aperture_on_sky : float or Quantity
        Solid angle of the fibre or slit; bare numbers are arcsec^2.
    telescope_area, throughput, pixel_width :
        As in :func:`signal_rate_per_pixel`.
    n_pix_spatial : int or array_like
        Pixels across the order.

    Returns
    -------
    numpy.ndarray
        Electrons per second per pixel.

    References
    ----------
    Bessell, Castelli & Plez 1998, A&A 333, 231 (zero point).
    """
    omega = _value(aperture_on_sky, u.arcsec**2, "aperture_on_sky", "sky_rate_per_pixel")
    n_pix = np.asarray(n_pix_spatial, dtype=float)
    _require(~(omega <= 0), "sky_rate_per_pixel: aperture_on_sky must be positive")
    _require(~(n_pix < 1), "sky_rate_per_pixel: n_pix_spatial must be at least 1")
    per_arcsec2 = signal_rate_per_pixel(sky_mag_per_arcsec2, telescope_area, throughput, pixel_width,
                                        airmass=1.0, extinction_coeff=0.0)
    return per_arcsec2 * omega / n_pix


def _noise_terms(function, read_noise, dark_rate, sky_rate, n_pix_spatial):
    rn = _count_value(read_noise, u.dimensionless_unscaled, "read_noise", function)
    dark = _count_value(dark_rate, 1 / u.s, "dark_rate", function)
    sky = _count_value(sky_rate, 1 / u.s, "sky_rate", function)
    n_pix = np.asarray(n_pix_spatial, dtype=float)
    _require(~((rn < 0) | (dark < 0) | (sky < 0)),
             f"{function}: read_noise, dark_rate and sky_rate must not be negative")
    _require(~(n_pix < 1), f"{function}: n_pix_spatial must be at least 1")
    return rn, dark, sky, n_pix


def snr_for_exposure(exposure_time, r_c_mag, telescope_area, throughput, pixel_width, *,
                     read_noise=0.0, dark_rate=0.0, sky_rate=0.0, n_pix_spatial=1, a_v=0.0,
                     airmass=1.0, extinction_coeff=DEFAULT_EXTINCTION_COEFF):
    """S/N per spectral pixel at 6708 A after an exposure (CCD equation).

    N* = rate t;  S/N = N* / sqrt(N* + n_pix (S_sky t + D t + RN^2)).
    Photon-limited, S/N grows as sqrt(t); read-noise-limited, as t.

    Parameters
    ----------
    exposure_time : float, array_like or Quantity
        Exposure; bare numbers are seconds.
    r_c_mag, telescope_area, throughput, pixel_width :
        As in :func:`signal_rate_per_pixel`.
    read_noise : float or Quantity, optional
        Read noise per pixel (electrons rms).
    dark_rate : float or Quantity, optional
        Dark current per pixel; bare numbers are electrons per second.
    sky_rate : float or Quantity, optional
        Sky per pixel (:func:`sky_rate_per_pixel`); bare numbers are electrons per second.
    n_pix_spatial : int, optional
        Pixels summed across the order.
    a_v, airmass, extinction_coeff : optional
        As in :func:`photon_flux_6708`.

    Returns
    -------
    numpy.ndarray
        S/N per pixel, a planning estimate.

    References
    ----------
    The general CCD equation (e.g. Howell S. B., *Handbook of CCD Astronomy*, 2nd ed.,
    ch. 4).
    """
    function = "snr_for_exposure"
    t = _value(exposure_time, u.s, "exposure_time", function)
    _require(~(t < 0), f"{function}: exposure_time must not be negative")
    rate = signal_rate_per_pixel(r_c_mag, telescope_area, throughput, pixel_width, a_v=a_v,
                                 airmass=airmass, extinction_coeff=extinction_coeff)
    rn, dark, sky, n_pix = _noise_terms(function, read_noise, dark_rate, sky_rate, n_pix_spatial)
    signal = rate * t
    with np.errstate(invalid="ignore", divide="ignore"):
        return signal / np.sqrt(signal + n_pix * ((sky + dark) * t + rn**2))


def exposure_for_snr(snr, r_c_mag, telescope_area, throughput, pixel_width, *, read_noise=0.0,
                     dark_rate=0.0, sky_rate=0.0, n_pix_spatial=1, a_v=0.0, airmass=1.0,
                     extinction_coeff=DEFAULT_EXTINCTION_COEFF):
    """Exposure (s) that reaches a given S/N per pixel: the exact root of the CCD equation.

    With a = rate, b = (S/N)^2 (a + n_pix (S_sky + D)) and c = (S/N)^2 n_pix RN^2,
    a^2 t^2 - b t - c = 0, so t = (b + sqrt(b^2 + 4 a^2 c)) / (2 a^2).

    Parameters
    ----------
    snr : array_like
        Target S/N per pixel (> 0).
    r_c_mag, telescope_area, throughput, pixel_width, read_noise, dark_rate, sky_rate,
    n_pix_spatial, a_v, airmass, extinction_coeff :
        As in :func:`snr_for_exposure`.

    Returns
    -------
    numpy.ndarray
        Exposure time (s), unclipped; see :func:`clip_exposure`.  A planning estimate.

    References
    ----------
    The general CCD equation (e.g. Howell S. B., *Handbook of CCD Astronomy*, 2nd ed.,
    ch. 4), solved exactly for t.
    """
    function = "exposure_for_snr"
    snr = np.asarray(snr, dtype=float)
    _require(~(snr <= 0), f"{function}: snr must be positive")
    rate = signal_rate_per_pixel(r_c_mag, telescope_area, throughput, pixel_width, a_v=a_v,
                                 airmass=airmass, extinction_coeff=extinction_coeff)
    rn, dark, sky, n_pix = _noise_terms(function, read_noise, dark_rate, sky_rate, n_pix_spatial)
    b = snr**2 * (rate + n_pix * (sky + dark))
    c = snr**2 * n_pix * rn**2
    return (b + np.sqrt(b**2 + 4.0 * rate**2 * c)) / (2.0 * rate**2)


def clip_exposure(exposure_s, floor_s, ceiling_s):
    """Clip exposure times to an instrument's floor and ceiling.

    Parameters
    ----------
    exposure_s : array_like
        Exposure times (s).
    floor_s, ceiling_s : float
        Shortest and longest allowed single exposure (s).

    Returns
    -------
    clipped : numpy.ndarray
        Exposure times within [floor_s, ceiling_s] (NaN stays NaN).
    flag : numpy.ndarray of str
        :data:`EXPOSURE_OK`, :data:`EXPOSURE_AT_FLOOR` (raised to the floor) or
        :data:`EXPOSURE_AT_CEILING` (cut at the ceiling: the S/N is not reached).
    """
    exposure_s = np.asarray(exposure_s, dtype=float)
    if not 0 <= floor_s <= ceiling_s:
        raise PrioritizeError(f"clip_exposure: need 0 <= floor_s <= ceiling_s, got {floor_s}, {ceiling_s}")
    flag = np.full(exposure_s.shape, EXPOSURE_OK, dtype="<U7")
    flag[exposure_s < floor_s] = EXPOSURE_AT_FLOOR
    flag[exposure_s > ceiling_s] = EXPOSURE_AT_CEILING
    return np.clip(exposure_s, floor_s, ceiling_s), flag


class ExposurePlan(NamedTuple):
    """Result of :func:`plan_exposure`, one array entry per star (times in s)."""

    exposure_s: np.ndarray      # clipped exposure time
    flag: np.ndarray            # EXPOSURE_OK / EXPOSURE_AT_FLOOR / EXPOSURE_AT_CEILING
    snr_reached: np.ndarray     # S/N per pixel after the clipped exposure
    overhead_s: np.ndarray      # readout + acquisition
    total_s: np.ndarray         # exposure + overhead


def plan_exposure(instrument: Instrument, snr, r_c_mag, *, a_v=0.0, airmass=1.0,
                  extinction_coeff=DEFAULT_EXTINCTION_COEFF) -> ExposurePlan:
    """Exposure, S/N reached and time on target for stars on one instrument.

    Uses the instrument's collecting area, throughput, pixel width at 6708 A, read
    noise, dark current and dark-sky background (:func:`sky_rate_per_pixel`), then
    clips to its exposure floor and ceiling and adds readout and acquisition overheads.

    Parameters
    ----------
    instrument : Instrument
        From :func:`prioritize.instruments.load_instrument`.
    snr : array_like
        Target S/N per pixel at 6708 A.
    r_c_mag : array_like
        Cousins R (mag).
    a_v, airmass, extinction_coeff : optional
        As in :func:`photon_flux_6708`.

    Returns
    -------
    ExposurePlan
        Planning estimates; the observatory's exposure-time calculator prevails.

    References
    ----------
    Bessell, Castelli & Plez 1998, A&A 333, 231 (zero point); the general CCD equation
    (e.g. Howell S. B., *Handbook of CCD Astronomy*, 2nd ed., ch. 4).
    """
    area = instrument.collecting_area_cm2
    pixel = instrument.pixel_width_angstrom(LI6708_WAVELENGTH_A)
    sky = sky_rate_per_pixel(instrument.sky_rc_mag_per_arcsec2, instrument.aperture_on_sky_arcsec2,
                             area, instrument.throughput_6708, pixel, instrument.spatial_pixels)
    noise = dict(read_noise=instrument.read_noise_e, dark_rate=instrument.dark_current_e_per_s,
                 sky_rate=sky, n_pix_spatial=instrument.spatial_pixels, a_v=a_v, airmass=airmass,
                 extinction_coeff=extinction_coeff)
    needed = exposure_for_snr(snr, r_c_mag, area, instrument.throughput_6708, pixel, **noise)
    exposure, flag = clip_exposure(needed, instrument.exposure_min_s, instrument.exposure_max_s)
    reached = snr_for_exposure(exposure, r_c_mag, area, instrument.throughput_6708, pixel, **noise)
    overhead = np.full(exposure.shape, instrument.readout_overhead_s + instrument.acquisition_overhead_s)
    return ExposurePlan(exposure, flag, reached, overhead, exposure + overhead)
