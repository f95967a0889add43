"""Run configuration: frozen dataclasses loaded from TOML and validated on load.

Every section of ``configs/default.toml`` maps to one dataclass below.  Unknown
keys and out-of-range values raise :class:`~prioritize.errors.ConfigError` naming
the key (``section.key``) and the allowed values.  Command-line options override
the file through :func:`with_overrides`.
"""

from __future__ import annotations

import dataclasses
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from .errors import ConfigError



def _spec(default, *, lo=None, hi=None, choices=None, doc=""):
    """A dataclass field carrying its allowed range or choices."""
    return field(default=default, metadata={"lo": lo, "hi": hi, "choices": choices, "doc": doc})


@dataclass(frozen=True)
class PlanetConfig:
    """The planet assumed to be engulfed (composition: Asplund et al. 2009, ARA&A 47, 481; Lodders 2003)."""

    kind: str = _spec("gas_giant", choices=("gas_giant", "brown_dwarf", "rocky"),
                      doc="composition class of the engulfed body")
    mass_mjup: float = _spec(1.0, lo=1e-5, hi=80.0, doc="mass in Jupiter masses (ranks the list)")
    extra_masses_mjup: tuple = _spec((), lo=1e-5, hi=80.0,
                                     doc="further planet masses reported as extra columns")
    hydrogen_fraction: float = _spec(0.70, lo=0.0, hi=1.0,
                                     doc="hydrogen mass fraction X_p (Jupiter ~0.70)")
    a_li: float = _spec(3.26, lo=-2.0, hi=4.5,
                        doc="A(Li) of planet material of protosolar metallicity; meteoritic 3.26")
    bulk_metallicity: float = _spec(0.06, lo=1e-4, hi=1.0,
                                    doc="bulk metal mass fraction Z_p of the planet (Jupiter ~0.03-0.13)")
    li_follows_metals: bool = _spec(True, doc="planet A(Li) = a_li + log10(Z_p / 0.0142): lithium "
                                              "arrives with the solids that enriched the planet")
    li_mass_fraction: float = _spec(1.5e-6, lo=0.0, hi=1e-3,
                                    doc="Li mass fraction for rocky bodies (CI chondrite ~1.5e-6)")
    deposition: str = _spec("full", choices=("full", "ram-pressure", "virial"),
                            doc="where the planet's material ends up, for the ranking "
                                "(Jia & Spruit 2018; Siess & Livio 1999)")


@dataclass(frozen=True)
class ThresholdConfig:
    """What counts as a signature."""

    z_signature: float = _spec(3.0, lo=0.5, hi=20.0, doc="significance (sigma) of a signature")
    min_lifetime_myr: float = _spec(1.0, lo=0.0, hi=1e4, doc="shortest useful signature lifetime")


@dataclass(frozen=True)
class BaselineConfig:
    """The lithium baseline the enrichment is measured against."""

    source: str = _spec("prior", choices=("prior", "reference"),
                        doc="built-in model prior, or the user's reference population")
    reference: str = _spec("", doc="reference abundance table (any catalog format) for source = reference")
    teff_step: float = _spec(100.0, lo=10.0, hi=2000.0, doc="reference bin width in Teff (K)")
    logg_step: float = _spec(0.25, lo=0.05, hi=2.0, doc="reference bin width in logg (dex)")
    feh_step: float = _spec(0.0, lo=0.0, hi=2.0, doc="reference bin width in [Fe/H] (0: not binned)")
    min_count: int = _spec(20, lo=1, hi=100000, doc="fewest reference stars per bin before merging")
    prior_scatter_dex: float = _spec(0.0, lo=0.0, hi=2.0,
                                     doc="scatter of the built-in prior (dex); 0 = by stage")
    measurement_error_dex: float = _spec(0.0, lo=0.0, hi=2.0,
                                         doc="expected A(Li) measurement error, added in quadrature")
    thermohaline_depletion_dex: float = _spec(
        1.0, lo=0.0, hi=4.0,
        doc="Li destroyed by thermohaline mixing between the RGB bump and the tip (dex); "
            "sets the baseline past the bump and the rate that ends a signature there")


@dataclass(frozen=True)
class ScoringConfig:
    """Sampling and reproducibility."""

    samples_per_star: int = _spec(64, lo=4, hi=4096,
                                  doc="posterior samples carried through the chain per star")
    seed: int = _spec(20261201, lo=0, hi=2**32 - 1, doc="random seed (results are deterministic)")


@dataclass(frozen=True)
class ClusterConfig:
    """Cluster context used when the catalog has none (cluster mode)."""

    age_gyr: float = _spec(float("nan"), lo=0.001, hi=14.0, doc="cluster age in Gyr")
    feh: float = _spec(float("nan"), lo=-2.5, hi=0.7, doc="cluster [Fe/H]")
    distance_pc: float = _spec(float("nan"), lo=1.0, hi=1e5, doc="cluster distance in pc")
    ebv: float = _spec(float("nan"), lo=0.0, hi=5.0, doc="cluster E(B-V)")


@dataclass(frozen=True)
class RotationConfig:
    """How rotation evidence is judged (Barnes 2007; Mamajek & Hillenbrand 2008; Carlberg et al. 2011)."""

    gyro_relation: str = _spec("barnes2007", choices=("barnes2007", "mh08"),
                               doc="gyrochronology relation for main-sequence dwarfs")
    other_cause_fraction: float = _spec(0.05, lo=1e-3, hi=0.9,
                                        doc="share of normal stars spun up by other causes "
                                            "(binaries, mergers); bounds the rotation evidence")
    rapid_anomaly_sigma: float = _spec(3.0, lo=0.5, hi=50.0,
                                       doc="rotation anomaly (sigma) that counts as anomalous")
    rapid_only: bool = _spec(False, doc="keep only rapid or anomalous rotators in the ranking")


@dataclass(frozen=True)
class ObservingConfig:
    """The instrument and conditions the observing cost is computed for (Bessell et al. 1998; Cayrel 1988)."""

    instrument: str = _spec("echelle-4m", doc="preset name in configs/instruments/ or a TOML path")
    airmass: float = _spec(1.2, lo=1.0, hi=3.0, doc="airmass assumed for the exposure")
    extinction_coeff: float = _spec(0.07, lo=0.0, hi=1.0,
                                    doc="atmospheric extinction near 6708 A (mag per airmass)")
    k_sigma: float = _spec(3.0, lo=1.0, hi=20.0,
                           doc="the enrichment's equivalent-width rise must be seen at this many sigma")
    min_snr_per_pixel: float = _spec(50.0, lo=1.0, hi=2000.0,
                                     doc="lowest S/N per pixel at 6708 A for a usable A(Li)")
    ew_floor_mA: float = _spec(5.0, lo=0.0, hi=200.0,
                               doc="systematic EW floor (continuum placement, Fe I 6707.4 blend): "
                                   "smaller rises are not measurable, and A(Li) below it is a limit")
    cool_limit_k: float = _spec(4000.0, lo=2500.0, hi=6000.0,
                                doc="below this Teff TiO bands blanket 6708 A and the line-strength "
                                    "model is extrapolated: A(Li) is harder to measure")
    cool_measured_factor: float = _spec(0.2, lo=0.0, hi=1.0,
                                        doc="P(measured) is multiplied by this below cool_limit_k")


@dataclass(frozen=True)
class SeismologyConfig:
    """Asteroseismic scaling relations (prioritize/stars/seismology.py)."""

    f_dnu_rgb: float = _spec(1.0, lo=0.8, hi=1.2,
                             doc="correction factor on Delta nu for red-giant-branch stars and "
                                 "unclassified ones (Delta nu / f is scaled to the Sun)")
    f_dnu_clump: float = _spec(1.0, lo=0.8, hi=1.2,
                               doc="correction factor on Delta nu for red-clump (core helium "
                                   "burning) stars")


@dataclass(frozen=True)
class RunConfig:
    """Batching."""

    batch_size: int = _spec(5000, lo=100, hi=10_000_000, doc="stars per batch (bounds memory)")
    tracks: str = _spec("", doc="your own stellar tracks (our track table or MESA history files); "
                                "empty: the built-in grid")
    top: int = _spec(15, lo=0, hi=10_000, doc="rows shown in the terminal table")


@dataclass(frozen=True)
class Config:
    """The whole configuration."""

    planet: PlanetConfig = field(default_factory=PlanetConfig)
    thresholds: ThresholdConfig = field(default_factory=ThresholdConfig)
    baseline: BaselineConfig = field(default_factory=BaselineConfig)
    scoring: ScoringConfig = field(default_factory=ScoringConfig)
    cluster: ClusterConfig = field(default_factory=ClusterConfig)
    rotation: RotationConfig = field(default_factory=RotationConfig)
    observing: ObservingConfig = field(default_factory=ObservingConfig)
    seismology: SeismologyConfig = field(default_factory=SeismologyConfig)
    run: RunConfig = field(default_factory=RunConfig)
    columns: dict = field(default_factory=dict)

    def to_dict(self) -> dict[str, Any]:
        """Plain nested dict (for provenance sidecars)."""
        return dataclasses.asdict(self)


_SECTIONS = {f.name: f for f in dataclasses.fields(Config)}


def _check_value(section: str, f: dataclasses.Field, value: Any) -> Any:
    key = f"{section}.{f.name}"
    meta = f.metadata
    expected = type(f.default)
    if expected is bool:
        if not isinstance(value, bool):
            raise ConfigError(f"{key} must be true or false, got {value!r}")
        return value
    if expected in (int, float):
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            raise ConfigError(f"{key} must be a number, got {value!r}")
        if expected is int and not float(value).is_integer():
            raise ConfigError(f"{key} must be a whole number, got {value!r}")
        value = expected(value)
        lo, hi = meta.get("lo"), meta.get("hi")
        if value != value and expected is float:
            if f.default != f.default:         # NaN means "not set" where that is the default
                return value
            raise ConfigError(f"{key} must be a number, got nan")
        if (lo is not None and value < lo) or (hi is not None and value > hi):
            raise ConfigError(f"{key} = {value!r} is outside the allowed range {lo} to {hi}")
        return value
    if expected is tuple:
        if not isinstance(value, (list, tuple)) or not all(
                isinstance(v, (int, float)) and not isinstance(v, bool) for v in value):
            raise ConfigError(f"{key} must be a list of numbers, got {value!r}")
        lo, hi = meta.get("lo"), meta.get("hi")
        bad = [v for v in value if v != v or (lo is not None and v < lo) or (hi is not None and v > hi)]
        if bad:
            raise ConfigError(f"{key} has {bad} outside the allowed range {lo} to {hi}")
        return tuple(float(v) for v in value)
    if expected is str:
        if not isinstance(value, str):
            raise ConfigError(f"{key} must be text, got {value!r}")
        choices = meta.get("choices")
        if choices and value not in choices:
            raise ConfigError(f"{key} = {value!r} is not allowed; choose one of: {', '.join(choices)}")
        return value
    return value


def _build_section(name: str, raw: Any):
    cls = _SECTIONS[name].default_factory().__class__
    if name == "columns":
        if not isinstance(raw, dict) or not all(isinstance(v, str) for v in raw.values()):
            raise ConfigError("[columns] must map your column names to canonical names, e.g. Teff = \"teff_k\"")
        return dict(raw)
    if not isinstance(raw, dict):
        raise ConfigError(f"[{name}] must be a table of keys")
    known = {sf.name: sf for sf in dataclasses.fields(cls)}
    values = {}
    for key, value in raw.items():
        if key not in known:
            raise ConfigError(f"unknown key {name}.{key}; allowed keys in [{name}]: {', '.join(known)}")
        values[key] = _check_value(name, known[key], value)
    return cls(**values)


def config_from_dict(raw: dict[str, Any]) -> Config:
    """Validate a nested dict (as parsed from TOML) into a :class:`Config`."""
    sections = {}
    for name, value in raw.items():
        if name not in _SECTIONS:
            raise ConfigError(f"unknown section [{name}]; allowed sections: {', '.join(_SECTIONS)}")
        sections[name] = _build_section(name, value)
    return Config(**sections)


def load_config(path: str | Path | None = None) -> Config:
    """The defaults of the dataclasses (documented in ``configs/default.toml``),
    overlaid with the user's TOML file if one is given; keys left out keep their default."""
    if path is None:
        return Config()
    return config_from_dict(_read_toml(Path(path)))


def _read_toml(path: Path) -> dict[str, Any]:
    try:
        with open(path, "rb") as fh:
            return tomllib.load(fh)
    except FileNotFoundError as exc:
        raise ConfigError(f"config file {path} does not exist") from exc
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"config file {path} is not valid TOML: {exc}") from exc


def with_overrides(cfg: Config, overrides: dict[str, Any]) -> Config:
    """Return a copy with ``{"section.key": value}`` overrides applied and validated."""
    raw = cfg.to_dict()
    for dotted, value in overrides.items():
        if value is None:
            continue
        section, _, key = dotted.partition(".")
        if section not in raw or (section != "columns" and key not in raw[section]):
            raise ConfigError(f"unknown option {dotted}")
        raw[section][key] = value
    return config_from_dict(raw)
