"""Stellar evolution tracks: the grid at equivalent evolutionary points and its interpolation.

The built-in grid (``prioritize/data/tracks_grid.parquet``, made by
:mod:`prioritize.data.build_tracks`) holds single-star tracks from the fitting formulae
of Hurley, Pols & Tout (2000), resampled at equivalent evolutionary points (EEPs):
a fixed number of points per phase, so that the same EEP index means the same stage
on every track and interpolating between masses and metallicities compares like with
like.  The phases and their half-open EEP ranges are :data:`PHASE_EEPS`:

======================  ============  =================================================
phase                   EEPs          from - to (spacing within the phase)
======================  ============  =================================================
``main_sequence``       0 - 199       ZAMS - end of core H burning (path length in
                                      log L, log Teff and age: the hook is resolved)
``subgiant``            200 - 279     across the Hertzsprung gap (age)
``giant_branch``        280 - 479     base of the giant branch - tip (log L)
``core_he_burning``     480 - 579     He ignition - start of the early AGB (age;
                                      480-489 descend from the tip after
                                      non-degenerate ignition, 490 is the luminosity
                                      minimum: zero-age clump)
======================  ============  =================================================

Each phase includes both of its ends, so the last point of a phase and the first of
the next one are the same star at the same age (across the helium flash, the tip of
the giant branch and the start of core-He burning share the age).  After a
degenerate helium flash EEPs 480-490 coincide.  Low-mass metal-rich tracks whose
main-sequence lifetime exceeds ~16 Gyr lose their envelope before or during core-He
burning; their core-He-burning EEPs are NaN (``kstar`` -1).

Every track point also carries the outer convective envelope from our envelope
integration (:mod:`prioritize.stars.envelope`, run when the grid
is built, never at run time): M_cz, the radius, temperature and density at its
base, the lithium-preserving mass above 2.5 MK, the mixing length, a quality code
(:data:`prioritize.stars.envelope.TRACK_QUALITY_MEANINGS`), log rho and log T at
16 depths (:data:`PROFILE_DEPTH_FRACTIONS`) and, per track, the EEP of the RGB
bump.  The package reads them only through :func:`convective_envelope`,
:func:`envelope_profile` and :func:`rgb_bump_eep`.

Everything read from tracks is a model estimate for planning, with the accuracy of
the Hurley et al. fits to the detailed models of Pols et al. (1998) plus the
interpolation errors measured in ``tests/test_tracks.py`` (~1-2% in L, R and Teff
for most of the grid) and, for the envelope, the model's own accuracy (~5 % in
T_bcz, ~10-20 % in M_cz for the Sun) plus the errors measured in
``tests/test_grid_envelope.py`` — not a substitute for a detailed model of a
particular star.

This module is the run-time side: it reads the grid and interpolates it; it never
imports the package that built it.  Grid files in the same long format (columns
:data:`KEY_COLUMNS` + :data:`TRACK_COLUMNS`, optionally :data:`ENVELOPE_COLUMNS`
and :data:`PROFILE_COLUMNS`, EEP layout :data:`PHASE_EEPS`) load with
:func:`load_grid`; users' own tracks (our track-table format, MESA history files)
with :func:`prioritize.stars.track_sources.load_tracks`.
"""

from __future__ import annotations

import functools
import json
from dataclasses import dataclass, field
from importlib import resources
from pathlib import Path

import numpy as np

from ..constants import Z_SUN_TRACKS
from ..errors import CatalogError, PrioritizeError
from .envelope import PROFILE_DEPTH_FRACTIONS, PROFILE_POINTS, TRACK_QUALITY_NOT_COMPUTED

Z_SUN = Z_SUN_TRACKS

PHASE_EEPS = {
    "main_sequence": (0, 200),
    "subgiant": (200, 280),
    "giant_branch": (280, 480),
    "core_he_burning": (480, 580),
}
N_EEPS = PHASE_EEPS["core_he_burning"][1]
OUTSIDE_PHASES = "outside_grid"

KEY_COLUMNS = ("initial_mass_msun", "z", "eep")
TRACK_COLUMNS = {
    "age_myr": "age since the zero-age main sequence (Myr)",
    "logl": "log10 luminosity (L_sun)",
    "logr": "log10 radius (R_sun)",
    "logteff": "log10 effective temperature (K), from L and R with the IAU 2015 nominal solar values",
    "logg": "log10 surface gravity (cgs)",
    "mass_msun": "current mass after wind mass loss (M_sun)",
    "core_mass_msun": "helium core mass (M_sun); zero on the main sequence in the Hurley et al. fits",
    "m_cz_msun": "mass of the outer convective envelope (M_sun): our envelope integration "
                 "(prioritize.stars.envelope) in the built-in grid; in older grid files the fits' crude estimate",
    "kstar": "phase code of Hurley et al. 2000 (0/1 main sequence, 2 Hertzsprung gap, "
             "3 giant branch, 4 core-He burning); -1 where the track has no such phase",
}
DATA_COLUMNS = tuple(TRACK_COLUMNS)
ENVELOPE_COLUMNS = {
    "m_cz_fit_msun": "convective-envelope mass of the Hurley et al. (2000) fits (M_sun), kept for comparison",
    "r_bcz_rsun": "radius of the base of the outer convective envelope (R_sun)",
    "t_bcz_k": "temperature at the base of the outer convective envelope (K)",
    "rho_bcz_gcc": "density at the base of the outer convective envelope (g cm^-3)",
    "m_li_preserved_msun": "mass above the 2.5 MK isotherm, the lithium-preserving mass (M_sun)",
    "alpha_mlt": "mixing-length parameter of the envelope integration",
    "envelope_quality": "int8 code, see prioritize.stars.envelope.TRACK_QUALITY_MEANINGS",
    "rgb_bump_eep": "fractional EEP of the RGB bump of the track (the same on every row of a "
                    "track); NaN where the track has none",
}
"""Optional columns: a grid or user table without them still loads (NaN, quality
:data:`~prioritize.stars.envelope.TRACK_QUALITY_NOT_COMPUTED`)."""
PROFILE_QUANTITIES = ("rho", "t")
PROFILE_LOG_STEP_DEX = 0.002
"""Profiles are stored as int16 multiples of this step in log10 (0.46 %)."""


def profile_column(quantity, k):
    """Name of the stored profile column: ``prof_log_rho_07`` = log10 rho (g cm^-3) at depth 7."""
    return f"prof_log_{quantity}_{k:02d}"


PROFILE_COLUMNS = tuple(profile_column(q, k) for q in PROFILE_QUANTITIES for k in range(PROFILE_POINTS))
QUALITY_COLUMN = "envelope_quality"
BUMP_COLUMN = "rgb_bump_eep"
PHASE_CODE_COLUMN = "kstar"
MISSING_PHASE_CODE = -1
_LOG_INTERPOLATED = ("m_cz_msun", "m_cz_fit_msun", "r_bcz_rsun", "t_bcz_k", "rho_bcz_gcc",
                     "m_li_preserved_msun")
_CODE_COLUMNS = (PHASE_CODE_COLUMN, QUALITY_COLUMN)
_PROFILE_KEY = "profile:"
_LOG_FLOOR = 1e-30     # M_cz of a radiative envelope is ~1e-10 M_sun (the atmosphere); zero is floored

PROVENANCE_METADATA_KEY = b"prioritize.provenance"
_DEFAULT_GRID = "tracks_grid.parquet"


def feh_to_z(feh):
    """Metal mass fraction Z from [Fe/H] on the scale of the track fits.

    .. math:: Z = Z_\\odot \\, 10^{[\\mathrm{Fe/H}]}, \\qquad Z_\\odot = 0.02

    Scaled-solar mixture; the helium change with Z is ignored (as in the fits, where
    Y = 0.24 + 2Z is set by Z alone).

    Parameters
    ----------
    feh : array_like
        [Fe/H] (dex).  Non-finite values give NaN.

    Returns
    -------
    ndarray
        Z (mass fraction).  The built-in grid covers Z = 0.003-0.03
        ([Fe/H] = -0.82 to +0.18).

    References
    ----------
    Hurley, Pols & Tout 2000, MNRAS 315, 543, Sect. 2 (Z_sun = 0.02 of their fits).
    """
    return Z_SUN * 10.0 ** np.asarray(feh, dtype=float)


def z_to_feh(z):
    """[Fe/H] from the metal mass fraction Z, inverse of :func:`feh_to_z`.

    .. math:: [\\mathrm{Fe/H}] = \\log_{10}(Z / Z_\\odot), \\qquad Z_\\odot = 0.02

    Parameters
    ----------
    z : array_like
        Z (mass fraction), positive.  Non-finite values give NaN.

    Returns
    -------
    ndarray
        [Fe/H] (dex).

    Raises
    ------
    PrioritizeError
        If any finite Z is zero or negative.

    References
    ----------
    Hurley, Pols & Tout 2000, MNRAS 315, 543, Sect. 2.
    """
    z = np.asarray(z, dtype=float)
    if np.any(np.isfinite(z) & (z <= 0)):
        raise PrioritizeError("z_to_feh: metallicity Z must be positive (a mass fraction such as 0.02)")
    return np.log10(z / Z_SUN)


def stage_of_eep(eep):
    """Name of the phase of :data:`PHASE_EEPS` that contains each EEP.

    Parameters
    ----------
    eep : array_like
        Fractional EEP index.

    Returns
    -------
    ndarray of str
        ``"main_sequence"``, ``"subgiant"``, ``"giant_branch"`` or
        ``"core_he_burning"``; :data:`OUTSIDE_PHASES` for EEPs outside 0 .. N_EEPS-1
        or NaN.  The trade's finer stages (turn-off, lower/upper giant branch, red
        clump) are assigned by the placement code, not here.
    """
    eep = np.asarray(eep, dtype=float)
    names = np.full(eep.shape, OUTSIDE_PHASES, dtype=object)
    for name, (start, stop) in PHASE_EEPS.items():
        names[(eep >= start) & (eep < stop) & (eep <= N_EEPS - 1)] = name
    return names.astype(str)


def _bracket(nodes, x):
    """Lower node index, upper node index, fraction and inside-flag of ``x`` in ``nodes``.

    A one-node axis accepts only that node (fraction 0).
    """
    inside = (x >= nodes[0]) & (x <= nodes[-1])
    if nodes.size == 1:
        zero = np.zeros(x.shape, dtype=np.intp)
        return zero, zero, np.zeros(x.shape), inside
    lo = np.clip(np.searchsorted(nodes, x, side="right") - 1, 0, nodes.size - 2)
    frac = (x - nodes[lo]) / (nodes[lo + 1] - nodes[lo])
    return lo, lo + 1, frac, inside


@dataclass(frozen=True, eq=False)
class TrackGrid:
    """Stellar tracks on a regular (Z, initial mass, EEP) grid.

    Parameters
    ----------
    masses : ndarray, shape (n_m,)
        Initial masses (M_sun), strictly increasing.
    z : ndarray, shape (n_z,)
        Metal mass fractions, strictly increasing.
    eeps : ndarray, shape (n_e,)
        EEP indices 0 .. n_e-1 (layout :data:`PHASE_EEPS`).
    data : dict of str -> ndarray, shape (n_z, n_m, n_e)
        One array per column of :data:`TRACK_COLUMNS` (required) and of
        :data:`ENVELOPE_COLUMNS` (optional: missing ones become NaN, quality
        ``TRACK_QUALITY_NOT_COMPUTED``); NaN (kstar -1) where a track has no such phase.
    profiles : dict of str -> ndarray, shape (n_z, n_m, n_e, 16), optional
        log10 density (``"rho"``, g cm^-3) and log10 temperature (``"t"``, K) of the
        envelope at :data:`PROFILE_DEPTH_FRACTIONS`; None if the grid has none.
    provenance : dict
        How the grid was made (see ``tracks_provenance.json``).

    Notes
    -----
    Interpolation (:meth:`interpolate`) is linear in log Z, linear in initial mass
    and linear in fractional EEP; ages are interpolated in log age between tracks
    (main-sequence lifetimes scale as a power of mass), positive envelope quantities
    (M_cz spans 1e-10 to 1 M_sun) and the profiles in log.  Points outside the grid,
    or next to a track without the requested phase, give NaN: nothing is extrapolated.
    """

    masses: np.ndarray
    z: np.ndarray
    eeps: np.ndarray
    data: dict = field(repr=False)
    profiles: dict | None = field(default=None, repr=False)
    provenance: dict = field(default_factory=dict, repr=False)
    _filled: dict = field(init=False, repr=False, compare=False)
    _valid: np.ndarray = field(init=False, repr=False, compare=False)

    def __post_init__(self):
        masses = np.asarray(self.masses, dtype=float)
        z = np.asarray(self.z, dtype=float)
        eeps = np.asarray(self.eeps, dtype=np.intp)
        shape = (z.size, masses.size, eeps.size)
        if np.any(np.diff(masses) <= 0) or np.any(np.diff(z) <= 0) or np.any(z <= 0):
            raise PrioritizeError("TrackGrid: masses and z must be strictly increasing and z positive")
        if not np.array_equal(eeps, np.arange(N_EEPS)):
            raise PrioritizeError(f"TrackGrid: expected EEPs 0..{N_EEPS - 1} (layout PHASE_EEPS), "
                                  f"got {eeps.size} EEPs")
        missing = [c for c in DATA_COLUMNS if c not in self.data]
        if missing:
            raise PrioritizeError(f"TrackGrid: data lacks column(s) {missing}")
        unknown = [c for c in self.data if c not in TRACK_COLUMNS and c not in ENVELOPE_COLUMNS]
        if unknown:
            raise PrioritizeError(f"TrackGrid: unknown column(s) {unknown}; see TRACK_COLUMNS and "
                                  "ENVELOPE_COLUMNS")
        source = dict(self.data)
        for name in ENVELOPE_COLUMNS:
            if name not in source:
                source[name] = (np.full(shape, TRACK_QUALITY_NOT_COMPUTED) if name == QUALITY_COLUMN
                                else np.full(shape, np.nan))
        data = {}
        for name, values in source.items():
            arr = np.array(values, dtype=np.int8 if name in _CODE_COLUMNS else None)
            if arr.shape != shape:
                raise PrioritizeError(f"TrackGrid: column '{name}' has shape {arr.shape}, "
                                      f"expected (n_z, n_m, n_e) = {shape}")
            arr.flags.writeable = False
            data[name] = arr
        profiles = None
        if self.profiles is not None:
            profiles = {}
            for name in PROFILE_QUANTITIES:
                arr = np.array(self.profiles[name], dtype=np.float32)
                if arr.shape != shape + (PROFILE_POINTS,):
                    raise PrioritizeError(f"TrackGrid: profile '{name}' has shape {arr.shape}, "
                                          f"expected {shape + (PROFILE_POINTS,)}")
                arr.flags.writeable = False
                profiles[name] = arr
        valid = data[PHASE_CODE_COLUMN] != MISSING_PHASE_CODE
        if np.any(data["age_myr"][:, :, 0] != 0):
            raise PrioritizeError("TrackGrid: age_myr must be 0 at EEP 0 (ages count from the ZAMS)")
        filled = {}
        for name, arr in data.items():
            if name == BUMP_COLUMN:
                continue
            values = arr.astype(float)
            with np.errstate(divide="ignore", invalid="ignore"):
                if name == "age_myr":
                    values = np.log10(values)
                    values[:, :, 0] = 0.0          # log of the ZAMS age 0; restored after blending
                elif name in _LOG_INTERPOLATED:
                    values = np.log10(np.maximum(values, _LOG_FLOOR))
            filled[name] = np.where(valid, values, 0.0).ravel()
        for name in PROFILE_QUANTITIES if profiles is not None else ():
            filled[_PROFILE_KEY + name] = np.where(valid[..., None], profiles[name], 0.0).reshape(-1, PROFILE_POINTS)
        for name, value in (("masses", masses), ("z", z), ("eeps", eeps)):
            value.flags.writeable = False
            object.__setattr__(self, name, value)
        object.__setattr__(self, "data", data)
        object.__setattr__(self, "profiles", profiles)
        object.__setattr__(self, "_filled", filled)
        object.__setattr__(self, "_valid", valid.ravel())

    def in_range(self, mass, z):
        """True where (initial mass, Z) lies inside the grid.

        Parameters
        ----------
        mass : array_like
            Initial mass (M_sun).
        z : array_like
            Metal mass fraction.

        Returns
        -------
        ndarray of bool
            Broadcast shape of the inputs.
        """
        mass, z = np.broadcast_arrays(np.asarray(mass, dtype=float), np.asarray(z, dtype=float))
        return ((mass >= self.masses[0]) & (mass <= self.masses[-1])
                & (z >= self.z[0]) & (z <= self.z[-1]))

    def _corners(self, mass, z):
        """Flat offsets (4, n) of the track corners and their weights (4, n); inside flag."""
        im0, im1, fm, in_m = _bracket(self.masses, mass)
        with np.errstate(divide="ignore", invalid="ignore"):
            iz0, iz1, fz, in_z = _bracket(np.log10(self.z), np.log10(z))
        n_m, n_e = self.masses.size, self.eeps.size
        offsets = np.stack([(iz0 * n_m + im0), (iz0 * n_m + im1),
                            (iz1 * n_m + im0), (iz1 * n_m + im1)]) * n_e
        weights = np.stack([(1 - fz) * (1 - fm), (1 - fz) * fm, fz * (1 - fm), fz * fm])
        return offsets, weights, in_m & in_z

    def interpolate(self, mass, z, eep, columns=None):
        """Track quantities at (initial mass, Z, fractional EEP).

        Trilinear interpolation: linear in initial mass, in log Z and in fractional
        EEP (log age between tracks for ``age_myr``; log for the positive envelope
        quantities).  ``kstar`` and ``envelope_quality`` are taken from the nearest
        grid point.  Model estimates for planning (Hurley et al. 2000 fits, our
        envelope integration).

        Parameters
        ----------
        mass : array_like
            Initial mass (M_sun); grid range, built-in 0.70-3.50.
        z : array_like
            Metal mass fraction; grid range, built-in 0.003-0.03.
        eep : array_like
            Fractional EEP, 0 .. N_EEPS-1 (see :data:`PHASE_EEPS`).
        columns : sequence of str, optional
            Columns of :data:`TRACK_COLUMNS` or :data:`ENVELOPE_COLUMNS` (except
            ``rgb_bump_eep``, see :func:`rgb_bump_eep`) to return (default: the
            :data:`TRACK_COLUMNS`).

        Returns
        -------
        dict of str -> ndarray
            One float array per column with the broadcast shape of the inputs; NaN
            where the point is outside the grid, an input is not finite, or a
            neighbouring track lacks the phase (``kstar`` included) or the value.

        Raises
        ------
        PrioritizeError
            If a column name is unknown.
        """
        columns = DATA_COLUMNS if columns is None else tuple(columns)
        unknown = [c for c in columns if c not in self._filled or c.startswith(_PROFILE_KEY)]
        if unknown:
            raise PrioritizeError(f"TrackGrid.interpolate: unknown column(s) {unknown}; choose from "
                                  f"{[c for c in self._filled if not c.startswith(_PROFILE_KEY)]}")
        shape, lower, weights, fe, good = self._locate(mass, z, eep)
        out = {}
        for name in columns:
            if name in _CODE_COLUMNS:
                out[name] = self._nearest_code(name, lower, weights, fe, good).reshape(shape)
                continue
            at_lo, at_hi = self._blend(self._filled[name], lower, weights, fe)
            if name == "age_myr":
                e0 = lower[0] % self.eeps.size          # EEP node below each point
                at_lo = np.where(e0 == 0, 0.0, 10.0 ** at_lo)
                at_hi = 10.0 ** at_hi
            value = at_lo + fe * (at_hi - at_lo)
            if name in _LOG_INTERPOLATED:
                value = 10.0 ** value
            out[name] = np.where(good, value, np.nan).reshape(shape)
        return out

    def profile(self, mass, z, eep):
        """log10 rho and log10 T profiles at (initial mass, Z, fractional EEP).

        Interpolated like :meth:`interpolate` (linear in log of the values).

        Returns
        -------
        dict of str -> ndarray, shape (..., PROFILE_POINTS)
            ``"rho"`` (log10 g cm^-3) and ``"t"`` (log10 K); NaN where
            :meth:`interpolate` gives NaN or the grid carries no profiles.
        """
        shape, lower, weights, fe, good = self._locate(mass, z, eep)
        out = {}
        for name in PROFILE_QUANTITIES:
            if self.profiles is None:
                out[name] = np.full(shape + (PROFILE_POINTS,), np.nan)
                continue
            at_lo, at_hi = self._blend(self._filled[_PROFILE_KEY + name], lower, weights, fe)
            value = at_lo + fe[:, None] * (at_hi - at_lo)
            out[name] = np.where(good[:, None], value, np.nan).reshape(shape + (PROFILE_POINTS,))
        return out

    def _locate(self, mass, z, eep):
        """Broadcast shape, flat lower-EEP offsets (4, n), weights (4, n), EEP fraction, good flag."""
        mass, z, eep = np.broadcast_arrays(np.asarray(mass, dtype=float),
                                           np.asarray(z, dtype=float),
                                           np.asarray(eep, dtype=float))
        shape = mass.shape
        mass, z, eep = mass.ravel(), z.ravel(), eep.ravel()
        offsets, weights, inside = self._corners(mass, z)
        n_e = self.eeps.size
        inside &= (eep >= 0) & (eep <= n_e - 1)
        e0 = np.clip(np.floor(np.nan_to_num(eep)).astype(np.intp), 0, n_e - 2)
        fe = eep - e0
        lower = offsets + e0
        used = weights > 0
        valid = (np.all(~used | self._valid[lower], axis=0)
                 & (np.all(~used | self._valid[lower + 1], axis=0) | (fe == 0)))
        return shape, lower, weights, fe, inside & valid

    @staticmethod
    def _blend(table, lower, weights, fe):
        """Weighted corner values at the lower and upper EEP (corners of zero weight ignored)."""
        used = weights > 0
        if table.ndim == 1:
            lo = np.where(used, table[lower], 0.0)
            hi = np.where(used & (fe > 0), table[lower + 1], 0.0)
            return np.einsum("ij,ij->j", weights, lo), np.einsum("ij,ij->j", weights, hi)
        lo = np.where(used[..., None], table[lower], 0.0)
        hi = np.where((used & (fe > 0))[..., None], table[lower + 1], 0.0)
        return np.einsum("ij,ijk->jk", weights, lo), np.einsum("ij,ijk->jk", weights, hi)

    def _nearest_code(self, name, lower, weights, fe, good):
        """Integer code (kstar, envelope quality) of the nearest grid point (largest corner
        weight, nearest EEP)."""
        corner = np.argmax(weights, axis=0)
        flat = lower[corner, np.arange(corner.size)] + (fe >= 0.5)
        codes = self.data[name].ravel()[flat].astype(float)
        phase = self.data[PHASE_CODE_COLUMN].ravel()[flat]
        return np.where(good & (phase != MISSING_PHASE_CODE), codes, np.nan)

    def track(self, mass, z):
        """One track interpolated at every EEP of the grid.

        Parameters
        ----------
        mass : float
            Initial mass (M_sun).
        z : float
            Metal mass fraction.

        Returns
        -------
        dict of str -> ndarray, shape (n_e,)
            As :meth:`interpolate` with ``eep = self.eeps``.
        """
        return self.interpolate(float(mass), float(z), self.eeps)

    def eep_at_age(self, mass, z, age_myr):
        """Fractional EEP where the interpolated track of (mass, Z) reaches an age.

        Inverts the age interpolation of :meth:`interpolate` exactly (the age along
        an interpolated track never decreases), by bisection on the EEP nodes.

        Parameters
        ----------
        mass : array_like
            Initial mass (M_sun).
        z : array_like
            Metal mass fraction.
        age_myr : array_like
            Age since the ZAMS (Myr).

        Returns
        -------
        ndarray
            Fractional EEP (broadcast shape); NaN before the ZAMS (negative age), after
            the last point of the track, or outside the grid.  Where several EEPs share
            an age (phase joins, the instant helium flash) the last of them is returned.
        """
        mass, z, age = np.broadcast_arrays(np.asarray(mass, dtype=float),
                                           np.asarray(z, dtype=float),
                                           np.asarray(age_myr, dtype=float))
        shape = mass.shape
        mass, z, age = mass.ravel(), z.ravel(), age.ravel()
        offsets, weights, inside = self._corners(mass, z)
        n_e = self.eeps.size

        def node_age(e):
            idx = offsets + e
            used = weights > 0
            ok = np.all(~used | self._valid[idx], axis=0)
            log_age = np.einsum("ij,ij->j", weights, self._filled["age_myr"][idx])
            return np.where(ok, np.where(e == 0, 0.0, 10.0 ** log_age), np.inf)

        lo = np.zeros(age.size, dtype=np.intp)
        hi = np.full(age.size, n_e - 1, dtype=np.intp)
        while np.any(hi - lo > 1):
            mid = (lo + hi) // 2
            below = node_age(mid) <= age
            lo = np.where(below, mid, lo)
            hi = np.where(below, hi, mid)
        a_lo, a_hi = node_age(lo), node_age(hi)
        last = np.where(np.isfinite(a_hi), a_hi, a_lo)
        with np.errstate(invalid="ignore", divide="ignore"):
            eep = np.where(a_hi <= age, hi.astype(float), lo + (age - a_lo) / (a_hi - a_lo))
        ok = inside & (age >= 0) & (age <= last) & np.isfinite(a_lo)
        return np.where(ok, eep, np.nan).reshape(shape)


ENVELOPE_OUTPUTS = ("m_cz_msun", "r_bcz_rsun", "t_bcz_k", "rho_bcz_gcc", "m_li_preserved_msun",
                    QUALITY_COLUMN)


def convective_envelope(grid, mass, z, eep, columns=None):
    """Convective-envelope properties at track points: the package's one access point.

    Every part of the package reads envelope properties through this function, so
    that the source of the numbers can change in one place.  In the built-in grid
    they come from our envelope integration
    (:mod:`prioritize.stars.envelope`) done when the grid was built: an inward
    integration from a grey photosphere with mixing-length convection (one alpha
    calibrated on the Sun; on the giant branch alpha solved so the envelope meets
    the core), Saha EOS and OPAL + Ferguson opacities.  Here they are only
    interpolated (log of the values, trilinear in mass, log Z and EEP).  Planning
    estimates: ~5 % in T_bcz and ~10-20 % in M_cz for the Sun, plus the
    interpolation errors measured in ``tests/test_grid_envelope.py``.

    A grid or user table without the envelope columns (an older grid file, a table
    of tracks without them) gives NaN for everything but ``m_cz_msun`` and quality
    ``TRACK_QUALITY_NOT_COMPUTED`` (7).

    Parameters
    ----------
    grid : TrackGrid
        The track grid.
    mass, z, eep : array_like
        Initial mass (M_sun), metal mass fraction, fractional EEP; broadcastable.
    columns : sequence of str, optional
        Only these of :data:`ENVELOPE_OUTPUTS` (default: all).

    Returns
    -------
    dict of str -> ndarray
        ``m_cz_msun``: outer convective-envelope mass (M_sun); ``r_bcz_rsun``,
        ``t_bcz_k``, ``rho_bcz_gcc``: radius (R_sun), temperature (K) and density
        (g cm^-3) at its base; ``m_li_preserved_msun``: mass above the 2.5 MK
        isotherm (M_sun); ``envelope_quality``: code of the nearest grid point
        (:data:`prioritize.stars.envelope.TRACK_QUALITY_MEANINGS`), as float.  NaN
        outside the grid.

    References
    ----------
    Kippenhahn, Weigert & Weiss 2012, *Stellar Structure and Evolution*, ch. 7, 10-11;
    Böhm-Vitense 1958, Z. Astrophys. 46, 108; Iglesias & Rogers 1996, ApJ 464, 943;
    Ferguson et al. 2005, ApJ 623, 585; Hurley, Pols & Tout 2000, MNRAS 315, 543.
    """
    columns = ENVELOPE_OUTPUTS if columns is None else tuple(columns)
    unknown = [c for c in columns if c not in ENVELOPE_OUTPUTS]
    if unknown:
        raise PrioritizeError(f"convective_envelope: unknown column(s) {unknown}; choose from "
                              f"{list(ENVELOPE_OUTPUTS)}")
    return grid.interpolate(mass, z, eep, columns=columns)


def envelope_profile(grid, mass, z, eep):
    """Density and temperature of the convective envelope at 16 depths (planet disruption).

    The depths are evenly spaced in ln r from the photosphere to the base of the
    outer convective envelope, r_k = R (r_bcz/R)^(f_k), f_k = k/15
    (:data:`PROFILE_DEPTH_FRACTIONS`); rho and T come from the envelope integration
    stored in the grid, interpolated in log.  Planning estimates (see
    :func:`convective_envelope`); stored to 0.46 % (:data:`PROFILE_LOG_STEP_DEX`).

    Parameters
    ----------
    grid : TrackGrid
        The track grid.
    mass, z, eep : array_like
        Initial mass (M_sun), metal mass fraction, fractional EEP; broadcastable.

    Returns
    -------
    dict of str -> ndarray, shape (..., 16)
        ``r_rsun`` (R_sun), ``rho_gcc`` (g cm^-3), ``t_k`` (K); NaN outside the
        grid or where the grid carries no envelope profiles.

    References
    ----------
    Kippenhahn, Weigert & Weiss 2012, ch. 10-11; Jia & Spruit 2018, ApJ 864, 169 (the
    disruption the profiles are for).
    """
    cols = grid.interpolate(mass, z, eep, columns=["logr", "r_bcz_rsun"])
    prof = grid.profile(mass, z, eep)
    radius = 10.0 ** cols["logr"][..., None]
    r_rsun = radius * (cols["r_bcz_rsun"][..., None] / radius) ** PROFILE_DEPTH_FRACTIONS
    return {"r_rsun": r_rsun, "rho_gcc": 10.0 ** prof["rho"], "t_k": 10.0 ** prof["t"]}


def rgb_bump_eep(grid, mass, z):
    """Fractional EEP of the RGB bump of the track of (initial mass, Z).

    Each grid track stores its bump: the giant-branch point where the core mass
    reaches the deepest mass coordinate mixed by the convective envelope during
    first dredge-up, M_core = min(M - M_cz) (Kippenhahn, Weigert & Weiss 2012, ch. 32-33;
    :func:`prioritize.stars.envelope.rgb_bump_position`; interpolated in core
    mass between EEPs).  Between tracks the bump EEP is interpolated linearly in
    mass and log Z; giant-branch EEPs are equal steps in log L from the base to the
    tip, so this interpolates the bump's fractional position in log L.  Planning
    estimate: the bump luminosity depends on the depth of first dredge-up, which
    the envelope model makes ~0.02 M_sun too deep for low-mass stars (log L of the
    bump 0.2-0.3 dex fainter than the usual values, from memory, at 0.8-1.0 M_sun, close at 1.4-1.6
    M_sun; see ``tests/test_grid_envelope.py``).

    Parameters
    ----------
    grid : TrackGrid
        The track grid.
    mass, z : array_like
        Initial mass (M_sun), metal mass fraction; broadcastable.

    Returns
    -------
    ndarray
        Fractional EEP (giant branch, 280-479), NaN outside the grid, where a
        neighbouring track has no bump (helium ignites first, above ~2.2 M_sun) or
        where the grid carries no bump column.

    References
    ----------
    Kippenhahn, Weigert & Weiss 2012, ch. 32-33; Christensen-Dalsgaard 2015, MNRAS
    453, 666.
    """
    mass, z = np.broadcast_arrays(np.asarray(mass, dtype=float), np.asarray(z, dtype=float))
    shape = mass.shape
    offsets, weights, inside = grid._corners(mass.ravel(), z.ravel())
    bumps = grid.data[BUMP_COLUMN].ravel()[offsets]
    used = weights > 0
    ok = inside & np.all(~used | np.isfinite(bumps), axis=0)
    value = np.einsum("ij,ij->j", weights, np.where(used, bumps, 0.0))
    return np.where(ok, value, np.nan).reshape(shape)


def _columns_from_arrays(columns, source):
    """Scalar data columns and profiles (log10) from a dict of flat column arrays."""
    missing = [c for c in KEY_COLUMNS + DATA_COLUMNS if c not in columns]
    if missing:
        raise CatalogError(f"a track table needs columns {list(KEY_COLUMNS + DATA_COLUMNS)}; "
                           f"missing {missing} (see prioritize.stars.tracks.TRACK_COLUMNS for "
                           f"units)", path=source)
    present = [c for c in PROFILE_COLUMNS if c in columns]
    if present and len(present) != len(PROFILE_COLUMNS):
        raise CatalogError(f"a track table with envelope profiles needs all of {PROFILE_COLUMNS[0]}.."
                           f"{PROFILE_COLUMNS[-1]}; missing "
                           f"{[c for c in PROFILE_COLUMNS if c not in columns]}", path=source)
    return [c for c in (*DATA_COLUMNS, *ENVELOPE_COLUMNS) if c in columns], bool(present)


def _grid_from_arrays(columns, provenance, source):
    """TrackGrid from flat column arrays (one value per row); rows in any order."""
    names, with_profiles = _columns_from_arrays(columns, source)
    z_all = np.asarray(columns["z"], dtype=float)
    m_all = np.asarray(columns["initial_mass_msun"], dtype=float)
    eep = np.asarray(columns["eep"])
    masses, z = np.unique(m_all), np.unique(z_all)
    shape = (z.size, masses.size, N_EEPS)
    expected = np.tile(np.arange(N_EEPS), z.size * masses.size)
    in_order = (eep.size == expected.size and np.array_equal(eep, expected)
                and np.all((np.diff(z_all) > 0) | ((np.diff(z_all) == 0) & (np.diff(m_all) >= 0))))
    order = None
    if not in_order:
        order = np.lexsort((eep, m_all, z_all))
        z_all, m_all, eep = z_all[order], m_all[order], eep[order]
    if eep.size != np.prod(shape) or not np.array_equal(eep, expected):
        raise CatalogError(f"a track table must hold EEPs 0..{N_EEPS - 1} (layout PHASE_EEPS) for "
                           f"every pair of its {masses.size} masses and {z.size} metallicities; "
                           f"found {eep.size} rows instead of {int(np.prod(shape))}", path=source)

    def column(name):
        values = np.asarray(columns[name])
        return (values if order is None else values[order]).reshape(shape)

    data = {name: column(name) for name in names}
    profiles = None
    if with_profiles:
        profiles = {q: np.stack([column(profile_column(q, k)) for k in range(PROFILE_POINTS)], axis=-1)
                    .astype(np.float32) * np.float32(PROFILE_LOG_STEP_DEX) for q in PROFILE_QUANTITIES}
    return TrackGrid(masses=masses, z=z, eeps=np.arange(N_EEPS), data=data, profiles=profiles,
                     provenance=dict(provenance or {"source": source}))


def grid_from_table(table, provenance=None, source="track table"):
    """Build a :class:`TrackGrid` from a long table (one row per track and EEP).

    Parameters
    ----------
    table : pandas.DataFrame
        Columns :data:`KEY_COLUMNS` and :data:`TRACK_COLUMNS`, optionally any of
        :data:`ENVELOPE_COLUMNS` and all of :data:`PROFILE_COLUMNS` (int16 multiples
        of :data:`PROFILE_LOG_STEP_DEX` in log10); every (z, initial mass) pair
        must have all EEPs 0 .. N_EEPS-1.  Rows in any order.
    provenance : dict, optional
        Stored on the grid.
    source : str
        Name used in error messages (e.g. the file path).

    Returns
    -------
    TrackGrid

    Raises
    ------
    CatalogError
        If columns are missing or the table is not a complete rectangular grid.
    """
    return _grid_from_arrays({c: table[c].to_numpy() for c in table.columns}, provenance, source)


@functools.lru_cache(maxsize=4)
def load_grid(path=None):
    """Read a track grid from Parquet (default: the built-in grid), cached.

    Parameters
    ----------
    path : str or path-like, optional
        A Parquet file in the long format of :func:`grid_from_table`.  Default: the
        grid shipped with the package (Hurley et al. 2000 fits with our envelope
        integration, see its provenance).  Older grid files without the envelope
        columns still load (envelope NaN except M_cz).  Users' own tracks in other
        formats: :func:`prioritize.stars.track_sources.load_tracks`.

    Returns
    -------
    TrackGrid
        With ``provenance`` read from the file's metadata (the built-in grid also
        ships it as ``tracks_provenance.json``).

    Raises
    ------
    CatalogError
        If the file cannot be read or lacks columns or EEPs.
    """
    import pyarrow.parquet as pq

    if path is None:
        source = resources.files("prioritize.data").joinpath(_DEFAULT_GRID)
    else:
        source = Path(path)
    try:
        table = pq.ParquetFile(source).read()
    except (OSError, ValueError) as exc:
        raise CatalogError(f"cannot read the track grid as Parquet ({exc}); give a Parquet file "
                           f"with columns {list(KEY_COLUMNS + DATA_COLUMNS)}", path=str(source)) from exc
    meta = table.schema.metadata or {}
    provenance = json.loads(meta[PROVENANCE_METADATA_KEY]) if PROVENANCE_METADATA_KEY in meta else {"source": str(source)}
    columns = {name: _arrow_to_numpy(table.column(name)) for name in table.column_names}
    grid = _grid_from_arrays(columns, provenance, str(source))
    del table, columns
    # the long-format Parquet buffers are freed here; Arrow's allocator would keep their
    # pages (~160 MB for the built-in grid) in every process forked afterwards
    import pyarrow as pa
    pa.default_memory_pool().release_unused()
    return grid


def _arrow_to_numpy(column):
    """A Parquet column as a numpy array (nulls as NaN)."""
    if column.null_count:
        return column.to_numpy(zero_copy_only=False).astype(float)
    return column.to_numpy()
