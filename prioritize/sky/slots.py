"""The exposure each slot needs, and the S/N it reaches, at the slot's air mass and sky.

For a target whose S/N needed and R_C magnitude are known (a ranked table), the
exposure of a slot starting at grid step s is recomputed with the project's CCD
equation (:func:`prioritize.exposure.exposure_for_snr` on the instrument of
:mod:`prioritize.instruments`):

1. at the air mass X and the sky brightness mu at the start of the exposure (after
   the overhead): t0;
2. again at X and mu at the middle of that exposure: t1, clipped to the
   instrument's floor and ceiling; the S/N reached is that of t1 at the middle.

The air mass enters as the stellar flux 10^(-0.4 k X) with the site's extinction
coefficient k near 6708 A (:attr:`prioritize.sky.sites.Site.extinction_6708`); the
sky brightness is the instrument's dark sky brightened by the air-mass path and the
Moon (Krisciunas & Schaefer 1991, :mod:`prioritize.sky.moonlight`).

P(the slot reaches its S/N) is the project's measured fraction, min(1, (S/N reached /
S/N needed)^2) (the share of the needed photons collected, as
:func:`prioritize.score.detections_per_hour` uses it): 1 unless the exposure
ceiling stops short.

Targets without those columns keep their given exposure at every slot (P = 1).
All values are planning estimates; the observatory's exposure-time calculator prevails.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .. import exposure as ccd
from ..spectra import LI6708_WAVELENGTH_A

_AIRMASS_CAP = 40.0   # horizon air mass (Pickering 2002 gives 38); slots this low are never feasible


@dataclass(frozen=True)
class SlotExposures:
    """Per target and slot start, ``(n, m)`` arrays.

    Attributes
    ----------
    exposure_s : numpy.ndarray
        Exposure of a slot starting at each step (s).
    snr : numpy.ndarray
        S/N per pixel at 6708 A the exposure reaches (NaN for fixed exposures).
    fraction : numpy.ndarray
        min(1, (S/N reached / S/N needed)^2); 1 for fixed exposures.
    airmass_mid : numpy.ndarray
        Air mass at the middle of the exposure.
    sky_mag : numpy.ndarray
        Sky brightness there (R_C mag arcsec^-2; NaN for fixed exposures).
    """

    exposure_s: np.ndarray
    snr: np.ndarray
    fraction: np.ndarray
    airmass_mid: np.ndarray
    sky_mag: np.ndarray


def at_fractional_step(grid_values, position) -> np.ndarray:
    """Linear interpolation of ``(n, m)`` grid values at fractional steps ``position`` ``(n, m)``."""
    values = np.asarray(grid_values, dtype=float)
    m = values.shape[1]
    pos = np.clip(np.nan_to_num(np.asarray(position, dtype=float), nan=0.0), 0.0, m - 1.0)
    lo = np.minimum(np.floor(pos).astype(np.int64), m - 1)
    hi = np.minimum(lo + 1, m - 1)
    w = pos - lo
    return ((1.0 - w) * np.take_along_axis(values, lo, axis=1)
            + w * np.take_along_axis(values, hi, axis=1))


def slot_exposures(instrument, snr_needed, r_c_mag, overhead_s, fixed_exposure_s, airmass, sky_mag,
                   step_s: float, extinction_coeff: float) -> SlotExposures:
    """Exposure and S/N of every slot start for a block of targets (module docstring).

    Parameters
    ----------
    instrument : Instrument or None
        The spectrograph; None: every target keeps ``fixed_exposure_s``.
    snr_needed, r_c_mag : array_like
        ``(n,)`` S/N per pixel to reach and Cousins R (observed, mag); NaN: fixed exposure.
    overhead_s : array_like
        ``(n,)`` time before the exposure starts (s).
    fixed_exposure_s : array_like
        ``(n,)`` exposure for targets without S/N or magnitude (s).
    airmass, sky_mag : array_like
        ``(n, m)`` air mass and sky brightness (R_C mag arcsec^-2) on the grid.
    step_s : float
        Grid step (s).
    extinction_coeff : float
        Site extinction near 6708 A (mag per air mass).

    Returns
    -------
    SlotExposures
    """
    airmass = np.minimum(np.nan_to_num(np.asarray(airmass, dtype=float), nan=_AIRMASS_CAP, posinf=_AIRMASS_CAP),
                         _AIRMASS_CAP)
    sky_mag = np.asarray(sky_mag, dtype=float)
    n, m = airmass.shape
    snr_needed = np.asarray(snr_needed, dtype=float).reshape(n, 1)
    r_c = np.asarray(r_c_mag, dtype=float).reshape(n, 1)
    overhead = np.asarray(overhead_s, dtype=float).reshape(n, 1)
    fixed = np.asarray(fixed_exposure_s, dtype=float).reshape(n, 1)
    computed = (instrument is not None) & np.isfinite(snr_needed) & (snr_needed > 0) & np.isfinite(r_c)
    steps = np.arange(m)[None, :]
    exposure_s = np.broadcast_to(fixed, (n, m)).copy()
    snr = np.full((n, m), np.nan)
    fraction = np.ones((n, m))
    sky_used = np.full((n, m), np.nan)
    begin = steps + overhead / step_s
    airmass_mid = at_fractional_step(airmass, begin + np.nan_to_num(fixed) / (2 * step_s))
    rows = np.flatnonzero(computed[:, 0])
    if rows.size:
        inst = instrument
        area = inst.collecting_area_cm2
        pixel = inst.pixel_width_angstrom(LI6708_WAVELENGTH_A)

        def solve(x, mu, target):
            sky = ccd.sky_rate_per_pixel(mu, inst.aperture_on_sky_arcsec2, area, inst.throughput_6708, pixel,
                                         inst.spatial_pixels)
            noise = dict(read_noise=inst.read_noise_e, dark_rate=inst.dark_current_e_per_s, sky_rate=sky,
                         n_pix_spatial=inst.spatial_pixels, airmass=x, extinction_coeff=extinction_coeff)
            t = ccd.exposure_for_snr(target, r_c[rows], area, inst.throughput_6708, pixel, **noise)
            t, _flag = ccd.clip_exposure(t, inst.exposure_min_s, inst.exposure_max_s)
            return t, ccd.snr_for_exposure(t, r_c[rows], area, inst.throughput_6708, pixel, **noise)

        x0 = at_fractional_step(airmass[rows], begin[rows])
        mu0 = at_fractional_step(sky_mag[rows], begin[rows])
        t0, _ = solve(x0, mu0, snr_needed[rows])
        middle = begin[rows] + t0 / (2 * step_s)
        x1 = at_fractional_step(airmass[rows], middle)
        mu1 = at_fractional_step(sky_mag[rows], middle)
        t1, reached = solve(x1, mu1, snr_needed[rows])
        exposure_s[rows] = t1
        snr[rows] = reached
        fraction[rows] = np.clip((reached / snr_needed[rows]) ** 2, 0.0, 1.0)
        airmass_mid[rows] = x1
        sky_used[rows] = mu1
    return SlotExposures(exposure_s, snr, fraction, airmass_mid, sky_used)
