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
EXACT_FLOOR = {"teff_k": 1e-3, "logg": 1e-6, "logl_lsun": 1e-6}  # an error of 0 means exact: kept finite for the arithmetic
FEH_FLOOR_DEX = 0.05           # half the grid's metallicity spacing, added in quadrature
_SCALE = np.array([0.005, 0.03, 0.1])   # tree coordinates: log Teff, log L (or logg/2), [Fe/H]
K_NEIGHBOURS = 4096
POSTERIOR_CHUNK = 500           # stars per chunk (bounds memory: chunk x K_NEIGHBOURS points)
MAX_AGE_MYR = 13800.0          # no star is older than the Universe (Planck 2018: 13.8 Gyr)
CLASH_SIGMA = 3.0              # a measurement this far from the placed model gets a note
INITIAL_MASS_NOTE_MSUN = 0.02  # initial minus current mass above which the note gives the initial mass
GIANT_BRANCH_STAGES = (3, 4)   # indices of lower_giant_branch, upper_giant_branch in evolution.STAGES
# name -> default error, error floor (an error of 0 means exact), unit text, number format
_MEASUREMENT_DEFAULTS = {"Teff": (DEFAULT_ERRORS["teff_k"], EXACT_FLOOR["teff_k"], " K", ".0f"),
                         "log L": (DEFAULT_ERRORS["logl_lsun"], EXACT_FLOOR["logl_lsun"], "", ".2f"),
                         "logg": (DEFAULT_ERRORS["logg"], EXACT_FLOOR["logg"], "", ".2f")}


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


class RowUniforms:
    """One uniform number per catalog row, fixed by (seed, the row's place in the whole
    catalog): a star's placement draws do not depend on the batch it falls in or on
    its neighbours.  Stands in for a ``numpy.random.Generator`` where the placement
    functions draw (systematic resampling takes one uniform per star)."""

    def __init__(self, values):
        self.values = np.asarray(values, dtype=float)

    @classmethod
    def for_rows(cls, seed: int, first_row: int, n: int) -> "RowUniforms":
        return cls(row_uniforms(seed, first_row + np.arange(n)))

    def subset(self, idx) -> "RowUniforms":
        return RowUniforms(self.values[np.asarray(idx, dtype=int)])

    def uniform(self, size):
        n = size[0] if isinstance(size, tuple) else size
        if n != self.values.size:
            raise ValueError(f"{n} draws asked of {self.values.size} rows")
        return self.values.reshape((n,) + (tuple(size[1:]) if isinstance(size, tuple) else ()))


def row_uniforms(seed: int, index) -> np.ndarray:
    """Uniform [0, 1) numbers from the splitmix64 hash of (seed, row index): a
    counter-based stream (Steele, Lea & Flood 2014, OOPSLA, "Fast splittable
    pseudorandom number generators"), 53 bits per number."""
    golden = np.uint64(0x9E3779B97F4A7C15)
    # array arithmetic wraps modulo 2^64 silently (numpy scalars would warn)
    key = np.array([int(seed) % 2**64], dtype=np.uint64) * np.array([0xD1B54A32D192ED03], dtype=np.uint64)
    x = np.atleast_1d(np.asarray(index, dtype=np.uint64)) * golden + key
    z = x + golden
    z = (z ^ (z >> np.uint64(30))) * np.uint64(0xBF58476D1CE4E5B9)
    z = (z ^ (z >> np.uint64(27))) * np.uint64(0x94D049BB133111EB)
    z = z ^ (z >> np.uint64(31))
    return (z >> np.uint64(11)).astype(np.float64) * 2.0 ** -53


def _subset(rng, idx):
    """The draws of rows ``idx``: a per-row stream is cut to them, a Generator is shared."""
    return rng.subset(idx) if isinstance(rng, RowUniforms) else rng


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


def _initial_mass_for_current(grid: TrackGrid, current, z, eep):
    """Initial mass whose track has the current mass ``current`` at each EEP.

    The grid interpolates linearly in initial mass, so the current mass at a fixed
    (Z, EEP) is piecewise linear between the grid's tracks; it is inverted exactly by
    bracketing the target between neighbouring tracks.  NaN where no track of the
    grid reaches that current mass there (or the phase is missing).

    Parameters
    ----------
    grid : TrackGrid
        The track grid (column ``mass_msun``: current mass after winds).
    current : ndarray, shape (n, m)
        Current masses (M_sun) per star and mass node.
    z : ndarray, shape (n,)
        Metal mass fraction per star, inside the grid.
    eep : ndarray, shape (n, e)
        EEP nodes per star.

    Returns
    -------
    ndarray, shape (n, m, e)
        Initial masses (M_sun).
    """
    tracks = grid.masses
    now = grid.interpolate(np.broadcast_to(tracks[None, :, None], (z.size, tracks.size, eep.shape[1])),
                           z[:, None, None], eep[:, None, :], columns=["mass_msun"])["mass_msun"]
    target = current[:, :, None]
    ordered = np.where(np.isnan(now), -np.inf, now)   # tracks without the phase sit at the low end
    above = np.zeros(target.shape[:2] + (eep.shape[1],), dtype=int)
    for k in range(tracks.size):
        above += ordered[:, None, k, :] <= target
    upper = np.clip(above, 1, tracks.size - 1)
    take = np.broadcast_to(upper[:, :, None, :], above.shape[:2] + (1, eep.shape[1]))
    wide = np.broadcast_to(now[:, None], (now.shape[0], above.shape[1]) + now.shape[1:])
    m_hi = np.take_along_axis(wide, take, axis=2)[:, :, 0]
    m_lo = np.take_along_axis(wide, take - 1, axis=2)[:, :, 0]
    with np.errstate(invalid="ignore", divide="ignore"):
        frac = (target - m_lo) / (m_hi - m_lo)
    initial = tracks[upper - 1] + frac * (tracks[upper] - tracks[upper - 1])
    inside = (frac >= 0) & (frac <= 1) & np.isfinite(frac)
    return np.where(inside, initial, np.nan)


def _gaussian_log_likelihood(model, observed, error, default, floor):
    """-chi^2/2 of a Gaussian measurement (0 where nothing was observed) and the error used."""
    observed = np.asarray(observed, dtype=float)
    error = np.asarray(error, dtype=float)
    sigma = np.maximum(np.where(np.isfinite(error), error, default), floor)
    chi2 = ((model - observed[:, None, None]) / sigma[:, None, None]) ** 2
    return -0.5 * np.where(np.isfinite(observed)[:, None, None], chi2, 0.0), sigma


def place_by_mass_stage(grid: TrackGrid, mass, mass_err, stage, feh, rng, n_samples,
                        teff=None, teff_err=None, logg=None, logg_err=None, logl=None,
                        logl_err=None, n_mass_nodes=9, n_eep_nodes=40) -> Placement:
    """Samples for stars with a catalog mass and stage.

    The catalog's ``mass_msun`` is read as the star's **current** mass — what binaries,
    asteroseismic scaling relations or log g with a radius measure — and is matched
    to the track's current mass (after wind mass loss) at every point; the samples
    carry the track's initial mass, so a red-clump star of 1.0 M_sun now sits on a
    track that started heavier (a note gives the initial mass when it differs).

    Posterior per star, on mass nodes x EEP nodes:

    - mass nodes: the mid-quantiles of N(mass, mass_err) (10 % when no error is
      given; an error of 0 means exact), each with the same weight: the catalog's
      mass is the measurement, and nothing along the track reweights it.  A node
      drops out only where no model of that current mass exists on the stage
      within the age of the Universe (:data:`MAX_AGE_MYR`);
    - at each mass node, the EEP nodes of the stage are weighted by the time spent
      there (dt) times the Gaussian likelihood of Teff, log L and log g where given,
      normalised over the stage: w(m, e) = q(m) dt L(m, e) / sum_e dt L(m, e).

    Stage rule.  Main sequence, turnoff, subgiant and red clump: the stage is kept
    as given.  Giant branch: ``lower_giant_branch`` and ``upper_giant_branch`` name
    the side of the track's RGB bump; where log L is known, the whole branch is
    open and L decides the side (a generic "RGB" normalises to the lower branch, so
    a bright "RGB" star moves above the bump, with a note); without L the given side
    is kept.  Wherever Teff, log L or log g is more than :data:`CLASH_SIGMA` from the
    placed model (the samples' median), the row gets a note naming the value, the
    model's and the distance in sigma; the placement is not changed by it.

    Parameters
    ----------
    grid : TrackGrid
        The track grid.
    mass, mass_err : array_like
        Current mass and its 1-sigma error (M_sun); NaN error = 10 %.
    stage : array_like of str
        Canonical stage names (:data:`prioritize.catalog.status.STAGES`).
    feh : array_like
        [Fe/H] (dex), clamped to the grid's range.
    rng : numpy.random.Generator
        Random stream for the resampling.
    n_samples : int
        Samples per star.
    teff, teff_err : array_like, optional
        Effective temperature and error (K); NaN = not known (error default 100 K).
    logg, logg_err : array_like, optional
        log10 g (cgs) and error (dex); NaN = not known (error default 0.2 dex).
    logl, logl_err : array_like, optional
        log10 L/L_sun and error (dex); NaN = not known (error default 0.1 dex).
    n_mass_nodes, n_eep_nodes : int
        Nodes per star in mass and along the stage.

    Returns
    -------
    Placement
        ``chi2_min`` is NaN (this route fits no position).

    References
    ----------
    Hurley J. R., Pols O. R. & Tout C. A. 2000, MNRAS 315, 543 (tracks with Reimers
    wind mass loss on the giant branch); Miglio A. et al. 2012, MNRAS 419, 2077
    (asteroseismic masses of red giants are current masses; mass lost on the RGB).
    """
    n = len(mass)
    mass = np.asarray(mass, dtype=float)
    given_err = np.asarray(mass_err, dtype=float)
    err = np.where(np.isfinite(given_err), np.maximum(given_err, 0.0), DEFAULT_ERRORS["mass_frac"] * mass)
    q = (np.arange(n_mass_nodes) + 0.5) / n_mass_nodes
    current = mass[:, None] + err[:, None] * norm.ppf(q)[None, :]
    frac = (np.arange(n_eep_nodes) + 0.5) / n_eep_nodes
    stage = np.asarray(stage, dtype=object)
    wanted = np.array([evolution.STAGES.index(s) if s in evolution.STAGES else -2 for s in stage])
    giant = np.isin(wanted, GIANT_BRANCH_STAGES)
    has_l = np.isfinite(np.full(n, np.nan) if logl is None else np.asarray(logl, float))
    lo = np.empty(n)
    hi = np.empty(n)
    for name in np.unique(stage):
        sel = stage == name
        lo[sel], hi[sel] = evolution.stage_eep_range(name, PHASE_EEPS)
    ee = np.repeat((lo[:, None] + frac[None, :] * (hi - lo)[:, None])[:, None, :], n_mass_nodes, axis=1)
    zc, clamped = _clamp_z(grid, feh)
    zz = np.broadcast_to(zc[:, None, None], ee.shape)
    mm = _initial_mass_for_current(grid, current, zc, ee[:, 0, :])
    cols = grid.interpolate(np.where(np.isfinite(mm), mm, 0.0), zz, ee,
                            columns=["age_myr", "logteff", "logg", "logl"])
    cols = {k: np.where(np.isfinite(mm), v, np.nan) for k, v in cols.items()}
    with np.errstate(divide="ignore"):
        logw = np.log(_eep_time_weight(cols["age_myr"]))
    logw = np.where(cols["age_myr"] <= MAX_AGE_MYR, logw, -np.inf)
    bump = evolution.rgb_bump(grid, np.where(np.isfinite(mm), mm, 0.0), zz)[1]
    st = evolution.stage_index(ee, cols["logl"], bump, PHASE_EEPS)
    logw = np.where((giant & ~has_l)[:, None, None] & (st != wanted[:, None, None]), -np.inf, logw)
    in_stage = np.isfinite(logw)
    observed = []
    for name, model, value, error in (("Teff", 10 ** cols["logteff"], teff, teff_err),
                                      ("log L", cols["logl"], logl, logl_err),
                                      ("logg", cols["logg"], logg, logg_err)):
        if value is None:
            continue
        default, floor = _MEASUREMENT_DEFAULTS[name][:2]
        loglike, sigma = _gaussian_log_likelihood(model, value, np.full(n, np.nan) if error is None
                                                  else error, default, floor)
        logw = logw + loglike
        observed.append((name, model, np.asarray(value, float), sigma))
    logw = np.where(np.isnan(logw), -np.inf, logw)
    best = logw.max(axis=2, keepdims=True)
    node_ok = np.isfinite(best)
    w = np.where(node_ok, np.exp(logw - np.where(node_ok, best, 0.0)), 0.0)
    w = w / np.where(node_ok, w.sum(axis=2, keepdims=True), 1.0)
    placed = node_ok.any(axis=(1, 2))
    note = np.full(n, "", dtype=object)
    note[~np.isfinite(given_err)] = "mass error assumed 10%"
    note[clamped] = _join(note[clamped], "[Fe/H] clamped to the grid range")
    partly = placed & ~node_ok.all(axis=(1, 2))
    note[partly] = _join(note[partly], [
        f"{_mass_range_text(current[i], node_ok[i, :, 0])} has no {stage[i]} model within "
        f"{MAX_AGE_MYR / 1e3:g} Gyr: left out" for i in np.flatnonzero(partly)])
    never = ~placed & in_stage.reshape(n, -1).any(axis=1)
    note[never] = _join(note[never], [f"no {stage[i]} model of this mass within "
                                      f"{MAX_AGE_MYR / 1e3:g} Gyr (the age of the Universe)"
                                      for i in np.flatnonzero(never)])
    outside = ~placed & ~never
    note[outside] = _join(note[outside], "mass/stage outside the track grid")
    return _mass_stage_samples(placed, w.reshape(n, -1), n_samples, rng, note, stage, {
        "mass": mm, "z": zz, "eep": ee, "stage": st, "bump": bump, "current": np.repeat(
            current[:, :, None], n_eep_nodes, axis=2)}, observed, wanted, giant & has_l, logl)


def _mass_stage_samples(placed, w, n_samples, rng, note, stage, nodes, observed, wanted, split_by_l,
                        logl) -> Placement:
    """Resample the mass+stage nodes and add the notes that compare the placed samples
    with what the catalog said (stage side, clashing measurements, initial mass)."""
    n = placed.size
    idx = np.flatnonzero(placed)
    if idx.size == 0:
        out = empty_placement(n)
        out.note = note
        return out
    pick = _resample(w[idx], n_samples, _subset(rng, idx))
    rows = idx[:, None]

    def at(values):
        return np.reshape(values, (n, -1))[rows, pick]

    mass = at(nodes["mass"])
    stage_index = at(nodes["stage"])
    counts = np.stack([(stage_index == k).sum(axis=1) for k in range(len(evolution.STAGES))], axis=1)
    moved = split_by_l[idx] & (counts.argmax(axis=1) != wanted[idx])
    bumps = at(nodes["bump"])
    for j in np.flatnonzero(moved):
        i, k = idx[j], counts[j].argmax()
        side = "above" if evolution.STAGES[k] == "upper_giant_branch" else "below"
        finite = bumps[j][np.isfinite(bumps[j])]
        where = (f"this track's RGB bump (log L {np.median(finite):.2f})" if finite.size
                 else "the middle of this track's giant branch (no RGB bump)")
        note[i] = _join(note[i], f"stage given as {stage[i]}, but log L = {logl[i]:.2f} is {side} "
                                 f"{where}: placed on {evolution.STAGES[k]}")
    for name, model, value, sigma in observed:
        median = np.nanmedian(at(model), axis=1)
        distance = np.abs(median - value[idx]) / sigma[idx]
        clash = np.isfinite(distance) & (distance > CLASH_SIGMA)
        unit, fmt = _MEASUREMENT_DEFAULTS[name][2:]
        for i, v, s, m, d in zip(idx[clash], value[idx][clash], sigma[idx][clash], median[clash],
                                 distance[clash]):
            note[i] = _join(note[i], f"{name} = {v:{fmt}} ± {s:{fmt}}{unit} given, the placed model has "
                                     f"{m:{fmt}}{unit} ({d:.1f} sigma): check the mass, stage and {name}")
    initial = mass.mean(axis=1)
    lost = initial - at(nodes["current"]).mean(axis=1) > INITIAL_MASS_NOTE_MSUN
    for i, m in zip(idx[lost], initial[lost]):
        note[i] = _join(note[i], f"initial mass {m:.2f} Msun (mass_msun is read as the current mass; "
                                 "the track lost mass in winds on the giant branch)")
    return Placement(np.repeat(idx, n_samples), mass.ravel(), at(nodes["z"]).ravel(),
                     at(nodes["eep"]).ravel(), placed, note, np.full(n, np.nan))


def _mass_range_text(current, kept):
    """'current masses 0.84-0.92 Msun' for the mass nodes that were left out."""
    low, high = current[~kept].min(), current[~kept].max()
    return f"current mass {low:.2f} Msun" if f"{low:.2f}" == f"{high:.2f}" else \
        f"current mass {low:.2f}-{high:.2f} Msun"


def _join(a, b):
    a = np.asarray(a, dtype=object)
    return np.where(a == "", b, a + "; " + b)


def _collect(placed, w, mass, z, eep, n_samples, rng, note, chi2_min) -> Placement:
    idx = np.flatnonzero(placed)
    if idx.size == 0:
        out = empty_placement(len(placed))
        out.note, out.chi2_min = note, chi2_min
        return out
    cols = _resample(w[idx], n_samples, _subset(rng, idx))
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
    best_mass = np.full(n, np.nan)
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
            best_mass[rows[part]] = dense.mass[idx[np.arange(idx.shape[0]), chi2.argmin(axis=1)]]
            logw = -0.5 * chi2 + dense.log_prior[idx]
            logw -= logw.max(axis=1, keepdims=True)
            pick = _resample(np.exp(logw), n_samples, _subset(rng, rows[part]))
            samples[rows[part]] = np.take_along_axis(idx, pick, axis=1)
    placed = np.isfinite(chi2_min) & (chi2_min <= CHI2_LIMIT)
    far = np.isfinite(chi2_min) & ~placed
    lo_m, hi_m = float(np.min(dense.mass)), float(np.max(dense.mass))
    edge = np.where(best_mass <= lo_m + 0.01,
                    f": the nearest model is the grid's lowest mass ({lo_m:.2f} Msun), so the star is "
                    "probably below the grid (late-K or M dwarf, or check Teff and L)",
                    np.where(best_mass >= hi_m - 0.01,
                             f": the nearest model is the grid's highest mass ({hi_m:.2f} Msun), so the "
                             "star is probably above the grid (or check Teff and L)", ""))
    note[far] = _join(note[far], [f"no track point within 5 sigma (nearest at {d:.1f} sigma){w}"
                                  for d, w in zip(np.sqrt(chi2_min[far]), edge[far])])
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
    share the isochrone of their (age, [Fe/H]) group.  A cluster age above
    :data:`MAX_AGE_MYR` is taken as that age, with a note.
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
    too_old = age > MAX_AGE_MYR
    note[too_old] = _join(note[too_old], f"cluster age above the age of the Universe: "
                                         f"{MAX_AGE_MYR / 1e3:g} Gyr used")
    age = np.where(too_old, MAX_AGE_MYR, age)
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
