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

Everything read from tracks is a model estimate for planning, with the accuracy of
the Hurley et al. fits to the detailed models of Pols et al. (1998) plus the
interpolation errors measured in ``tests/test_tracks.py`` (~1-2% in L, R and Teff
for most of the grid) — not a substitute for a detailed model of a particular star.

This module is the run-time side: it reads the grid and interpolates it; it never
imports the package that built it.  Users with their own models can supply a table
in the same long format (columns :data:`KEY_COLUMNS` + :data:`TRACK_COLUMNS`, EEP
layout :data:`PHASE_EEPS`) to :func:`load_grid`.
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
    "core_mass_msun": "helium core mass (M_sun); zero on the main sequence in these fits",
    "m_cz_msun": "mass of the convective envelope (M_sun), the fits' crude estimate",
    "r_cz_rsun": "radial thickness of the convective envelope, R - r_base (R_sun)",
    "kstar": "phase code of Hurley et al. 2000 (0/1 main sequence, 2 Hertzsprung gap, "
             "3 giant branch, 4 core-He burning); -1 where the track has no such phase",
}
DATA_COLUMNS = tuple(TRACK_COLUMNS)
PHASE_CODE_COLUMN = "kstar"
MISSING_PHASE_CODE = -1

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
        One array per column of :data:`TRACK_COLUMNS`; NaN (kstar -1) where a track has
        no such phase.
    provenance : dict
        How the grid was made (see ``tracks_provenance.json``).

    Notes
    -----
    Interpolation (:meth:`interpolate`) is linear in log Z, linear in initial mass
    and linear in fractional EEP; ages are interpolated in log age between tracks
    (main-sequence lifetimes scale as a power of mass).  Points outside the grid, or
    next to a track without the requested phase, give NaN: nothing is extrapolated.
    """

    masses: np.ndarray
    z: np.ndarray
    eeps: np.ndarray
    data: dict = field(repr=False)
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
        data = {}
        for name, values in self.data.items():
            arr = np.array(values, dtype=np.int8 if name == PHASE_CODE_COLUMN else None)
            if arr.shape != shape:
                raise PrioritizeError(f"TrackGrid: column '{name}' has shape {arr.shape}, "
                                      f"expected (n_z, n_m, n_e) = {shape}")
            arr.flags.writeable = False
            data[name] = arr
        valid = data[PHASE_CODE_COLUMN] != MISSING_PHASE_CODE
        if np.any(data["age_myr"][:, :, 0] != 0):
            raise PrioritizeError("TrackGrid: age_myr must be 0 at EEP 0 (ages count from the ZAMS)")
        filled = {}
        for name, arr in data.items():
            values = arr.astype(float)
            if name == "age_myr":
                with np.errstate(divide="ignore"):
                    values = np.log10(values)
                values[:, :, 0] = 0.0          # log of the ZAMS age 0; restored after blending
            filled[name] = np.where(valid, values, 0.0).ravel()
        for name, value in (("masses", masses), ("z", z), ("eeps", eeps)):
            value.flags.writeable = False
            object.__setattr__(self, name, value)
        object.__setattr__(self, "data", data)
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
        EEP (log age between tracks for ``age_myr``).  ``kstar`` is taken from the
        nearest grid point.  Model estimates for planning (Hurley et al. 2000 fits).

        Parameters
        ----------
        mass : array_like
            Initial mass (M_sun); grid range, built-in 0.70-3.50.
        z : array_like
            Metal mass fraction; grid range, built-in 0.003-0.03.
        eep : array_like
            Fractional EEP, 0 .. N_EEPS-1 (see :data:`PHASE_EEPS`).
        columns : sequence of str, optional
            Columns of :data:`TRACK_COLUMNS` to return (default: all).

        Returns
        -------
        dict of str -> ndarray
            One float array per column with the broadcast shape of the inputs; NaN
            where the point is outside the grid, an input is not finite, or a
            neighbouring track lacks the phase (``kstar`` included).

        Raises
        ------
        PrioritizeError
            If a column name is unknown.
        """
        columns = DATA_COLUMNS if columns is None else tuple(columns)
        unknown = [c for c in columns if c not in self._filled]
        if unknown:
            raise PrioritizeError(f"TrackGrid.interpolate: unknown column(s) {unknown}; "
                                  f"choose from {list(self._filled)}")
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
        good = inside & valid
        out = {}
        for name in columns:
            if name == PHASE_CODE_COLUMN:
                out[name] = self._nearest_phase_code(lower, weights, fe, good).reshape(shape)
                continue
            table = self._filled[name]
            at_lo = np.einsum("ij,ij->j", weights, table[lower])
            at_hi = np.einsum("ij,ij->j", weights, table[lower + 1])
            if name == "age_myr":
                at_lo = np.where(e0 == 0, 0.0, 10.0 ** at_lo)
                at_hi = 10.0 ** at_hi
            out[name] = np.where(good, at_lo + fe * (at_hi - at_lo), np.nan).reshape(shape)
        return out

    def _nearest_phase_code(self, lower, weights, fe, good):
        """kstar of the nearest grid point (largest corner weight, nearest EEP)."""
        corner = np.argmax(weights, axis=0)
        flat = lower[corner, np.arange(corner.size)] + (fe >= 0.5)
        codes = self.data[PHASE_CODE_COLUMN].ravel()[flat].astype(float)
        return np.where(good & (codes != MISSING_PHASE_CODE), codes, np.nan)

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


def convective_envelope(grid, mass, z, eep):
    """Convective-envelope properties at track points: the package's one access point.

    Every part of the package reads envelope properties through this function, so
    that the source of the numbers can change in one place.  At present they are
    cosmic's estimates for the Hurley et al. (2000) tracks, stored in the grid, and
    crude: at the ZAMS M_cz vanishes (1e-10 M_sun) above 1.25 M_sun at every Z, later
    on the main sequence it grows as the star cools (nonzero up to 1.3 M_sun at
    Z = 0.003, 1.7 M_sun at Z = 0.03; measured in the built grid); on the giant
    branch it is close to M - M_core with no radiative buffer and no RGB bump —
    planning estimates only (SCIENCE.md §15; an envelope integration, §16, is to
    replace them).

    Parameters
    ----------
    grid : TrackGrid
        The track grid.
    mass, z, eep : array_like
        Initial mass (M_sun), metal mass fraction, fractional EEP; broadcastable.

    Returns
    -------
    dict of str -> ndarray
        ``m_cz_msun``: convective-envelope mass (M_sun); ``r_cz_rsun``: its radial
        thickness R - r_bcz (R_sun); ``r_bcz_rsun``: radius of its base (R_sun).
        NaN outside the grid.

    References
    ----------
    Hurley, Pols & Tout 2000, MNRAS 315, 543; Hurley, Tout & Pols 2002, MNRAS 329, 897
    (envelope mass and depth used for tides).
    """
    cols = grid.interpolate(mass, z, eep, columns=["m_cz_msun", "r_cz_rsun", "logr"])
    return {"m_cz_msun": cols["m_cz_msun"], "r_cz_rsun": cols["r_cz_rsun"],
            "r_bcz_rsun": np.asarray(10.0 ** cols["logr"] - cols["r_cz_rsun"])}


def grid_from_table(table, provenance=None, source="track table"):
    """Build a :class:`TrackGrid` from a long table (one row per track and EEP).

    Parameters
    ----------
    table : pandas.DataFrame
        Columns :data:`KEY_COLUMNS` and :data:`TRACK_COLUMNS`; every (z, initial
        mass) pair must have all EEPs 0 .. N_EEPS-1.
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
    missing = [c for c in KEY_COLUMNS + DATA_COLUMNS if c not in table.columns]
    if missing:
        raise CatalogError(f"a track table needs columns {list(KEY_COLUMNS + DATA_COLUMNS)}; "
                           f"missing {missing} (see prioritize.stars.tracks.TRACK_COLUMNS for "
                           f"units)", path=source)
    table = table.sort_values(["z", "initial_mass_msun", "eep"])
    masses = np.unique(table["initial_mass_msun"].to_numpy(dtype=float))
    z = np.unique(table["z"].to_numpy(dtype=float))
    shape = (z.size, masses.size, N_EEPS)
    eep = table["eep"].to_numpy()
    expected = np.tile(np.arange(N_EEPS), z.size * masses.size)
    if len(table) != np.prod(shape) or not np.array_equal(eep, expected):
        raise CatalogError(f"a track table must hold EEPs 0..{N_EEPS - 1} (layout PHASE_EEPS) for "
                           f"every pair of its {masses.size} masses and {z.size} metallicities; "
                           f"found {len(table)} rows instead of {int(np.prod(shape))}", path=source)
    data = {c: table[c].to_numpy().reshape(shape) for c in DATA_COLUMNS}
    return TrackGrid(masses=masses, z=z, eeps=np.arange(N_EEPS), data=data,
                     provenance=dict(provenance or {"source": source}))


@functools.lru_cache(maxsize=4)
def load_grid(path=None):
    """Read a track grid from Parquet (default: the built-in grid), cached.

    Parameters
    ----------
    path : str or path-like, optional
        A Parquet file in the long format of :func:`grid_from_table`.  Default: the
        grid shipped with the package (Hurley et al. 2000 fits, see its provenance).

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
        table = pq.read_table(source)
    except (OSError, ValueError) as exc:
        raise CatalogError(f"cannot read the track grid as Parquet ({exc}); give a Parquet file "
                           f"with columns {list(KEY_COLUMNS + DATA_COLUMNS)}", path=str(source)) from exc
    meta = table.schema.metadata or {}
    provenance = json.loads(meta[PROVENANCE_METADATA_KEY]) if PROVENANCE_METADATA_KEY in meta else {"source": str(source)}
    return grid_from_table(table.to_pandas(), provenance=provenance, source=str(source))
