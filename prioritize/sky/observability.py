"""Where the Sun, the Moon and the targets are in the sky of a site, and when.

The fast method used here: astropy gives the apparent sidereal time at
every time step and the apparent (true equator and equinox of date, TETE)
directions of the targets once per night; the altitude is then one dot product of
unit vectors,

    sin h = d · z(t),   z(t) = (cos φ cos θ, cos φ sin θ, sin φ),

with d the target's TETE unit vector, φ the geodetic latitude and θ the local
apparent sidereal time.  Polar motion (≈0.3″) and refraction are left out: the
altitudes are geometric, within 1″ of astropy's full AltAz transform with
``pressure=0``.

The Sun and the Moon come from astropy's built-in ephemeris (``get_body``) at
nodes a few hours apart, as geocentric apparent TETE position vectors; a cubic
spline carries them to every time step and the observer's geocentric position
(rotated by the sidereal time) is subtracted, which makes them topocentric (the
Moon's parallax reaches 1°).

Definitions used throughout (they reproduce the offline check values measured with
astropy 6-8 and an independent ephemeris library, tests/test_sky.py):

- sunset / sunrise: the Sun's centre at geometric altitude −0.833° (34′ of
  horizontal refraction plus 16′ of semi-diameter; no correction for the
  observer's height);
- civil / nautical / astronomical twilight: the Sun's centre at −6° / −12° / −18°;
- the Moon is up while its topocentric centre has geometric altitude > 0°
  (almanac moonset, upper limb with refraction, comes ~4 min later);
- illuminated fraction k = (1 + cos i)/2 with i the geocentric Sun–Moon phase angle.

All numbers are planning estimates.
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass

import astropy.units as u
import numpy as np
from astropy.coordinates import ICRS, TETE, SkyCoord, get_body
from astropy.time import Time
from scipy.interpolate import CubicSpline
from scipy.optimize import brentq

from ..errors import ModelRangeError, PrioritizeError
from .offline import check_supported_dates, datetime_to_mjd, quiet_time_warnings
from .sites import Site

SUNSET_ALTITUDE_DEG = -0.833        # Sun's centre at sunset/sunrise: 34' refraction + 16' semi-diameter
TWILIGHT_ALTITUDE_DEG = {"civil": -6.0, "nautical": -12.0, "astronomical": -18.0}
MOON_HORIZON_ALTITUDE_DEG = 0.0     # the Moon counts as up while its centre is above this
EPHEMERIS_NODE_HOURS = 3.0          # spacing of astropy Sun/Moon evaluations (spline error << 1")
_EVENT_STEP_MINUTES = 5.0           # grid on which Sun/Moon crossings are bracketed
_DEG = np.pi / 180.0


# ---------------------------------------------------------------------------
# spherical geometry (pure numpy)
# ---------------------------------------------------------------------------

def unit_vectors(ra_deg, dec_deg) -> np.ndarray:
    """Cartesian unit vectors of directions on the sky.

    Parameters
    ----------
    ra_deg, dec_deg : array_like
        Right ascension and declination in degrees (broadcast together).

    Returns
    -------
    numpy.ndarray
        Shape ``(..., 3)``: (cos δ cos α, cos δ sin α, sin δ).
    """
    ra = np.asarray(ra_deg, dtype=float) * _DEG
    dec = np.asarray(dec_deg, dtype=float) * _DEG
    cos_dec = np.cos(dec)
    return np.stack(np.broadcast_arrays(cos_dec * np.cos(ra), cos_dec * np.sin(ra), np.sin(dec)), axis=-1)


def zenith_vectors(sidereal_time_rad, latitude_deg: float) -> np.ndarray:
    """The local vertical in the equatorial frame of date at each sidereal time.

    z = (cos φ cos θ, cos φ sin θ, sin φ), with φ the geodetic latitude (so that the
    vertical is the ellipsoid normal, as in astropy's AltAz frame) and θ the local
    apparent sidereal time.

    Parameters
    ----------
    sidereal_time_rad : array_like
        Local apparent sidereal time θ in radians, shape ``(m,)``.
    latitude_deg : float
        Geodetic latitude φ in degrees.

    Returns
    -------
    numpy.ndarray
        Shape ``(m, 3)``.
    """
    theta = np.asarray(sidereal_time_rad, dtype=float)
    phi = latitude_deg * _DEG
    return np.stack([np.cos(phi) * np.cos(theta), np.cos(phi) * np.sin(theta),
                     np.full_like(theta, np.sin(phi))], axis=-1)


def altitude_deg(directions, zenith) -> np.ndarray:
    """Geometric altitude h of each direction at each time: sin h = d · z.

    Parameters
    ----------
    directions : array_like
        Unit vectors of the targets in the equatorial frame of date, shape ``(n, 3)``.
    zenith : array_like
        Unit vectors of the local vertical, shape ``(m, 3)`` (:func:`zenith_vectors`).

    Returns
    -------
    numpy.ndarray
        Altitudes in degrees, shape ``(n, m)``; no refraction.

    References
    ----------
    Green, R. M. 1985, *Spherical Astronomy* (from memory): sin h = sin φ sin δ
    + cos φ cos δ cos H, written here in vector form.
    """
    sin_h = np.asarray(directions, dtype=float) @ np.asarray(zenith, dtype=float).T
    return np.degrees(np.arcsin(np.clip(sin_h, -1.0, 1.0)))


def separation_deg(a, b) -> np.ndarray:
    """Angle between each of ``a`` (n, 3) and each of ``b`` (m, 3) unit vectors, degrees (n, m).

    Uses atan2(|a×b|, a·b), accurate at all angles.
    """
    a = np.asarray(a, dtype=float)
    b = np.asarray(b, dtype=float)
    dot = a @ b.T
    cross_sq = np.maximum((a * a).sum(-1)[:, None] * (b * b).sum(-1)[None, :] - dot * dot, 0.0)
    return np.degrees(np.arctan2(np.sqrt(cross_sq), dot))


def airmass_pickering(altitude_deg_) -> np.ndarray:
    """Relative air mass from the altitude by Pickering's formula.

    X = 1 / sin(h + 244 / (165 + 47 h^1.1)),  h in degrees.

    Valid from the zenith down to the horizon (X ≈ 38 at h = 0); within 0.34% of
    sec z above 30° altitude (measured here, tests/test_sky.py).  Pickering's h is the apparent
    (refracted) altitude; the geometric altitude used here is lower by the
    refraction (1.7′ at 30°), which changes X by < 0.2% above 30°.  Below the
    horizon X is ``inf``.

    Parameters
    ----------
    altitude_deg_ : array_like
        Altitude in degrees.

    Returns
    -------
    numpy.ndarray
        Air mass (1 at the zenith).

    References
    ----------
    Pickering, K. A. 2002, "The Southern Limits of the Ancient Star Catalog",
    DIO 12, 1 (the air-mass formula; journal details from memory).
    """
    h = np.asarray(altitude_deg_, dtype=float)
    above = h >= 0.0
    hp = np.where(above, h, 0.0)
    x = 1.0 / np.sin((hp + 244.0 / (165.0 + 47.0 * hp ** 1.1)) * _DEG)
    return np.where(above, x, np.inf)


def altitude_for_airmass(airmass) -> np.ndarray:
    """Altitude (degrees) at which :func:`airmass_pickering` equals ``airmass``.

    Pickering's X(h) falls monotonically from ≈38 at the horizon to 1.0000002 at
    the zenith; the inverse is found by root-finding (Brent) to 1e-9°.  Air
    masses at or below the zenith value give 90°, at or above the horizon value 0°.

    Parameters
    ----------
    airmass : array_like
        Air mass, at least 1.

    Raises
    ------
    PrioritizeError
        If an air mass is below 1 or not finite.
    """
    x = np.atleast_1d(np.asarray(airmass, dtype=float))
    if not np.all(np.isfinite(x)) or np.any(x < 1.0):
        raise PrioritizeError(f"air mass limits must be finite numbers >= 1, got {airmass!r}")
    horizon, zenith = float(airmass_pickering(0.0)), float(airmass_pickering(90.0))
    out = np.array([0.0 if xi >= horizon else 90.0 if xi <= zenith else
                    brentq(lambda h, xi=xi: float(airmass_pickering(h)) - xi, 0.0, 90.0, xtol=1e-9)
                    for xi in x.ravel()]).reshape(x.shape)
    return out if np.ndim(airmass) else out[0]


def illuminated_fraction(sun_xyz, moon_xyz) -> np.ndarray:
    """Illuminated fraction of the Moon's disc, k = (1 + cos i)/2.

    i is the phase angle Sun–Moon–Earth, from the geocentric position vectors:
    cos i = (s − m)·(−m) / (|s − m| |m|).

    Parameters
    ----------
    sun_xyz, moon_xyz : array_like
        Geocentric position vectors of the Sun and the Moon (same units), shape ``(..., 3)``.

    Returns
    -------
    numpy.ndarray
        k in [0, 1].

    References
    ----------
    Meeus, J. 1998, *Astronomical Algorithms*, 2nd ed., ch. 48, eq. 48.1 (k) and the
    phase angle from the geocentric elongation (from memory).
    """
    s = np.asarray(sun_xyz, dtype=float)
    m = np.asarray(moon_xyz, dtype=float)
    moon_to_sun = s - m
    cos_i = (moon_to_sun * -m).sum(-1) / (np.linalg.norm(moon_to_sun, axis=-1) * np.linalg.norm(m, axis=-1))
    return 0.5 * (1.0 + np.clip(cos_i, -1.0, 1.0))


# ---------------------------------------------------------------------------
# astropy: time scales, sidereal time, frames, Sun and Moon
# ---------------------------------------------------------------------------

def mjd_to_time(mjd) -> Time:
    """UTC Modified Julian Dates (float) as an astropy Time."""
    return Time(np.asarray(mjd, dtype=float), format="mjd", scale="utc")


def local_noon_mjd(site: Site, dates) -> np.ndarray:
    """UTC MJD of 12:00 local civil time (the site's time zone) on each date."""
    zone = site.zone
    return np.array([datetime_to_mjd(dt.datetime.combine(day, dt.time(12, 0), tzinfo=zone))
                     for day in dates], dtype=float)


def apparent_sidereal_time_rad(mjd, site: Site) -> np.ndarray:
    """Local apparent sidereal time (radians, in [0, 2π)) at UTC MJDs, from astropy (IAU 2006/2000A)."""
    times = mjd_to_time(mjd)
    with quiet_time_warnings():
        return times.sidereal_time("apparent", longitude=site.longitude_deg * u.deg).to_value(u.rad)


def apparent_directions(ra_deg, dec_deg, mjd: float) -> np.ndarray:
    """ICRS positions as geocentric apparent (TETE) unit vectors at one instant.

    Applies precession, nutation and annual aberration once; over one night the
    directions change by < 0.3″ (aberration), so one transform per night suffices
    (measured against astropy's full AltAz transform, tests/test_sky.py).  Proper
    motions are not applied: the catalog positions are
    taken as valid at the observing epoch.

    Parameters
    ----------
    ra_deg, dec_deg : array_like
        ICRS coordinates in degrees, shape ``(n,)``.
    mjd : float
        UTC MJD of the instant (e.g. the middle of the night).

    Returns
    -------
    numpy.ndarray
        Shape ``(n, 3)``.
    """
    coords = SkyCoord(ICRS(ra=np.asarray(ra_deg, dtype=float) * u.deg,
                           dec=np.asarray(dec_deg, dtype=float) * u.deg))
    with quiet_time_warnings():
        tete = coords.transform_to(TETE(obstime=mjd_to_time(mjd)))
    return unit_vectors(tete.ra.deg, tete.dec.deg)


def _geocentric_site_tete(site: Site, sidereal_time_rad) -> np.ndarray:
    """The observer's geocentric position (km) in the frame of date (polar motion neglected)."""
    x, y, z = (c.to_value(u.km) for c in site.location.geocentric)
    rho = np.hypot(x, y)
    theta = np.asarray(sidereal_time_rad, dtype=float)
    return np.stack([rho * np.cos(theta), rho * np.sin(theta), np.full_like(theta, z)], axis=-1)


@dataclass(frozen=True)
class SunMoonTrack:
    """The Sun and the Moon seen from a site at a set of times.

    Attributes
    ----------
    mjd : numpy.ndarray
        UTC MJD of each time, shape ``(m,)``.
    sidereal_time_rad : numpy.ndarray
        Local apparent sidereal time.
    zenith : numpy.ndarray
        Local vertical unit vectors, ``(m, 3)``.
    sun_altitude_deg, moon_altitude_deg : numpy.ndarray
        Topocentric geometric altitudes of the centres.
    moon_direction : numpy.ndarray
        Topocentric apparent unit vector of the Moon, ``(m, 3)``.
    moon_illumination : numpy.ndarray
        Illuminated fraction of the Moon.
    """

    mjd: np.ndarray
    sidereal_time_rad: np.ndarray
    zenith: np.ndarray
    sun_altitude_deg: np.ndarray
    moon_altitude_deg: np.ndarray
    moon_direction: np.ndarray
    moon_illumination: np.ndarray

    @property
    def moon_up(self) -> np.ndarray:
        """True while the Moon's centre is above the horizon (topocentric, geometric)."""
        return self.moon_altitude_deg > MOON_HORIZON_ALTITUDE_DEG


def sun_moon_track(site: Site, mjd) -> SunMoonTrack:
    """Sun, Moon and sidereal time at each UTC MJD, by the fast method.

    astropy is called at nodes :data:`EPHEMERIS_NODE_HOURS` apart for the
    geocentric apparent (TETE) positions of the Sun and the Moon; cubic splines
    carry them to each time; the observer's position is subtracted (topocentric
    positions); the altitude is the dot product with the local vertical.

    Parameters
    ----------
    site : Site
        Where.
    mjd : array_like
        UTC MJDs, shape ``(m,)``, any order.

    Returns
    -------
    SunMoonTrack

    Raises
    ------
    ModelRangeError
        Dates outside 1962-2099 (see :mod:`prioritize.sky.offline`).
    """
    mjd = np.asarray(mjd, dtype=float)
    check_supported_dates(mjd)
    step = EPHEMERIS_NODE_HOURS / 24.0
    nodes = np.arange(mjd.min() - 2 * step, mjd.max() + 3 * step, step)
    node_times = mjd_to_time(nodes)
    with quiet_time_warnings():
        frame = TETE(obstime=node_times)
        sun = get_body("sun", node_times).transform_to(frame).cartesian.xyz.to_value(u.km).T
        moon = get_body("moon", node_times).transform_to(frame).cartesian.xyz.to_value(u.km).T
    sun_geo = CubicSpline(nodes, sun, axis=0)(mjd)
    moon_geo = CubicSpline(nodes, moon, axis=0)(mjd)
    theta = apparent_sidereal_time_rad(mjd, site)
    zenith = zenith_vectors(theta, site.latitude_deg)
    observer = _geocentric_site_tete(site, theta)
    sun_topo = sun_geo - observer
    moon_topo = moon_geo - observer
    sun_dir = sun_topo / np.linalg.norm(sun_topo, axis=-1, keepdims=True)
    moon_dir = moon_topo / np.linalg.norm(moon_topo, axis=-1, keepdims=True)
    sin_sun = np.clip((sun_dir * zenith).sum(-1), -1.0, 1.0)
    sin_moon = np.clip((moon_dir * zenith).sum(-1), -1.0, 1.0)
    return SunMoonTrack(mjd=mjd, sidereal_time_rad=theta, zenith=zenith,
                        sun_altitude_deg=np.degrees(np.arcsin(sin_sun)),
                        moon_altitude_deg=np.degrees(np.arcsin(sin_moon)),
                        moon_direction=moon_dir,
                        moon_illumination=illuminated_fraction(sun_geo, moon_geo))


# ---------------------------------------------------------------------------
# events of one night
# ---------------------------------------------------------------------------

def crossings(mjd, altitude, threshold_deg: float) -> tuple[np.ndarray, np.ndarray]:
    """Times at which a sampled altitude crosses a threshold, rising and setting.

    A cubic spline through the samples is solved for altitude = threshold
    (root-finding on the fine grid); with samples a few minutes apart the times
    are good to well under a second for the Sun and the Moon.

    Parameters
    ----------
    mjd : array_like
        Increasing sample times (UTC MJD), shape ``(m,)``.
    altitude : array_like
        Altitude in degrees at those times.
    threshold_deg : float
        The altitude crossed.

    Returns
    -------
    rising, setting : numpy.ndarray
        UTC MJDs of the upward and downward crossings, increasing.
    """
    t = np.asarray(mjd, dtype=float)
    t0 = t[0]
    spline = CubicSpline(t - t0, np.asarray(altitude, dtype=float) - threshold_deg)
    roots = spline.solve(0.0, extrapolate=False)
    roots = np.unique(roots[np.isfinite(roots)])
    slope = spline(roots, 1)
    return roots[slope > 0] + t0, roots[slope < 0] + t0


@dataclass(frozen=True)
class NightEvents:
    """Sun and Moon events of one night at one site (UTC MJDs; NaN when absent).

    The night of ``date`` runs from local noon on ``date`` to local noon the next day.

    Attributes
    ----------
    site : Site
    date : datetime.date
        Local date of the evening.
    noon_mjd, next_noon_mjd : float
        The night's bounds.
    sunset_mjd, sunrise_mjd : float
        Sun's centre at −0.833°.
    dusk_mjd, dawn_mjd : dict
        End of evening twilight and start of morning twilight for
        ``"civil"``, ``"nautical"``, ``"astronomical"``.
    moonrise_mjd, moonset_mjd : numpy.ndarray
        Moon crossings of the horizon within the night (0, 1 or 2 each).
    track : SunMoonTrack
        The Sun and the Moon on the 5-minute grid the events were found on.
    """

    site: Site
    date: dt.date
    noon_mjd: float
    next_noon_mjd: float
    sunset_mjd: float
    sunrise_mjd: float
    dusk_mjd: dict
    dawn_mjd: dict
    moonrise_mjd: np.ndarray
    moonset_mjd: np.ndarray
    track: SunMoonTrack

    def dark_window(self, twilight: str) -> tuple[float, float]:
        """(start, end) UTC MJDs between evening and morning ``twilight``.

        Raises
        ------
        ModelRangeError
            If the Sun does not get that low on this night (polar summer).
        """
        if twilight not in TWILIGHT_ALTITUDE_DEG:
            raise PrioritizeError(f"twilight must be one of {', '.join(TWILIGHT_ALTITUDE_DEG)}, got {twilight!r}")
        start, end = self.dusk_mjd[twilight], self.dawn_mjd[twilight]
        if not (np.isfinite(start) and np.isfinite(end) and end > start):
            raise ModelRangeError(
                f"the Sun does not reach {TWILIGHT_ALTITUDE_DEG[twilight]:g} deg on the night of "
                f"{self.date.isoformat()} at {self.site.name}: no {twilight} night to plan")
        return start, end


def _first_after(values: np.ndarray, bound: float, default: float) -> float:
    after = values[values >= bound]
    return float(after[0]) if after.size else default


def _last_before(values: np.ndarray, bound: float, default: float) -> float:
    before = values[values <= bound]
    return float(before[-1]) if before.size else default


def night_events(site: Site, date: dt.date) -> NightEvents:
    """Sunset, twilights, sunrise, moonrise and moonset for the night of a local date.

    The Sun's and the Moon's altitudes are sampled every 5 minutes from local noon
    to the next local noon (:func:`sun_moon_track`) and the crossings found by
    :func:`crossings`.  Evening events are the first downward crossings after
    noon; morning events the last upward crossings before the next noon.  When
    the Sun stays below a twilight altitude all night (polar night) the window
    runs from noon to noon; when it never gets that low the times are NaN.

    Parameters
    ----------
    site : Site
    date : datetime.date
        Local date of the evening.

    Returns
    -------
    NightEvents

    References
    ----------
    Definitions of the events: module docstring; offline check values measured with
    astropy 6-8, tests/test_sky.py.
    """
    noon, next_noon = local_noon_mjd(site, [date, date + dt.timedelta(days=1)])
    step = _EVENT_STEP_MINUTES / 1440.0
    n = int(np.ceil((next_noon - noon) / step))
    mjd = noon + np.arange(n + 1) * ((next_noon - noon) / n)
    track = sun_moon_track(site, mjd)
    sun = track.sun_altitude_deg

    def evening_and_morning(threshold: float) -> tuple[float, float]:
        rising, setting = crossings(mjd, sun, threshold)
        below_at_noon = sun[0] < threshold
        below_at_next_noon = sun[-1] < threshold
        evening = noon if below_at_noon else _first_after(setting, noon, np.nan)
        morning = next_noon if below_at_next_noon else _last_before(rising, next_noon, np.nan)
        return evening, morning

    sunset, sunrise = evening_and_morning(SUNSET_ALTITUDE_DEG)
    dusk, dawn = {}, {}
    for kind, threshold in TWILIGHT_ALTITUDE_DEG.items():
        dusk[kind], dawn[kind] = evening_and_morning(threshold)
    moonrise, moonset = crossings(mjd, track.moon_altitude_deg, MOON_HORIZON_ALTITUDE_DEG)
    return NightEvents(site=site, date=date, noon_mjd=float(noon), next_noon_mjd=float(next_noon),
                       sunset_mjd=sunset, sunrise_mjd=sunrise, dusk_mjd=dusk, dawn_mjd=dawn,
                       moonrise_mjd=moonrise, moonset_mjd=moonset, track=track)


def time_grid(start_mjd: float, end_mjd: float, step_s: float) -> np.ndarray:
    """Regular UTC MJD grid from ``start_mjd`` with ``step_s`` seconds, not past ``end_mjd``."""
    step = step_s / 86400.0
    n = int(np.floor((end_mjd - start_mjd) / step + 1e-9)) + 1
    return start_mjd + np.arange(max(n, 1)) * step
