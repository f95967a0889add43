"""Observing sites: TOML presets in ``configs/sites/`` and user TOML files.

A site file holds::

    name = "Mauna Kea"
    latitude_deg = 19.823611      # geodetic, north positive
    longitude_deg = -155.470833   # east positive
    height_m = 4207.0             # above the ellipsoid (sea level is close enough for planning)
    timezone = "Pacific/Honolulu" # IANA name, used to read and show local times
    source = "where the coordinates come from"
    extinction_6708 = 0.07        # optional: atmospheric extinction near 6708 A (mag per air mass)
    extinction_source = "where the extinction coefficient comes from"

Without ``extinction_6708`` the site gets :data:`DEFAULT_EXTINCTION_6708` (0.07 mag per
air mass, the project's default near 6700 A at a good site; common practice).

Unknown keys and out-of-range values raise :class:`~prioritize.errors.ConfigError`
naming the key.
"""

from __future__ import annotations

import math
import zoneinfo
from dataclasses import dataclass
from pathlib import Path

from typing import TYPE_CHECKING

from ..config import _read_toml
from ..errors import ConfigError

if TYPE_CHECKING:
    from astropy.coordinates import EarthLocation

SITES_DIR = Path(__file__).resolve().parents[2] / "configs" / "sites"

_REQUIRED = ("name", "latitude_deg", "longitude_deg", "height_m", "timezone")
_OPTIONAL = ("source", "extinction_6708", "extinction_source")
_RANGES = {"latitude_deg": (-90.0, 90.0), "longitude_deg": (-180.0, 360.0),
           "height_m": (-500.0, 9000.0), "extinction_6708": (0.0, 1.0)}
DEFAULT_EXTINCTION_6708 = 0.07
"""Atmospheric extinction near 6708 A (mag per air mass) for a site file without its own value:
the project's default for a good site (La Silla 0.04-0.05, Mauna Kea 0.06-0.08; common practice)."""


@dataclass(frozen=True)
class Site:
    """A place on Earth to observe from.

    Attributes
    ----------
    name : str
        Display name.
    latitude_deg : float
        Geodetic latitude, degrees, north positive.
    longitude_deg : float
        Longitude, degrees, east positive, in (-180, 180].
    height_m : float
        Height above the WGS84 ellipsoid, metres.
    timezone : str
        IANA time-zone name (e.g. ``"Pacific/Honolulu"``) for local dates and times.
    source : str
        Where the coordinates come from.
    extinction_6708 : float
        Atmospheric extinction near 6708 A, magnitudes per air mass (0-1); it scales the
        stellar flux by 10^(-0.4 k X) in the exposure of each slot and the scattered
        moonlight (:mod:`prioritize.sky.moonlight`).
    extinction_source : str
        Where the extinction coefficient comes from.
    """

    name: str
    latitude_deg: float
    longitude_deg: float
    height_m: float
    timezone: str
    source: str = ""
    extinction_6708: float = DEFAULT_EXTINCTION_6708
    extinction_source: str = "default for a good site near 6700 A (common practice)"

    def __post_init__(self):
        for key, (lo, hi) in _RANGES.items():
            value = getattr(self, key)
            if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
                raise ConfigError(f"site key {key} must be a number, got {value!r}")
            if not lo <= value <= hi:
                raise ConfigError(f"site key {key} = {value!r} is outside the allowed range {lo} to {hi}")
        lon = ((float(self.longitude_deg) + 180.0) % 360.0) - 180.0
        object.__setattr__(self, "longitude_deg", 180.0 if lon == -180.0 else lon)
        object.__setattr__(self, "latitude_deg", float(self.latitude_deg))
        object.__setattr__(self, "height_m", float(self.height_m))
        object.__setattr__(self, "extinction_6708", float(self.extinction_6708))
        if not isinstance(self.name, str) or not self.name.strip():
            raise ConfigError("site key name must be non-empty text")
        try:
            zoneinfo.ZoneInfo(self.timezone)
        except (zoneinfo.ZoneInfoNotFoundError, ValueError, TypeError) as exc:
            raise ConfigError(f"site key timezone = {self.timezone!r} is not an IANA time-zone "
                              "name such as \"America/Santiago\"") from exc

    @property
    def location(self) -> EarthLocation:
        """The site as an astropy EarthLocation (WGS84)."""
        import astropy.units as u
        from astropy.coordinates import EarthLocation

        return EarthLocation.from_geodetic(self.longitude_deg * u.deg, self.latitude_deg * u.deg,
                                           self.height_m * u.m)

    @property
    def zone(self) -> zoneinfo.ZoneInfo:
        """The site's time zone."""
        return zoneinfo.ZoneInfo(self.timezone)


def site_from_dict(raw: dict, origin: str = "site file") -> Site:
    """Validate a parsed TOML table into a :class:`Site`.

    Raises
    ------
    ConfigError
        On a missing or unknown key, or a value of the wrong type or range.
    """
    unknown = sorted(set(raw) - set(_REQUIRED) - set(_OPTIONAL))
    if unknown:
        raise ConfigError(f"{origin}: unknown key {unknown[0]}; allowed keys: "
                          f"{', '.join(_REQUIRED + _OPTIONAL)}")
    missing = [key for key in _REQUIRED if key not in raw]
    if missing:
        raise ConfigError(f"{origin}: missing key {missing[0]}; required keys: {', '.join(_REQUIRED)}")
    for key in ("name", "timezone", "source", "extinction_source"):
        if key in raw and not isinstance(raw[key], str):
            raise ConfigError(f"{origin}: site key {key} must be text, got {raw[key]!r}")
    try:
        return Site(**raw)
    except ConfigError as exc:
        raise ConfigError(f"{origin}: {exc}") from exc


def list_sites() -> list[str]:
    """Names of the bundled presets (file stems in ``configs/sites/``), sorted."""
    return sorted(p.stem for p in SITES_DIR.glob("*.toml"))


def load_site(name_or_path: str | Path) -> Site:
    """A bundled preset by name (``"mauna-kea"``) or a user TOML file by path.

    Raises
    ------
    ConfigError
        If the name is neither a preset nor an existing file, or the file is invalid.
    """
    text = str(name_or_path)
    path = Path(text)
    if not path.is_file():
        preset = SITES_DIR / f"{text.lower()}.toml"
        if not preset.is_file():
            raise ConfigError(f"unknown site {text!r}: give a TOML file or one of: "
                              f"{', '.join(list_sites())}")
        path = preset
    return site_from_dict(_read_toml(path), origin=f"site file {path}")
