"""Sky brightness near 6708 A with the Moon up: the Krisciunas & Schaefer (1991) model.

Krisciunas & Schaefer (1991, PASP 103, 1033; equation numbers from memory) give the
surface brightness of scattered moonlight in nanolamberts (nL):

    B_moon = f(rho) I* 10^(-0.4 k X(Z_moon)) [1 - 10^(-0.4 k X(Z))]            (15)
    f(rho) = 10^5.36 [1.06 + cos^2 rho] + 10^(6.15 - rho/40)                      (21)
    I*     = 10^(-0.4 (3.84 + 0.026 |alpha| + 4e-9 alpha^4))                      (20)
    X(Z)   = (1 - 0.96 sin^2 Z)^(-1/2)                                            (3)

with rho the Moon-target separation and alpha the Moon's phase angle (degrees; 0 at
full Moon), Z and Z_moon the zenith distances of the target and the Moon and k the
extinction coefficient.  The dark sky brightens towards the horizon as

    B_dark(Z) = B_zen 10^(-0.4 k (X(Z) - 1)) X(Z)                                (2)

with B_zen = 79.0 nL (21.587 V mag arcsec^-2, their Mauna Kea value), and nanolamberts
convert to magnitudes by B = 34.08 exp(20.7233 - 0.92104 V)                      (1).

The model is calibrated in V.  Near 6708 A the tool uses it with the site's
extinction coefficient at 6708 A and applies the brightening *ratio*
(B_dark + B_moon) / B_dark,zen to the instrument's dark-sky brightness near 6708 A
(:attr:`prioritize.instruments.Instrument.sky_rc_mag_per_arcsec2`).  This is a planning
approximation: scattered moonlight is bluer than the dark sky, so the ratio in R is
somewhat smaller than in V; the authors quote 8-23% agreement with their V data.
The formula of f(rho) is not meant for rho < 10 deg; the night plan keeps a Moon
distance limit well above that.

All values are planning estimates; the observatory's own sky model prevails.
"""

from __future__ import annotations

import numpy as np

B_ZENITH_DARK_NL = 79.0       # dark V sky at the zenith, Mauna Kea (Krisciunas & Schaefer 1991)
_DEG = np.pi / 180.0


def nanolamberts_to_mag(b_nl) -> np.ndarray:
    """Surface brightness in nanolamberts as V magnitudes per square arcsecond.

    V = (20.7233 - ln(B / 34.08)) / 0.92104 (Krisciunas & Schaefer 1991, eq. 1).
    """
    with np.errstate(divide="ignore"):
        return (20.7233 - np.log(np.asarray(b_nl, dtype=float) / 34.08)) / 0.92104


def optical_pathlength(zenith_deg) -> np.ndarray:
    """X(Z) = (1 - 0.96 sin^2 Z)^(-1/2), the scattering path of Krisciunas & Schaefer (1991, eq. 3)."""
    s = np.sin(np.asarray(zenith_deg, dtype=float) * _DEG)
    return 1.0 / np.sqrt(1.0 - 0.96 * s * s)


def scattering_function(separation_deg) -> np.ndarray:
    """f(rho) = 10^5.36 (1.06 + cos^2 rho) + 10^(6.15 - rho/40): Rayleigh plus Mie (eq. 21)."""
    rho = np.asarray(separation_deg, dtype=float)
    return 10.0 ** 5.36 * (1.06 + np.cos(rho * _DEG) ** 2) + 10.0 ** (6.15 - rho / 40.0)


def moon_illuminance(phase_angle_deg) -> np.ndarray:
    """I* = 10^(-0.4 (3.84 + 0.026 |alpha| + 4e-9 alpha^4)), the Moon's illuminance (eq. 20)."""
    a = np.abs(np.asarray(phase_angle_deg, dtype=float))
    return 10.0 ** (-0.4 * (3.84 + 0.026 * a + 4e-9 * a ** 4))


def phase_angle_from_illumination(fraction) -> np.ndarray:
    """Phase angle alpha (degrees) from the illuminated fraction k = (1 + cos alpha) / 2."""
    return np.degrees(np.arccos(np.clip(2.0 * np.asarray(fraction, dtype=float) - 1.0, -1.0, 1.0)))


def moonlight_nl(separation_deg, target_zenith_deg, moon_zenith_deg, phase_angle_deg,
                 extinction_coeff) -> np.ndarray:
    """Scattered moonlight at a sky position, nanolamberts (Krisciunas & Schaefer 1991, eq. 15).

    Parameters
    ----------
    separation_deg : array_like
        Moon-target separation rho (degrees).
    target_zenith_deg, moon_zenith_deg : array_like
        Zenith distances of the target and of the Moon (degrees); the Moon below the
        horizon (Z_moon >= 90) gives 0.
    phase_angle_deg : array_like
        The Moon's phase angle alpha (0 full, 180 new).
    extinction_coeff : float or array_like
        Extinction coefficient k (mag per air mass) at the wavelength considered.

    Returns
    -------
    numpy.ndarray
        B_moon (nL), broadcast over the inputs.
    """
    k = np.asarray(extinction_coeff, dtype=float)
    moon_z = np.asarray(moon_zenith_deg, dtype=float)
    b = (scattering_function(separation_deg) * moon_illuminance(phase_angle_deg)
         * 10.0 ** (-0.4 * k * optical_pathlength(np.minimum(moon_z, 90.0)))
         * (1.0 - 10.0 ** (-0.4 * k * optical_pathlength(target_zenith_deg))))
    return np.where(moon_z < 90.0, b, 0.0)


def dark_sky_nl(target_zenith_deg, extinction_coeff, b_zenith_nl: float = B_ZENITH_DARK_NL) -> np.ndarray:
    """Dark-sky brightness away from the zenith, B_zen 10^(-0.4 k (X - 1)) X (eq. 2), nL."""
    x = optical_pathlength(target_zenith_deg)
    return b_zenith_nl * 10.0 ** (-0.4 * np.asarray(extinction_coeff, dtype=float) * (x - 1.0)) * x


def sky_mag_6708(dark_zenith_mag, separation_deg, target_zenith_deg, moon_zenith_deg,
                 phase_angle_deg, extinction_coeff) -> np.ndarray:
    """Sky surface brightness near 6708 A at a sky position, mag per square arcsecond.

    mu = mu_dark,zen - 2.5 log10[(B_dark(Z) + B_moon) / B_zen]: the instrument's dark
    zenith sky brightened by the airglow path (eq. 2) and the scattered moonlight
    (eq. 15), as a ratio (module docstring).

    Parameters
    ----------
    dark_zenith_mag : float
        Dark moonless sky at the zenith near 6708 A (R_C mag arcsec^-2).
    separation_deg, target_zenith_deg, moon_zenith_deg, phase_angle_deg, extinction_coeff :
        As in :func:`moonlight_nl`.

    Returns
    -------
    numpy.ndarray
        Sky brightness (mag arcsec^-2), a planning estimate.
    """
    ratio = (dark_sky_nl(target_zenith_deg, extinction_coeff)
             + moonlight_nl(separation_deg, target_zenith_deg, moon_zenith_deg, phase_angle_deg,
                            extinction_coeff)) / B_ZENITH_DARK_NL
    return dark_zenith_mag - 2.5 * np.log10(ratio)
