"""Physics that depends only on the track point, tabulated once and interpolated per sample.

The chain evaluates some quantities at every sample of every star that are functions
of the track point (initial mass, Z, fractional EEP) alone: the deepest convective
envelope reached so far along the track (48 past points per sample), and the
Li-preserving reservoir.  :class:`PointTable` evaluates the chain's own functions
once on the nodes of the track grid (every EEP of every track) and interpolates them
trilinearly, in the same coordinates as :meth:`prioritize.stars.tracks.TrackGrid.interpolate`
(linear in initial mass, log Z and fractional EEP; positive quantities in log).
Because the tables are built by calling the chain's functions, a change of the
physics changes the tables; the disk cache is keyed by the grid's arrays and the
source of the modules the tables come from, so a stale table is never read.

The interpolated table is a planning approximation of the direct per-sample
computation; the differences are measured in ``tests/test_track_tables.py``.

Cache folder: ``$XDG_CACHE_HOME/prioritize`` or ``~/.cache/prioritize``, else a
folder in the system's temporary directory; a cache that cannot be written is
skipped (the table is then built in memory for the run).
"""

from __future__ import annotations

import hashlib
import os
import tempfile
import weakref
from pathlib import Path

import numpy as np

from . import __version__

_LOG_FLOOR = 1e-30
_HASHES: "weakref.WeakKeyDictionary" = weakref.WeakKeyDictionary()
_TABLES: dict = {}
# modules whose source the tabulated functions depend on (their bytes enter the key)
_SOURCE_MODULES = ("engine.py", "chain.py", "track_tables.py", "stars/tracks.py",
                   "stars/evolution.py", "lithium/baseline.py")
_PACKAGE = Path(__file__).resolve().parent


def cache_dir() -> Path | None:
    """The folder for cached tables (created), or None when no folder is writable."""
    candidates = []
    xdg = os.environ.get("XDG_CACHE_HOME")
    if xdg:
        candidates.append(Path(xdg) / "prioritize")
    candidates.append(Path.home() / ".cache" / "prioritize")
    uid = os.getuid() if hasattr(os, "getuid") else "user"
    candidates.append(Path(tempfile.gettempdir()) / f"prioritize-cache-{uid}")
    for path in candidates:
        try:
            path.mkdir(parents=True, exist_ok=True)
            if os.access(path, os.W_OK):
                return path
        except OSError:
            continue
    return None


def grid_hash(grid) -> str:
    """SHA-256 of the grid's axes, columns and profiles (cached per grid object)."""
    try:
        return _HASHES[grid]
    except (KeyError, TypeError):
        pass
    h = hashlib.sha256()
    for arr in (grid.masses, grid.z, grid.eeps):
        h.update(np.ascontiguousarray(arr).tobytes())
    for name in sorted(grid.data):
        h.update(name.encode())
        h.update(np.ascontiguousarray(grid.data[name]).tobytes())
    for name in sorted(grid.profiles or {}):
        h.update(name.encode())
        h.update(np.ascontiguousarray(grid.profiles[name]).tobytes())
    digest = h.hexdigest()
    try:
        _HASHES[grid] = digest
    except TypeError:
        pass
    return digest


def source_hash() -> str:
    """SHA-256 of the package version and the source files the tables come from."""
    h = hashlib.sha256(__version__.encode())
    for name in _SOURCE_MODULES:
        path = _PACKAGE / name
        if path.exists():
            h.update(name.encode())
            h.update(path.read_bytes())
    return h.hexdigest()


def table_key(grid, name: str, extra: str = "") -> str:
    """Cache key of table ``name`` for ``grid`` (and any configuration text ``extra``)."""
    h = hashlib.sha256()
    for part in (name, grid_hash(grid), source_hash(), extra):
        h.update(part.encode())
        h.update(b"\0")
    return h.hexdigest()[:32]


def _bracket(nodes, x):
    """Lower index, fraction and inside flag of ``x`` on increasing ``nodes`` (NaN: outside)."""
    inside = (x >= nodes[0]) & (x <= nodes[-1])
    if nodes.size == 1:
        return np.zeros(x.shape, np.intp), np.zeros(x.shape), inside
    lo = np.clip(np.searchsorted(nodes, x, side="right") - 1, 0, nodes.size - 2)
    frac = (x - nodes[lo]) / (nodes[lo + 1] - nodes[lo])
    return lo, np.where(inside, frac, 0.0), inside


class PointTable:
    """Quantities on the (Z, initial mass, EEP) nodes of a track grid, interpolated.

    ``values`` maps a name to an array of shape (n_z, n_m, n_e) (float32 or float64);
    names in ``log_names`` are stored as log10 and interpolated in log.  A point gets
    NaN where it lies outside the nodes or any corner it uses is NaN (as the grid
    interpolation does)."""

    def __init__(self, masses, z, n_eep, values: dict, log_names=()):
        self.masses = np.asarray(masses, dtype=float)
        self.log_z = np.log10(np.asarray(z, dtype=float))
        self.n_eep = int(n_eep)
        self.log_names = tuple(log_names)
        self.values = {k: np.ascontiguousarray(v) for k, v in values.items()}

    def __call__(self, mass, z, eep, names=None) -> dict:
        mass, z, eep = np.broadcast_arrays(np.asarray(mass, dtype=float), np.asarray(z, dtype=float),
                                           np.asarray(eep, dtype=float))
        shape = mass.shape
        mass, z, eep = mass.ravel(), z.ravel(), eep.ravel()
        with np.errstate(divide="ignore", invalid="ignore"):
            im, fm, in_m = _bracket(self.masses, mass)
            iz, fz, in_z = _bracket(self.log_z, np.log10(z))
        n_m, n_e = self.masses.size, self.n_eep
        inside = in_m & in_z & (eep >= 0) & (eep <= n_e - 1)
        e0 = np.clip(np.floor(np.nan_to_num(eep)).astype(np.intp), 0, n_e - 2)
        fe = np.where(inside, eep - e0, 0.0)
        iz1 = np.minimum(iz + 1, self.log_z.size - 1)
        im1 = np.minimum(im + 1, n_m - 1)
        base = [(iz * n_m + im) * n_e, (iz * n_m + im1) * n_e, (iz1 * n_m + im) * n_e,
                (iz1 * n_m + im1) * n_e]
        wz = [1 - fz, 1 - fz, fz, fz]
        wm = [1 - fm, fm, 1 - fm, fm]
        out = {}
        for name in (names or self.values):
            flat = self.values[name].reshape(-1)
            total = np.zeros(mass.size)
            bad = ~inside
            for b, a, c in zip(base, wz, wm):
                w = a * c
                for offset, we in ((0, 1 - fe), (1, fe)):
                    ww = w * we
                    v = flat[b + e0 + offset]
                    used = ww > 0
                    bad |= used & ~np.isfinite(v)
                    total += np.where(used, ww * v, 0.0)
            if name in self.log_names:
                total = 10.0 ** total
            out[name] = np.where(bad, np.nan, total).reshape(shape)
        return out

    def save(self, path: Path):
        tmp = path.with_suffix(f".{os.getpid()}.part.npz")
        np.savez(tmp, masses=self.masses, log_z=self.log_z, n_eep=self.n_eep,
                 log_names=np.array(self.log_names, dtype=str), **{"v_" + k: v for k, v in self.values.items()})
        os.replace(tmp, path)

    @classmethod
    def load(cls, path: Path) -> "PointTable":
        with np.load(path) as f:
            values = {k[2:]: f[k] for k in f.files if k.startswith("v_")}
            return cls(f["masses"], 10.0 ** f["log_z"], int(f["n_eep"]), values,
                       [str(x) for x in f["log_names"]])


def cached_table(grid, name: str, build, extra: str = "") -> PointTable:
    """Table ``name`` for ``grid``: from memory, else from the disk cache, else built by
    ``build(grid) -> PointTable`` and saved (atomically) when the cache is writable."""
    key = table_key(grid, name, extra)
    if key in _TABLES:
        return _TABLES[key]
    folder = cache_dir()
    path = folder / f"{name}-{key}.npz" if folder is not None else None
    table = None
    if path is not None and path.exists():
        try:
            table = PointTable.load(path)
        except (OSError, ValueError, KeyError):
            table = None
    if table is None:
        table = build(grid)
        if path is not None:
            try:
                table.save(path)
            except OSError:
                pass
    _TABLES[key] = table
    return table


def refined_masses(grid, split: int) -> np.ndarray:
    """The grid's initial masses with ``split - 1`` evenly spaced masses added in each interval."""
    m = np.asarray(grid.masses, dtype=float)
    if split <= 1 or m.size < 2:
        return m
    steps = np.linspace(0.0, 1.0, split, endpoint=False)
    inner = (m[:-1, None] + steps[None, :] * np.diff(m)[:, None]).ravel()
    return np.append(inner, m[-1])


def evaluate_on_nodes(grid, func, masses=None, chunk=20_000):
    """``func(mass, z, eep) -> dict of arrays`` on every (Z, mass, EEP) node (the grid's
    Z and EEPs; ``masses`` or the grid's), in chunks of whole tracks; returns a dict of
    arrays of shape (n_z, n_m, n_e)."""
    masses = grid.masses if masses is None else np.asarray(masses, dtype=float)
    n_z, n_m, n_e = grid.z.size, masses.size, grid.eeps.size
    zz, mm = np.meshgrid(grid.z, masses, indexing="ij")
    zz, mm = zz.ravel(), mm.ravel()
    eep = np.asarray(grid.eeps, dtype=float)
    per = max(1, chunk // n_e)
    out = {}
    for start in range(0, zz.size, per):
        m = np.repeat(mm[start:start + per], n_e)
        z = np.repeat(zz[start:start + per], n_e)
        e = np.tile(eep, m.size // n_e)
        got = func(m, z, e)
        for k, v in got.items():
            out.setdefault(k, []).append(np.asarray(v, dtype=float))
    return {k: np.concatenate(v).reshape(n_z, n_m, n_e) for k, v in out.items()}


def log_values(values: dict) -> dict:
    """log10 of positive values; zero and below floored, non-finite kept NaN."""
    out = {}
    with np.errstate(divide="ignore", invalid="ignore"):
        for k, v in values.items():
            out[k] = np.where(np.isfinite(v), np.log10(np.maximum(v, _LOG_FLOOR)), np.nan)
    return out
