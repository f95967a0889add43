"""Placing stars on stellar tracks: mass, age and evolutionary point with their spreads.

Three routes, each returning a cloud of equally weighted samples per star (the
rest of the chain runs on the samples, so every uncertainty a route knows about
reaches the significance and its probability):

- :func:`place_by_mass_stage` — the catalog gives the mass (± error) and the stage;
  points are spread over the stage's EEP range weighted by the time the track spends
  there, and by the likelihood of Teff or logg where the catalog gives them.
- :func:`place_by_posterior` — field stars with Teff, L (or logg) and [Fe/H] with
  errors: posterior over a dense grid of track points, likelihood x initial-mass
  function (Salpeter 1955, dN/dM ∝ M^-2.35) x time spent at the point.  Stars the
  grid cannot explain (nearest model beyond the limit) are flagged.
- :func:`place_on_isochrone` — cluster members: the cluster's age and [Fe/H] fix the
  isochrone; each member's mass follows from its position (Teff, L) along it.

All routes are vectorised over stars; samples come from systematic resampling with
a seeded generator, so results are reproducible.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache

import numpy as np
from scipy.spatial import cKDTree
from scipy.stats import norm

from . import evolution
from .tracks import PHASE_EEPS, TrackGrid, feh_to_z, z_to_feh

SALPETER_SLOPE = 2.35          # Salpeter 1955, ApJ 121, 161
DENSE_MASS_STEP = 0.02         # M_sun; interpolated between grid tracks for placement
CHI2_LIMIT = 25.0              # a star whose nearest model is > 5 sigma away is "not explained"
DEFAULT_ERRORS = {"teff_k": 100.0, "logl_lsun": 0.1, "logg": 0.2, "feh": 0.2,
                  "mass_frac": 0.10}  # used (and noted) when the catalog gives no error
EXACT_FLOOR = {"teff_k": 1e-3, "logg": 1e-6}  # an error of 0 means exact: kept finite for the arithmetic
FEH_FLOOR_DEX = 0.05           # half the grid's metallicity spacing, added in quadrature
_SCALE = np.array([0.005, 0.03, 0.1])   # tree coordinates: log Teff, log L (or logg/2), [Fe/H]
K_NEIGHBOURS = 4096
POSTERIOR_CHUNK = 500           # stars per chunk (bounds memory: chunk x K_NEIGHBOURS points)
MAX_AGE_MYR = 13800.0          # no star is older than the Universe (Planck 2018: 13.8 Gyr)


@dataclass
class Placement:
    """Samples on the tracks for a batch of stars.

    ``star`` indexes the batch row of each sample; every placed star has the same
    number of samples.  Per-star arrays have the batch length.
    """

    star: np.ndarray
    mass: np.ndarray
    z: np.ndarray
    eep: np.ndarray
    placed: np.ndarray          # per star: bool
    note: np.ndarray            # per star: str ("" when nothing to say)
    chi2_min: np.ndarray        # per star: best model's chi^2 (NaN for mass+stage)


def empty_placement(n: int) -> Placement:
    """A placement with no samples for ``n`` stars."""
    return Placement(np.zeros(0, int), np.zeros(0), np.zeros(0), np.zeros(0),
                     np.zeros(n, bool), np.full(n, "", dtype=object), np.full(n, np.nan))


def _resample(weights, n_samples, rng):
    """Systematic resampling of each row of ``weights`` (n, K) -> column indices (n, S)."""
    n, k = weights.shape
    w = weights / weights.sum(axis=1, keepdims=True)
    cw = np.cumsum(w, axis=1)
    cw[:, -1] = 1.0
    rows = np.arange(n)[:, None]
    pos = (np.arange(n_samples)[None, :] + rng.uniform(size=(n, 1))) / n_samples
    flat = np.searchsorted((cw + rows).ravel(), (pos + rows).ravel(), side="right")
    return np.minimum(flat.reshape(n, n_samples) - rows * k, k - 1)


def _clamp_z(grid: TrackGrid, feh):
    """Metallicity inside the grid (clamped) and a flag where clamping happened."""
    z = feh_to_z(np.asarray(feh, dtype=float))
    zc = np.clip(z, grid.z.min(), grid.z.max())
    return zc, ~np.isclose(z, zc, rtol=1e-6)


def _eep_time_weight(age_myr):
    """Time spent around each point along the last axis (Myr), never negative."""
    return np.abs(np.gradient(age_myr, axis=-1))


def place_by_mass_stage(grid: TrackGrid, mass, mass_err, stage, feh, rng, n_samples,
                        teff=None, teff_err=None, logg=None, logg_err=None,
                        n_mass_nodes=9, n_eep_nodes=40) -> Placement:
    """Samples for stars with a catalog mass and stage.

    Mass nodes are the mid-quantiles of N(mass, mass_err) (10% when no error is
    given; an error of 0 means the mass is exact); along the stage, EEP nodes are weighted by the time spent there and, if
    Teff or logg are known, by their Gaussian likelihood.  Giant-branch stages keep
    only points on the requested side of the track's RGB bump.
    """
    n = len(mass)
    mass = np.asarray(mass, dtype=float)
    err = np.where(np.isfinite(mass_err), np.maximum(np.asarray(mass_err, float), 0.0),
                   DEFAULT_ERRORS["mass_frac"] * mass)
    q = (np.arange(n_mass_nodes) + 0.5) / n_mass_nodes
    m_nodes = mass[:, None] + err[:, None] * norm.ppf(q)[None, :]
    frac = (np.arange(n_eep_nodes) + 0.5) / n_eep_nodes
    stage = np.asarray(stage, dtype=object)
    lo = np.empty(n)
    hi = np.empty(n)
    for name in np.unique(stage):
        sel = stage == name
        lo[sel], hi[sel] = evolution.stage_eep_range(name, PHASE_EEPS)
    e_nodes = lo[:, None] + frac[None, :] * (hi - lo)[:, None]
    zc, clamped = _clamp_z(grid, feh)
    mm = np.repeat(m_nodes[:, :, None], n_eep_nodes, axis=2)
    ee = np.repeat(e_nodes[:, None, :], n_mass_nodes, axis=1)
    zz = np.broadcast_to(zc[:, None, None], mm.shape)
    cols = grid.interpolate(mm, zz, ee, columns=["age_myr", "logteff", "logg", "logl"])
    with np.errstate(divide="ignore"):
        logw = np.log(_eep_time_weight(cols["age_myr"]))
    if teff is not None:
        t_obs = np.asarray(teff, float)[:, None, None]
        t_err = np.maximum(np.where(np.isfinite(teff_err), teff_err, DEFAULT_ERRORS["teff_k"]),
                           EXACT_FLOOR["teff_k"])[:, None, None]
        chi2 = ((10 ** cols["logteff"] - t_obs) / t_err) ** 2
        logw = logw - 0.5 * np.where(np.isfinite(t_obs), chi2, 0.0)
    if logg is not None:
        g_obs = np.asarray(logg, float)[:, None, None]
        g_err = np.maximum(np.where(np.isfinite(logg_err), logg_err, DEFAULT_ERRORS["logg"]),
                           EXACT_FLOOR["logg"])[:, None, None]
        chi2 = ((cols["logg"] - g_obs) / g_err) ** 2
        logw = logw - 0.5 * np.where(np.isfinite(g_obs), chi2, 0.0)
    bump = evolution.rgb_bump(grid, mm, zz)[1]
    st = evolution.stage_index(ee, cols["logl"], bump, PHASE_EEPS)
    wanted = np.array([evolution.STAGES.index(s) if s in evolution.STAGES else -2 for s in stage])
    giant = np.isin(wanted, (3, 4))
    logw = np.where(giant[:, None, None] & (st != wanted[:, None, None]), -np.inf, logw)
    logw = np.where(np.isnan(logw), -np.inf, logw).reshape(n, -1)
    best = logw.max(axis=1, keepdims=True)
    w = np.where(np.isfinite(best), np.exp(logw - np.where(np.isfinite(best), best, 0.0)), 0.0)
    placed = w.sum(axis=1) > 0
    note = np.full(n, "", dtype=object)
    note[~np.isfinite(np.asarray(mass_err, float))] = \
        "mass error assumed 10%"
    note[clamped] = _join(note[clamped], "[Fe/H] clamped to the grid range")
    note[~placed] = _join(note[~placed], "mass/stage outside the track grid")
    return _collect(placed, w, mm.reshape(n, -1), zz.reshape(n, -1), ee.reshape(n, -1),
                    n_samples, rng, note, np.full(n, np.nan))


def _join(a, b):
    a = np.asarray(a, dtype=object)
    return np.where(a == "", b, a + "; " + b)


def _collect(placed, w, mass, z, eep, n_samples, rng, note, chi2_min) -> Placement:
    idx = np.flatnonzero(placed)
    if idx.size == 0:
        out = empty_placement(len(placed))
        out.note, out.chi2_min = note, chi2_min
        return out
    cols = _resample(w[idx], n_samples, rng)
    rows = idx[:, None]
    return Placement(np.repeat(idx, n_samples), mass[rows, cols].ravel(), z[rows, cols].ravel(),
                     eep[rows, cols].ravel(), placed, note, chi2_min)


@dataclass(frozen=True)
class _DenseGrid:
    mass: np.ndarray
    z: np.ndarray
    eep: np.ndarray
    coords: np.ndarray      # (N, 4): log Teff, log L, logg, [Fe/H]
    log_prior: np.ndarray
    tree_l: cKDTree
    tree_g: cKDTree


@lru_cache(maxsize=4)
def _dense_grid(grid: TrackGrid) -> _DenseGrid:
    masses = np.arange(grid.masses.min(), grid.masses.max() + 1e-9, DENSE_MASS_STEP)
    mm, zz, ee = np.meshgrid(masses, grid.z, grid.eeps, indexing="ij")
    cols = grid.interpolate(mm, zz, ee, columns=["age_myr", "logteff", "logl", "logg"])
    dt = np.where(cols["age_myr"] <= MAX_AGE_MYR, _eep_time_weight(cols["age_myr"]), 0.0)
    feh = z_to_feh(zz)
    dfeh = np.gradient(z_to_feh(grid.z)) if grid.z.size > 1 else np.ones(1)
    with np.errstate(divide="ignore"):
        log_prior = -SALPETER_SLOPE * np.log(mm) + np.log(dt) + np.log(dfeh)[None, :, None]
    coords = np.stack([cols["logteff"], cols["logl"], cols["logg"], feh], axis=-1).reshape(-1, 4)
    keep = np.all(np.isfinite(coords), axis=1) & np.isfinite(log_prior.ravel())
    coords = coords[keep]
    scale_l = coords[:, [0, 1, 3]] / _SCALE
    scale_g = coords[:, [0, 2, 3]] / (_SCALE * [1, 2, 1])
    return _DenseGrid(mm.ravel()[keep], zz.ravel()[keep], ee.ravel()[keep], coords,
                      log_prior.ravel()[keep], cKDTree(scale_l), cKDTree(scale_g))


def place_by_posterior(grid: TrackGrid, teff, teff_err, logl, logl_err, logg, logg_err,
                       feh, feh_err, rng, n_samples) -> Placement:
    """Posterior samples over track points for stars with Teff, L or logg, and [Fe/H].

    ln p(point | data) = -chi^2/2 + ln(M^-2.35 dM) + ln(dt), with
    chi^2 = (ΔlogTeff/σ)^2 + (ΔlogL/σ)^2 (or ΔlogG) + (Δ[Fe/H]/σ)^2, evaluated on the
    ``K_NEIGHBOURS`` nearest points of a dense grid (0.01 M_sun, every EEP, every
    grid metallicity).  Stars whose best point has chi^2 > 25 are not placed.
    Uses L where given, else logg.
    """
    dense = _dense_grid(grid)
    n = len(teff)
    teff = np.asarray(teff, float)
    note = np.full(n, "", dtype=object)
    t_err = np.asarray(teff_err, float)
    miss = ~(np.isfinite(t_err) & (t_err > 0))
    t_err = np.where(miss, DEFAULT_ERRORS["teff_k"], t_err)
    note[miss] = _join(note[miss], "Teff error assumed 100 K")
    f_obs = np.where(np.isfinite(feh), feh, 0.0)
    f_err = np.where(np.isfinite(feh_err) & (np.asarray(feh_err, float) > 0), feh_err,
                     DEFAULT_ERRORS["feh"])
    f_err = np.hypot(f_err, FEH_FLOOR_DEX)
    zmin, zmax = z_to_feh(grid.z.min()), z_to_feh(grid.z.max())
    clamped = (f_obs < zmin - 2 * f_err) | (f_obs > zmax + 2 * f_err)
    note[clamped] = _join(note[clamped], "[Fe/H] outside the grid range; nearest grid metallicity used")
    f_obs = np.clip(f_obs, zmin, zmax)
    use_l = np.isfinite(logl)
    chi2_min = np.full(n, np.nan)
    samples = np.full((n, n_samples), -1, dtype=np.int64)
    lt = np.log10(teff)
    slt = t_err / (teff * np.log(10))
    for flag, tree, col, vals, errs, default, sc in (
            (use_l, dense.tree_l, 1, logl, logl_err, DEFAULT_ERRORS["logl_lsun"], _SCALE),
            (~use_l & np.isfinite(logg), dense.tree_g, 2, logg, logg_err, DEFAULT_ERRORS["logg"],
             _SCALE * [1, 2, 1])):
        rows = np.flatnonzero(flag & np.isfinite(lt))
        if rows.size == 0:
            continue
        v = np.asarray(vals, float)[rows]
        e = np.asarray(errs, float)[rows]
        bad = ~(np.isfinite(e) & (e > 0))
        e = np.where(bad, default, e)
        name = "log L" if col == 1 else "logg"
        note[rows[bad]] = _join(note[rows[bad]], f"{name} error assumed {default}")
        obs = np.stack([lt[rows], v, f_obs[rows]], axis=1)
        sig = np.stack([slt[rows], e, f_err[rows]], axis=1)
        for start in range(0, rows.size, POSTERIOR_CHUNK):
            part = slice(start, start + POSTERIOR_CHUNK)
            _, idx = tree.query(obs[part] / sc, k=K_NEIGHBOURS)
            model = dense.coords[idx][:, :, [0, col, 3]]
            chi2 = (((model - obs[part, None, :]) / sig[part, None, :]) ** 2).sum(axis=2)
            best = chi2.min(axis=1)
            chi2_min[rows[part]] = best
            logw = -0.5 * chi2 + dense.log_prior[idx]
            logw -= logw.max(axis=1, keepdims=True)
            pick = _resample(np.exp(logw), n_samples, rng)
            samples[rows[part]] = np.take_along_axis(idx, pick, axis=1)
    placed = np.isfinite(chi2_min) & (chi2_min <= CHI2_LIMIT)
    far = np.isfinite(chi2_min) & ~placed
    note[far] = _join(note[far], [f"no track point within 5 sigma (nearest at {d:.1f} sigma)"
                                  for d in np.sqrt(chi2_min[far])])
    chosen = samples[placed].ravel()
    return Placement(np.repeat(np.flatnonzero(placed), n_samples), dense.mass[chosen],
                     dense.z[chosen], dense.eep[chosen], placed, note, chi2_min)


def isochrone(grid: TrackGrid, age_myr: float, z: float, mass_step=0.0005):
    """Points of the isochrone at ``age_myr`` and metallicity ``z``.

    Returns a dict with ``mass`` (initial), ``eep`` and the interpolated ``logteff``,
    ``logl``; only masses alive and on the grid at that age.
    """
    masses = np.arange(grid.masses.min(), grid.masses.max() + 1e-9, mass_step)
    eep = grid.eep_at_age(masses, np.full_like(masses, z), np.full_like(masses, age_myr))
    ok = np.isfinite(eep)
    masses, eep = masses[ok], eep[ok]
    cols = grid.interpolate(masses, np.full_like(masses, z), eep, columns=["logteff", "logl"])
    return {"mass": masses, "eep": eep, **cols}


def place_on_isochrone(grid: TrackGrid, teff, teff_err, logl, logl_err, age_gyr, feh, rng,
                       n_samples) -> Placement:
    """Samples along the cluster isochrone for members with Teff and L.

    Each member's weight over isochrone points is its Gaussian likelihood in
    (log Teff, log L) times the initial-mass function and the mass step; members
    share the isochrone of their (age, [Fe/H]) group.
    """
    n = len(teff)
    note = np.full(n, "", dtype=object)
    chi2_min = np.full(n, np.nan)
    zc, clamped = _clamp_z(grid, feh)
    note[clamped] = _join(note[clamped], "[Fe/H] clamped to the grid range")
    t_err = np.where(np.isfinite(teff_err) & (np.asarray(teff_err, float) > 0), teff_err,
                     DEFAULT_ERRORS["teff_k"])
    l_err = np.where(np.isfinite(logl_err) & (np.asarray(logl_err, float) > 0), logl_err,
                     DEFAULT_ERRORS["logl_lsun"])
    age = np.asarray(age_gyr, float) * 1000.0
    k = 256
    weights = np.zeros((n, k))
    mass = np.zeros((n, k))
    eep = np.zeros((n, k))
    zarr = np.repeat(zc[:, None], k, axis=1)
    for a, zz in {(a, zz) for a, zz in zip(age, zc) if np.isfinite(a)}:
        rows = np.flatnonzero((age == a) & (zc == zz))
        iso = isochrone(grid, a, zz)
        if iso["mass"].size == 0:
            note[rows] = _join(note[rows], "cluster age outside the track grid")
            continue
        dm = np.gradient(iso["mass"]) if iso["mass"].size > 1 else np.ones(1)
        log_prior = -SALPETER_SLOPE * np.log(iso["mass"]) + np.log(dm)
        lt = np.log10(np.asarray(teff, float)[rows])[:, None]
        slt = (t_err[rows] / (np.asarray(teff, float)[rows] * np.log(10)))[:, None]
        chi2 = ((iso["logteff"][None, :] - lt) / slt) ** 2 + \
            ((iso["logl"][None, :] - np.asarray(logl, float)[rows][:, None]) / l_err[rows][:, None]) ** 2
        chi2_min[rows] = chi2.min(axis=1)
        logw = -0.5 * chi2 + log_prior[None, :]
        kk = min(k, logw.shape[1])
        top = np.argpartition(-logw, kk - 1, axis=1)[:, :kk]
        lw = np.take_along_axis(logw, top, axis=1)
        lw -= lw.max(axis=1, keepdims=True)
        weights[rows, :kk] = np.exp(lw)
        mass[rows, :kk] = iso["mass"][top]
        eep[rows, :kk] = iso["eep"][top]
    placed = np.isfinite(chi2_min) & (chi2_min <= CHI2_LIMIT)
    far = np.isfinite(chi2_min) & ~placed
    note[far] = _join(note[far], "far from the cluster isochrone (more than 5 sigma): non-member or wrong cluster parameters?")
    return _collect(placed, weights, mass, zarr, eep, n_samples, rng, note, chi2_min)
