"""Offline time and Earth-orientation settings, and the dates they support.

astropy converts UTC to UT1 (Earth rotation) and applies polar motion with the
IERS tables bundled in ``astropy-iers-data``.  With its default settings astropy
tries to download fresh tables and, once the bundled predictions are more than
30 days old, refuses to compute at all.  :func:`configure_offline` switches this
off (settings measured with astropy 6-8, tests/test_sky.py) so that nothing in
:mod:`prioritize.sky` touches the network.

Dates past the end of the bundled table are computed with UT1-UTC held at its
last tabulated value and polar motion set to its long-term mean.  While leap
seconds keep |UT1-UTC| below 0.9 s the resulting clock error is below a second,
i.e. a few arcseconds of altitude; decades ahead it may reach tens of seconds
(arcminutes).  Either is harmless for planning, so such dates get one
:class:`~prioritize.errors.PrioritizeWarning` saying so and astropy's own
warnings about it are silenced.

The rule for dates (see :func:`check_supported_dates`):

- 1962-01-01 to the end of the bundled table: computed without comment;
- after the table, up to 2099-12-31: computed, with the warning above;
- before 1962-01-01 (no Earth-rotation series) or after 2099-12-31 (ERFA's
  Earth ephemeris and the leap-second rules are undefined): refused with a
  :class:`~prioritize.errors.ModelRangeError`.
"""

from __future__ import annotations

import contextlib
import datetime as dt
import warnings

import numpy as np
from astropy.time import update_leap_seconds
from astropy.utils import data as astropy_data
from astropy.utils import iers

from ..errors import ModelRangeError, PrioritizeWarning

EARLIEST_SUPPORTED_MJD = 37665.0   # 1962-01-01 UTC, start of the IERS Earth-rotation series
LATEST_SUPPORTED_MJD = 88069.0     # 2100-01-01 UTC (exclusive): ERFA's Earth ephemeris covers 1900-2100
_MJD_EPOCH = dt.datetime(1858, 11, 17, tzinfo=dt.timezone.utc)

_ASTROPY_TIME_WARNINGS = (
    r".*polar motions for times (after|before) IERS data is valid.*",
    r".*dubious year.*",
    r".*date outside.*the range 1900-2100.*",
)


def configure_offline() -> None:
    """Make astropy work from its bundled IERS tables without any download.

    Sets ``astropy.utils.iers.conf.auto_download = False``,
    ``iers.conf.auto_max_age = None`` and
    ``astropy.utils.data.conf.allow_internet = False``, then loads the bundled
    leap-second table into ERFA at once (otherwise the first date parsed before
    astropy does so is checked against ERFA's older built-in table and flagged
    as a "dubious year"); idempotent.

    References
    ----------
    Offline sky computations measured with astropy 6-8 (tests/test_sky.py).
    """
    iers.conf.auto_download = False
    iers.conf.auto_max_age = None
    astropy_data.conf.allow_internet = False
    update_leap_seconds()


def mjd_to_datetime(mjd: float, zone: dt.tzinfo = dt.timezone.utc) -> dt.datetime:
    """A UTC MJD as an aware datetime in ``zone``, to the second (plain calendar arithmetic:
    no ERFA call, so no date is ever flagged; a leap second itself is not representable)."""
    return (_MJD_EPOCH + dt.timedelta(seconds=round(float(mjd) * 86400.0))).astimezone(zone)


def datetime_to_mjd(moment: dt.datetime) -> float:
    """An aware datetime as a UTC MJD."""
    return (moment - _MJD_EPOCH).total_seconds() / 86400.0


def bundled_table_end_mjd() -> float:
    """UTC MJD of the last entry of the bundled Earth-orientation (IERS) table."""
    return float(np.max(iers.earth_orientation_table.get()["MJD"].value))


def check_supported_dates(mjd) -> None:
    """Refuse unsupported dates; warn once for dates past the bundled IERS table.

    Parameters
    ----------
    mjd : array_like
        UTC MJDs of the instants about to be computed.

    Raises
    ------
    ModelRangeError
        If any instant lies before 1962-01-01 or after 2099-12-31 UTC.

    Warns
    -----
    PrioritizeWarning
        If any instant lies past the end of the bundled IERS table: UT1-UTC is
        then held at its last value (sub-second to tens-of-seconds clock error,
        arcseconds to arcminutes of altitude: harmless for planning).
    """
    mjd = np.atleast_1d(np.asarray(mjd, dtype=float))
    first, last = float(mjd.min()), float(mjd.max())
    if first < EARLIEST_SUPPORTED_MJD or last >= LATEST_SUPPORTED_MJD:
        raise ModelRangeError(
            f"dates must lie between 1962-01-01 and 2099-12-31 (got {mjd_to_datetime(first):%Y-%m-%d} "
            f"to {mjd_to_datetime(last):%Y-%m-%d}): outside this range Earth-rotation data, "
            "leap seconds or the Earth ephemeris are undefined")
    end = bundled_table_end_mjd()
    if last > end:
        warnings.warn(
            f"dates after {mjd_to_datetime(end):%Y-%m-%d} lie past the bundled Earth-rotation (IERS) "
            "table: UT1-UTC is held at its last value, a clock error below a second for years "
            "(arcseconds of altitude; tens of seconds and arcminutes decades ahead): harmless "
            "for planning. Update the astropy-iers-data package for exact values.",
            PrioritizeWarning, stacklevel=2)


@contextlib.contextmanager
def quiet_time_warnings():
    """Silence astropy/ERFA warnings that :func:`check_supported_dates` already explains."""
    with warnings.catch_warnings():
        for pattern in _ASTROPY_TIME_WARNINGS:
            warnings.filterwarnings("ignore", message=pattern)
        yield


configure_offline()
