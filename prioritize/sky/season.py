"""Hours each target is observable in dark time, per month of a semester.

Method
------
Every night of the semester (local evening dates, first to last included) is
sampled every ``step_minutes`` (10) for 24 hours from local noon.  A sample is
*dark* when the Sun's centre is below ``sun_altitude_max_deg`` (−18°,
astronomical night) and the Moon is below the horizon, or up but with an
illuminated fraction ≤ ``moon_ok_illumination`` (default 0: the Moon must be
down).  A target counts a sample when its air mass is ≤ the limit
(Pickering 2002), i.e. its altitude is above :func:`altitude_for_airmass`; each
sample is worth ``step_minutes`` / 60 hours.  Nights belong to the month of
their evening date.  The Moon's distance from the target is not applied here.

Vectorised: altitude is sin h = d · z, one matrix product of the targets'
apparent unit vectors (one astropy transform per month, mid-month: the apparent
place drifts by < 10″ in a fortnight) with the local-vertical vectors of all dark
samples of the month; no Python loop over targets (only over blocks of them, to
bound memory).

Hours are planning estimates: weather, telescope limits and the time other
programmes take are not modelled.
"""

from __future__ import annotations

import datetime as dt
import re
from dataclasses import dataclass

import numpy as np

from ..errors import PrioritizeError
from .observability import (
    TWILIGHT_ALTITUDE_DEG,
    altitude_for_airmass,
    apparent_directions,
    local_noon_mjd,
    sun_moon_track,
)
from .sites import Site

SEMESTER_A_START = "02-01"   # common practice at several observatories: A = Feb 1 - Jul 31
SEMESTER_B_START = "08-01"   # B = Aug 1 - Jan 31
_TARGET_CHUNK = 1024
_SEMESTER = re.compile(r"^(\d{4})([AB])$")


def _month_day(text: str, what: str) -> tuple[int, int]:
    try:
        month, day = (int(v) for v in text.split("-"))
        dt.date(2001, month, day)
    except (ValueError, TypeError) as exc:
        raise PrioritizeError(f"{what} must be MM-DD such as 02-01, got {text!r}") from exc
    return month, day


def semester_dates(semester: str, a_start: str = SEMESTER_A_START,
                   b_start: str = SEMESTER_B_START) -> tuple[dt.date, dt.date]:
    """First and last night (local evening dates) of a semester such as ``"2027A"``.

    Semester A runs from ``a_start`` of its year to the day before ``b_start``;
    semester B from ``b_start`` to the day before ``a_start`` of the next year.
    Defaults: A = 1 Feb - 31 Jul, B = 1 Aug - 31 Jan.

    Raises
    ------
    PrioritizeError
        If the semester is not YYYYA / YYYYB or a boundary is not MM-DD.
    """
    match = _SEMESTER.match(str(semester).strip().upper())
    if not match:
        raise PrioritizeError(f"semester must look like 2027A or 2027B, got {semester!r}")
    year, half = int(match.group(1)), match.group(2)
    a_month, a_day = _month_day(a_start, "semester A start")
    b_month, b_day = _month_day(b_start, "semester B start")
    if (b_month, b_day) <= (a_month, a_day):
        raise PrioritizeError(f"semester B start {b_start} must come after semester A start {a_start} "
                              "within the year")
    if half == "A":
        return dt.date(year, a_month, a_day), dt.date(year, b_month, b_day) - dt.timedelta(days=1)
    return dt.date(year, b_month, b_day), dt.date(year + 1, a_month, a_day) - dt.timedelta(days=1)


@dataclass(frozen=True)
class SeasonTable:
    """Observable hours per target and month.

    Attributes
    ----------
    months : list of str
        ``"YYYY-MM"`` labels, in order.
    hours : numpy.ndarray
        ``(n_targets, n_months)`` hours in dark time at air mass ≤ the limit
        (NaN for targets without valid coordinates).
    dark_hours : numpy.ndarray
        ``(n_months,)`` dark hours available in each month.
    nights : numpy.ndarray
        ``(n_months,)`` number of nights counted in each month.
    """

    months: list
    hours: np.ndarray
    dark_hours: np.ndarray
    nights: np.ndarray

    @property
    def total_hours(self) -> np.ndarray:
        """Hours over the whole period, per target."""
        return self.hours.sum(axis=1)


def season_hours(site: Site, first_night: dt.date, last_night: dt.date, ra_deg, dec_deg, *,
                 airmass_max: float = 2.0, moon_ok_illumination: float = 0.0,
                 sun_altitude_max_deg: float = TWILIGHT_ALTITUDE_DEG["astronomical"],
                 step_minutes: float = 10.0) -> SeasonTable:
    """Dark hours at air mass ≤ ``airmass_max`` for each target, per month (module docstring).

    Parameters
    ----------
    site : Site
    first_night, last_night : datetime.date
        Local evening dates, both included (at most 400 nights).
    ra_deg, dec_deg : array_like
        ICRS coordinates in degrees, ``(n,)``; invalid ones give NaN hours.
    airmass_max : float
        Air-mass limit (≥ 1).
    moon_ok_illumination : float
        The Moon may be up when its illuminated fraction is at most this (0-1).
    sun_altitude_max_deg : float
        The Sun must be below this altitude (degrees; −18 astronomical night).
    step_minutes : float
        Sampling step (1-60 minutes).

    Returns
    -------
    SeasonTable

    Raises
    ------
    PrioritizeError
        Invalid dates or limits; ModelRangeError for dates outside 1962-2099.
    """
    nights_total = (last_night - first_night).days + 1
    if not 1 <= nights_total <= 400:
        raise PrioritizeError(f"the period must hold 1 to 400 nights, got {first_night} to {last_night}")
    if not np.isfinite(airmass_max) or airmass_max < 1.0:
        raise PrioritizeError(f"airmass limit must be >= 1, got {airmass_max!r}")
    if not 0.0 <= moon_ok_illumination <= 1.0:
        raise PrioritizeError(f"Moon illumination threshold must be 0-1, got {moon_ok_illumination!r}")
    if not 1.0 <= step_minutes <= 60.0:
        raise PrioritizeError(f"step must be 1-60 minutes, got {step_minutes!r}")
    ra = np.asarray(ra_deg, dtype=float)
    dec = np.asarray(dec_deg, dtype=float)
    valid = np.isfinite(ra) & np.isfinite(dec) & (ra >= 0) & (ra < 360) & (np.abs(dec) <= 90)

    dates = [first_night + dt.timedelta(days=k) for k in range(nights_total)]
    noon = local_noon_mjd(site, dates)
    per_night = int(round(24 * 60 / step_minutes))
    mjd = (noon[:, None] + np.arange(per_night)[None, :] * (step_minutes / 1440.0)).ravel()
    night_month = np.array([f"{d:%Y-%m}" for d in dates])
    sample_month = np.repeat(night_month, per_night)
    track = sun_moon_track(site, mjd)
    dark = (track.sun_altitude_deg < sun_altitude_max_deg) & (
        ~track.moon_up | (track.moon_illumination <= moon_ok_illumination))

    months = list(dict.fromkeys(night_month))
    step_hours = step_minutes / 60.0
    sin_min = np.sin(np.radians(float(altitude_for_airmass(airmass_max))))
    hours = np.full((ra.size, len(months)), np.nan)
    dark_hours = np.zeros(len(months))
    nights = np.zeros(len(months), dtype=np.int64)
    index = np.flatnonzero(valid)
    for j, month in enumerate(months):
        in_month = sample_month == month
        nights[j] = int((night_month == month).sum())
        samples = in_month & dark
        dark_hours[j] = samples.sum() * step_hours
        if index.size == 0:
            continue
        zenith = track.zenith[samples]
        middle = 0.5 * (mjd[in_month][0] + mjd[in_month][-1])
        directions = apparent_directions(ra[index], dec[index], middle)
        for block in np.array_split(np.arange(index.size), max(1, int(np.ceil(index.size / _TARGET_CHUNK)))):
            above = (directions[block] @ zenith.T) >= sin_min
            hours[index[block], j] = above.sum(axis=1) * step_hours
    return SeasonTable(months=months, hours=hours, dark_hours=dark_hours, nights=nights)
