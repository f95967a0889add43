"""Spectrograph presets: what an exposure-time estimate needs to know about an instrument.

An :class:`Instrument` is a frozen dataclass loaded from a TOML file.  Three generic
classes ship in ``configs/instruments/`` (``echelle-2m``, ``echelle-4m``,
``echelle-8m``); they describe typical fibre-fed echelle spectrographs on telescopes
of those apertures, not any real instrument.  Users describe their own spectrograph
in a TOML file with the same keys and pass its path instead of a preset name.

Every value is validated on load: an unknown key, a missing key or a value outside
its allowed range raises :class:`~prioritize.errors.ConfigError` naming the key and
the allowed range.  Exposure times computed from these numbers are planning
estimates; the observatory's own exposure-time calculator prevails.
"""

from __future__ import annotations

import dataclasses
import math
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from .errors import ConfigError

PRESET_DIRECTORY = Path(__file__).resolve().parents[1] / "configs" / "instruments"


def _key(lo: float | None = None, hi: float | None = None, doc: str = "", kind: type = float):
    """A required dataclass field carrying its allowed range, type and meaning."""
    return field(metadata={"lo": lo, "hi": hi, "doc": doc, "kind": kind})


@dataclass(frozen=True)
class Instrument:
    """A spectrograph on its telescope, reduced to the numbers an S/N estimate needs.

    All values refer to the Li I 6708 A order.  Units are in the field names.
    """

    name: str = _key(doc="short name of the preset or user file", kind=str)
    description: str = _key(doc="one line saying what this instrument class is", kind=str)
    aperture_diameter_m: float = _key(0.1, 50.0, "primary mirror diameter (m)")
    central_obstruction: float = _key(0.0, 0.8, "secondary-mirror diameter / primary diameter")
    throughput_6708: float = _key(1e-4, 1.0, "total efficiency at 6708 A: telescope x slit or fibre "
                                             "x instrument x detector (the atmosphere is applied "
                                             "separately)")
    resolving_power: float = _key(1000.0, 300000.0, "lambda / delta-lambda of one resolution element")
    pixels_per_resolution_element: float = _key(1.5, 10.0, "detector pixels across one resolution "
                                                           "element in the dispersion direction")
    wavelength_min_angstrom: float = _key(2900.0, 25000.0, "blue end of the simultaneous coverage (A)")
    wavelength_max_angstrom: float = _key(3000.0, 25000.0, "red end of the simultaneous coverage (A)")
    read_noise_e: float = _key(0.0, 50.0, "read noise per pixel (electrons rms)")
    dark_current_e_per_s: float = _key(0.0, 1.0, "dark current per pixel (electrons per second)")
    sky_rc_mag_per_arcsec2: float = _key(15.0, 23.0, "dark-night sky surface brightness near "
                                                     "6708 A (R_C magnitudes per square arcsecond)")
    aperture_on_sky_arcsec2: float = _key(0.05, 50.0, "solid angle of the fibre or slit on the sky "
                                                      "(square arcseconds)")
    spatial_pixels: int = _key(1, 100, "pixels summed across the order (spatial direction)", int)
    readout_overhead_s: float = _key(0.0, 1800.0, "detector readout per exposure (s)")
    acquisition_overhead_s: float = _key(0.0, 3600.0, "slew, acquisition and set-up per target (s)")
    exposure_min_s: float = _key(0.1, 3600.0, "shortest exposure worth taking (s)")
    exposure_max_s: float = _key(1.0, 36000.0, "longest single exposure allowed (s)")

    @property
    def collecting_area_cm2(self) -> float:
        """Unobstructed collecting area, pi/4 D^2 (1 - obstruction^2), in cm^2."""
        diameter_cm = self.aperture_diameter_m * 100.0
        return math.pi / 4.0 * diameter_cm**2 * (1.0 - self.central_obstruction**2)

    def pixel_width_angstrom(self, wavelength_angstrom: float = 6707.8) -> float:
        """Dispersion per pixel, lambda / (R * pixels per resolution element), in A."""
        return wavelength_angstrom / (self.resolving_power * self.pixels_per_resolution_element)

    def covers(self, wavelength_angstrom):
        """True where a wavelength (A; scalar or array) falls inside the simultaneous coverage."""
        wavelength = np.asarray(wavelength_angstrom, dtype=float)
        return (wavelength >= self.wavelength_min_angstrom) & (wavelength <= self.wavelength_max_angstrom)


_FIELDS = {f.name: f for f in dataclasses.fields(Instrument)}


def _allowed(f: dataclasses.Field) -> str:
    lo, hi = f.metadata["lo"], f.metadata["hi"]
    return f"{lo} to {hi}" if lo is not None else "any text"


def _check(key: str, value: Any, source: str) -> Any:
    f = _FIELDS[key]
    kind = f.metadata["kind"]
    if kind is str:
        if not isinstance(value, str) or not value.strip():
            raise ConfigError(f"{source}: {key} must be non-empty text, got {value!r}")
        return value
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise ConfigError(f"{source}: {key} must be a number ({f.metadata['doc']}), got {value!r}")
    if kind is int and not float(value).is_integer():
        raise ConfigError(f"{source}: {key} must be a whole number, got {value!r}")
    value = kind(value)
    lo, hi = f.metadata["lo"], f.metadata["hi"]
    if not (lo <= value <= hi):
        raise ConfigError(f"{source}: {key} = {value!r} is outside the allowed range "
                          f"{_allowed(f)} ({f.metadata['doc']})")
    return value


def instrument_from_dict(raw: dict[str, Any], source: str = "instrument") -> Instrument:
    """Validate a flat dict (as parsed from TOML) into an :class:`Instrument`.

    Parameters
    ----------
    raw : dict
        One entry per :class:`Instrument` field; every field is required.
    source : str
        Where the values came from, used in error messages.

    Raises
    ------
    ConfigError
        For an unknown key, a missing key, a value of the wrong type or outside its
        allowed range, or a coverage whose blue end is not below its red end.
    """
    unknown = sorted(set(raw) - set(_FIELDS))
    if unknown:
        raise ConfigError(f"{source}: unknown key {unknown[0]!r}; allowed keys: {', '.join(_FIELDS)}")
    missing = [k for k in _FIELDS if k not in raw]
    if missing:
        f = _FIELDS[missing[0]]
        raise ConfigError(f"{source}: missing key {missing[0]!r} ({f.metadata['doc']}; "
                          f"allowed range {_allowed(f)})")
    values = {k: _check(k, v, source) for k, v in raw.items()}
    if values["wavelength_min_angstrom"] >= values["wavelength_max_angstrom"]:
        raise ConfigError(f"{source}: wavelength_min_angstrom must be below wavelength_max_angstrom")
    if values["exposure_min_s"] > values["exposure_max_s"]:
        raise ConfigError(f"{source}: exposure_min_s must not exceed exposure_max_s")
    return Instrument(**values)


def list_instruments() -> list[str]:
    """Names of the bundled presets, sorted."""
    return sorted(p.stem for p in PRESET_DIRECTORY.glob("*.toml"))


def load_instrument(name_or_path: str | Path) -> Instrument:
    """Load a bundled preset by name, or a user's TOML file by path.

    Parameters
    ----------
    name_or_path : str or pathlib.Path
        A preset name from :func:`list_instruments` (e.g. ``"echelle-4m"``), or the
        path of a TOML file holding every key of :class:`Instrument`.

    Returns
    -------
    Instrument

    Raises
    ------
    ConfigError
        If the name is neither a preset nor an existing file, the file is not valid
        TOML, or a value is unknown, missing or out of range.
    """
    path = Path(name_or_path)
    if not path.suffix and not path.exists():
        path = PRESET_DIRECTORY / f"{name_or_path}.toml"
        if not path.exists():
            raise ConfigError(f"unknown instrument {str(name_or_path)!r}; presets: "
                              f"{', '.join(list_instruments())}, or give the path of a TOML file")
    try:
        with open(path, "rb") as fh:
            raw = tomllib.load(fh)
    except FileNotFoundError as exc:
        raise ConfigError(f"instrument file {path} does not exist") from exc
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"instrument file {path} is not valid TOML: {exc}") from exc
    return instrument_from_dict(raw, source=str(path))
