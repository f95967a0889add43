"""Where an engulfment would show: the signature over initial mass x evolutionary point.

For one metallicity, planet and threshold, :func:`detectability_map` evaluates the
enrichment significance z and the signature's lifetime (both from
:func:`prioritize.engine.signature_at`, the same physics as the ranking) on a grid of
initial masses and equivalent evolutionary points (EEPs), and marks the favourable
region where z >= ``thresholds.z_signature`` and the lifetime >=
``thresholds.min_lifetime_myr``.  :func:`cluster_window` follows the isochrone of a
cluster's age instead and adds the apparent Gaia G magnitude and BP-RP colour of
every isochrone point, so that one can read off which members of a cluster fall in
the favourable region and how bright they are.

Everything here is a pure function of arrays and tables (no files, clock or
network); the ``map`` command is the file edge.  The numbers are planning
estimates from stellar-track fits and a model lithium prior, not predictions for a
particular star.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from .catalog.status import STAGES
from .config import Config
from .constants import MBOL_SUN
from .engine import signature_at
from .errors import ModelRangeError, PrioritizeError
from .stars import evolution
from .stars.photometry import bc_g, bp_rp_from_teff, gaia_extinction_from_intrinsic
from .stars.placement import MAX_AGE_MYR, isochrone
from .stars.tracks import N_EEPS, PHASE_EEPS, TrackGrid, feh_to_z, z_to_feh

DEFAULT_MASS_MIN_MSUN = 0.8
DEFAULT_MASS_MAX_MSUN = 3.0
DEFAULT_MASS_STEP_MSUN = 0.05
DEFAULT_EEP_POINTS = 150          # EEPs from the ZAMS to the tip of the giant branch
MAP_LAST_EEP = PHASE_EEPS["giant_branch"][1] - 1   # tip of the giant branch
ISOCHRONE_POINTS = 200            # isochrone points evaluated, evenly spaced in EEP
ISOCHRONE_MASS_STEP_MSUN = 2e-5   # fine enough to resolve the giant branch (~0.005 M_sun wide at 4 Gyr)
SIGNATURE_CHUNK = 20000           # points per signature_at call (bounds memory)
FEH_EDGE_TOLERANCE_DEX = 0.005    # the grid's [Fe/H] limits are quoted to 0.01 dex; snap within half

NOTE_TOO_OLD = "older than the Universe (13.8 Gyr): not favourable"
NOTE_NO_MODEL = "no track model at this point (phase missing or outside the grid)"
NOTE_NO_SIGNATURE = "no signature computed (no envelope model at this point)"
NOTE_NO_BC = "Teff outside the BC_G calibration (3300-8000 K): no G magnitude"
NOTE_NO_COLOUR = "Teff outside the BP-RP colour calibration (about 4000-8000 K): no colour"

MAP_COLUMNS = ["initial_mass_msun", "eep", "stage", "age_gyr", "teff_k", "logl_lsun", "logg",
               "m_cz_msun", "a_li_base", "a_li_scatter", "a_li_enriched", "z_enrich",
               "lifetime_myr", "lifetime_end", "favourable", "note"]
PHOTOMETRY_COLUMNS = ["bc_g_mag", "abs_g_mag", "a_g_mag", "g_mag", "bp_rp0", "bp_rp"]


def grid_metallicity(grid: TrackGrid, feh: float) -> float:
    """The metal mass fraction Z of an [Fe/H], checked against the track grid.

    Z = 0.02 x 10^[Fe/H] (the scale of the Hurley et al. 2000 fits).  Values within
    ``FEH_EDGE_TOLERANCE_DEX`` of the grid's edge are moved onto the edge (the limits
    are quoted to 0.01 dex); anything further out is refused, never extrapolated.

    Parameters
    ----------
    grid : TrackGrid
        The track grid.
    feh : float
        [Fe/H] (dex).

    Returns
    -------
    float
        Z inside the grid (built-in grid: 0.003-0.03, i.e. [Fe/H] -0.82 to +0.18).

    Raises
    ------
    ModelRangeError
        If [Fe/H] is not a finite number or lies outside the grid.

    References
    ----------
    Hurley, Pols & Tout 2000, MNRAS 315, 543, Sect. 2 (Z_sun = 0.02).
    """
    try:
        feh = float(feh)
    except (TypeError, ValueError) as exc:
        raise ModelRangeError(f"[Fe/H] must be a number, got {feh!r}") from exc
    lo, hi = (float(z_to_feh(v)) for v in (grid.z.min(), grid.z.max()))
    if not np.isfinite(feh) or feh < lo - FEH_EDGE_TOLERANCE_DEX or feh > hi + FEH_EDGE_TOLERANCE_DEX:
        raise ModelRangeError(
            f"[Fe/H] = {feh:+.2f} is outside the track grid: it covers Z = {grid.z.min():g}-"
            f"{grid.z.max():g}, i.e. [Fe/H] {lo:+.2f} to {hi:+.2f} at Z_sun = 0.02; choose a "
            "metallicity inside that range")
    return float(np.clip(feh_to_z(feh), grid.z.min(), grid.z.max()))


def default_map_masses() -> np.ndarray:
    """Initial masses of the default map: 0.8-3.0 M_sun in steps of 0.05 M_sun."""
    return map_masses(DEFAULT_MASS_MIN_MSUN, DEFAULT_MASS_MAX_MSUN, DEFAULT_MASS_STEP_MSUN)


def map_masses(mass_min: float, mass_max: float, step: float) -> np.ndarray:
    """Evenly spaced initial masses from ``mass_min`` to ``mass_max`` inclusive (M_sun).

    Raises
    ------
    PrioritizeError
        If the step is not positive or the range is empty.
    """
    if not (np.isfinite(step) and step > 0):
        raise PrioritizeError(f"the mass step must be a positive number of M_sun, got {step!r}")
    if not (np.isfinite(mass_min) and np.isfinite(mass_max) and mass_max >= mass_min):
        raise PrioritizeError(f"the mass range {mass_min!r}-{mass_max!r} M_sun is empty; give "
                              "the smaller mass first")
    count = int(np.floor((mass_max - mass_min) / step + 1e-9)) + 1
    return np.round(mass_min + step * np.arange(count), 10)


def default_map_eeps(n_points: int = DEFAULT_EEP_POINTS) -> np.ndarray:
    """EEPs from the ZAMS to the tip of the giant branch, about ``n_points`` of them.

    Evenly spaced in EEP, with the phase boundaries always included: ZAMS (0), start
    of the turn-off (the last 15% of the main sequence, 170), start of the subgiant
    branch (200), base of the giant branch (280) and the tip (479); see
    :data:`prioritize.stars.tracks.PHASE_EEPS`.

    Parameters
    ----------
    n_points : int
        Approximate number of EEPs (>= 5).

    Returns
    -------
    ndarray
        Sorted, unique fractional EEPs.

    Raises
    ------
    PrioritizeError
        If ``n_points`` is below 5.
    """
    if isinstance(n_points, bool) or not isinstance(n_points, (int, np.integer)) or n_points < 5:
        raise PrioritizeError(f"the number of evolutionary points must be a whole number >= 5, "
                              f"got {n_points!r}")
    boundaries = phase_boundaries()
    return np.union1d(np.linspace(0.0, MAP_LAST_EEP, n_points - len(boundaries) + 2),
                      list(boundaries.values()))


def phase_boundaries() -> dict:
    """EEP where each stage begins along a track, and the tip of the giant branch.

    The lower/upper giant-branch split is the RGB bump, which differs from track to
    track (see :func:`prioritize.stars.evolution.stage_index`); it is not included.

    Returns
    -------
    dict of str -> float
        ``main_sequence`` 0, ``turnoff`` 170, ``subgiant`` 200,
        ``giant_branch`` 280, ``tip`` 479.
    """
    ms0, ms1 = PHASE_EEPS["main_sequence"]
    return {"main_sequence": float(ms0),
            "turnoff": ms0 + evolution.TURNOFF_FRACTION * (ms1 - ms0),
            "subgiant": float(PHASE_EEPS["subgiant"][0]),
            "giant_branch": float(PHASE_EEPS["giant_branch"][0]),
            "tip": float(MAP_LAST_EEP)}


def _checked_points(values, name, lo, hi, unit) -> np.ndarray:
    try:
        arr = np.atleast_1d(np.asarray(values, dtype=float)).ravel()
    except (TypeError, ValueError) as exc:
        raise PrioritizeError(f"{name} must be numbers ({unit}), got {values!r:.60}") from exc
    if arr.size == 0:
        raise PrioritizeError(f"{name} is empty; give at least one value ({unit})")
    bad = ~np.isfinite(arr) | (arr < lo) | (arr > hi)
    if bad.any():
        raise ModelRangeError(f"{name} must lie within {lo:g}-{hi:g} {unit} (the track grid); "
                              f"got {arr[bad][0]:g}")
    return np.unique(arr)


PROGRESS_CHUNK = 1000             # points per step when a progress bar is shown


def _signature(grid, mass, z, eep, cfg, reference, progress=None):
    """:func:`signature_at` over chunks of points, joined (``SIGNATURE_CHUNK`` points,
    or ``PROGRESS_CHUNK`` with ``progress(done, total)`` called after each; every point
    is computed on its own, so the chunking does not change the result)."""
    step = SIGNATURE_CHUNK if progress is None else PROGRESS_CHUNK
    parts = []
    for s in range(0, mass.size, step):
        parts.append(signature_at(grid, mass[s:s + step], z[s:s + step], eep[s:s + step], cfg, reference))
        if progress is not None:
            progress(min(s + step, mass.size), mass.size)
    return {key: np.concatenate([p[key] for p in parts]) for key in parts[0]}


def _signature_table(mass, z, eep, sig, cfg: Config) -> pd.DataFrame:
    """The shared columns of the map and the cluster window (:data:`MAP_COLUMNS`)."""
    feh = z_to_feh(z)
    bump = evolution.rgb_bump_logl(mass, feh)
    stage = evolution.stage_names(evolution.stage_index(eep, sig["logl"], bump, PHASE_EEPS))
    age = sig["age_myr"]
    too_old = age > MAX_AGE_MYR
    z_enrich, life = sig["z_enrich"], sig["lifetime_myr"]
    with np.errstate(invalid="ignore"):
        favourable = ((z_enrich >= cfg.thresholds.z_signature)
                      & (life >= cfg.thresholds.min_lifetime_myr) & ~too_old)
    note = np.select([~np.isfinite(age), too_old, ~np.isfinite(z_enrich)],
                     [NOTE_NO_MODEL, NOTE_TOO_OLD, NOTE_NO_SIGNATURE], "").astype(object)
    return pd.DataFrame({
        "initial_mass_msun": mass, "eep": eep, "stage": stage, "age_gyr": age / 1e3,
        "teff_k": 10.0 ** sig["logteff"], "logl_lsun": sig["logl"], "logg": sig["logg"],
        "m_cz_msun": sig["m_cz_msun"], "a_li_base": sig["a_li_base"],
        "a_li_scatter": sig["a_li_scatter"], "a_li_enriched": sig["a_li_enriched"],
        "z_enrich": z_enrich, "lifetime_myr": life, "lifetime_end": sig["lifetime_end"],
        "favourable": favourable, "note": note}, columns=MAP_COLUMNS)


def detectability_map(grid: TrackGrid, cfg: Config, feh: float = 0.0, masses=None, eeps=None,
                      reference=None, progress=None) -> pd.DataFrame:
    """Enrichment significance and lifetime over initial mass x evolutionary point.

    For every pair (initial mass M, EEP) at Z = 0.02 x 10^[Fe/H], the configured
    planet (``cfg.planet``) is mixed into the convective envelope and

    z = (A_enriched - A_base) / sigma_base

    is evaluated, together with how long z stays >= ``cfg.thresholds.z_signature``
    along the track (dilution, burning or the RGB bump end it), exactly as the
    ranking does (:func:`prioritize.engine.signature_at`).  A point is favourable
    when z >= ``thresholds.z_signature`` and lifetime >= ``thresholds.min_lifetime_myr``
    and the star is younger than the Universe (13.8 Gyr; older points are kept and
    noted).  Planning estimates from the Hurley et al. (2000) track fits and the
    model lithium prior (or the user's reference population).

    Parameters
    ----------
    grid : TrackGrid
        The track grid.
    cfg : Config
        Planet, thresholds and baseline settings.
    feh : float
        [Fe/H] (dex) inside the grid (built-in: -0.82 to +0.18).
    masses : array_like, optional
        Initial masses (M_sun) inside the grid; default 0.8-3.0 in steps of 0.05.
    eeps : array_like, optional
        Fractional EEPs (0-579, layout :data:`~prioritize.stars.tracks.PHASE_EEPS`);
        default :func:`default_map_eeps` (ZAMS to the tip of the giant branch, ~150
        points with the phase boundaries).
    reference : ReferenceBaseline, optional
        A reference population for the baseline (None: the built-in prior).

    Returns
    -------
    pandas.DataFrame
        One row per (mass, EEP), sorted by mass then EEP, columns
        :data:`MAP_COLUMNS`: ``initial_mass_msun`` (M_sun), ``eep``, ``stage``,
        ``age_gyr`` (Gyr since the ZAMS), ``teff_k`` (K), ``logl_lsun``, ``logg``
        (cgs), ``m_cz_msun`` (M_sun), ``a_li_base``, ``a_li_scatter`` (dex),
        ``a_li_enriched``, ``z_enrich`` (sigma), ``lifetime_myr`` (Myr),
        ``lifetime_end``, ``favourable`` (bool), ``note``.

    Raises
    ------
    ModelRangeError
        If [Fe/H], a mass or an EEP lies outside the grid.

    References
    ----------
    Hurley, Pols & Tout 2000, MNRAS 315, 543 (tracks); enrichment by atom counting
    (:mod:`prioritize.lithium.enrichment`); baseline, significance and lifetime
    (:mod:`prioritize.lithium.baseline`, :mod:`prioritize.lithium.lifetime`).
    """
    z = grid_metallicity(grid, feh)
    masses = default_map_masses() if masses is None else masses
    masses = _checked_points(masses, "initial masses", grid.masses.min(), grid.masses.max(), "M_sun")
    eeps = default_map_eeps() if eeps is None else eeps
    eeps = _checked_points(eeps, "EEPs", 0.0, N_EEPS - 1, "(fractional EEP)")
    mass, eep = (a.ravel() for a in np.meshgrid(masses, eeps, indexing="ij"))
    zz = np.full(mass.size, z)
    return _signature_table(mass, zz, eep, _signature(grid, mass, zz, eep, cfg, reference, progress), cfg)


def gaia_photometry(teff_k, logl_lsun, logg, feh, distance_pc, ebv) -> dict:
    """Apparent Gaia G and BP-RP of model stars at a distance behind a reddening.

    M_bol = M_bol,sun - 2.5 log10(L/L_sun) with M_bol,sun = 4.74;
    M_G = M_bol - BC_G(Teff) (Andrae et al. 2018);
    (BP-RP)_0 from Teff, log g and [Fe/H] by inverting Casagrande et al. (2021);
    A_G, A_BP, A_RP from A_0 = 3.1 E(B-V) and (BP-RP)_0 (Babusiaux et al. 2018);
    G = M_G + 5 log10(d / 10 pc) + A_G and BP-RP = (BP-RP)_0 + A_BP - A_RP.

    Parameters
    ----------
    teff_k : array_like
        Effective temperature (K).
    logl_lsun : array_like
        log10(L / L_sun).
    logg : array_like
        log10(g / cm s^-2).
    feh : array_like
        [Fe/H] (dex).
    distance_pc : float
        Distance (pc), > 0.
    ebv : float
        E(B-V) (mag), >= 0.

    Returns
    -------
    dict of str -> ndarray
        :data:`PHOTOMETRY_COLUMNS`: ``bc_g_mag``, ``abs_g_mag``, ``a_g_mag``,
        ``g_mag``, ``bp_rp0``, ``bp_rp`` (mag).  BC_G holds for 3300-8000 K and the
        colour for about 4000-8000 K (NaN outside); without reddening G needs no
        colour.  Synthetic magnitudes for planning, not photometry.

    Raises
    ------
    PrioritizeError
        If the distance is not positive or E(B-V) is negative.

    References
    ----------
    Andrae R. et al. 2018, A&A 616, A8 (BC_G); Casagrande L. et al. 2021, MNRAS 507,
    2684 (colour-Teff); Gaia Collaboration, Babusiaux C. et al. 2018, A&A 616, A10
    (extinction coefficients); IAU 2015 Resolution B2 (M_bol,sun = 4.74).
    """
    if not (np.isfinite(distance_pc) and distance_pc > 0):
        raise PrioritizeError(f"the distance must be a positive number of parsecs, got {distance_pc!r}")
    if not (np.isfinite(ebv) and ebv >= 0):
        raise PrioritizeError(f"E(B-V) must be a number >= 0 (mag), got {ebv!r}")
    bc = bc_g(teff_k).value
    abs_g = MBOL_SUN - 2.5 * np.asarray(logl_lsun, dtype=float) - bc
    colour0 = bp_rp_from_teff(teff_k, logg, feh).value
    ext = gaia_extinction_from_intrinsic(ebv, colour0)
    return {"bc_g_mag": bc, "abs_g_mag": abs_g, "a_g_mag": ext.a_g,
            "g_mag": abs_g + 5.0 * np.log10(distance_pc / 10.0) + ext.a_g,
            "bp_rp0": colour0, "bp_rp": colour0 + ext.a_bp - ext.a_rp}


def _evenly_in_eep(eep, n_points):
    """Indices of about ``n_points`` isochrone points evenly spaced in EEP (ends kept)."""
    rising = np.maximum.accumulate(eep)
    targets = np.linspace(rising[0], rising[-1], n_points)
    return np.unique(np.clip(np.searchsorted(rising, targets), 0, eep.size - 1))


def cluster_window(grid: TrackGrid, cfg: Config, age_gyr: float, feh: float, distance_pc: float,
                   ebv: float, reference=None, progress=None) -> pd.DataFrame:
    """The signature and the Gaia magnitudes along a cluster's isochrone.

    The isochrone at ``age_gyr`` (age since the ZAMS; the pre-main-sequence phase is
    negligible above ~0.1 Gyr) is sampled at :data:`ISOCHRONE_POINTS` points evenly
    spaced in EEP; at each, z and the lifetime are those of
    :func:`detectability_map`, and G and BP-RP those of :func:`gaia_photometry`.  A
    user reads off which members (by magnitude and colour) fall in the favourable
    region.  Planning estimates.

    Parameters
    ----------
    grid : TrackGrid
        The track grid.
    cfg : Config
        Planet, thresholds and baseline settings.
    age_gyr : float
        Cluster age (Gyr), 0 < age <= 13.8.
    feh : float
        Cluster [Fe/H] (dex) inside the grid.
    distance_pc : float
        Distance (pc), > 0.
    ebv : float
        Reddening E(B-V) (mag), >= 0.
    reference : ReferenceBaseline, optional
        A reference population for the baseline (None: the built-in prior).

    Returns
    -------
    pandas.DataFrame
        :data:`MAP_COLUMNS` + :data:`PHOTOMETRY_COLUMNS`, ordered along the isochrone
        (increasing initial mass); ``attrs["summary"]`` holds :func:`window_summary`.

    Raises
    ------
    ModelRangeError
        If the age, [Fe/H] or the isochrone is outside the grid.
    PrioritizeError
        If the distance or E(B-V) is invalid.

    References
    ----------
    As :func:`detectability_map` and :func:`gaia_photometry`.
    """
    if not (np.isfinite(age_gyr) and 0 < age_gyr <= MAX_AGE_MYR / 1e3):
        raise ModelRangeError(f"the cluster age must be between 0 and {MAX_AGE_MYR / 1e3:g} Gyr, "
                              f"got {age_gyr!r}")
    z = grid_metallicity(grid, feh)
    iso = isochrone(grid, age_gyr * 1e3, z, mass_step=ISOCHRONE_MASS_STEP_MSUN)
    if iso["mass"].size == 0:
        raise ModelRangeError(f"no track of the grid ({grid.masses.min():g}-{grid.masses.max():g} "
                              f"M_sun) is alive at {age_gyr:g} Gyr; choose another age")
    pick = _evenly_in_eep(iso["eep"], ISOCHRONE_POINTS)
    mass, eep = iso["mass"][pick], iso["eep"][pick]
    zz = np.full(mass.size, z)
    table = _signature_table(mass, zz, eep, _signature(grid, mass, zz, eep, cfg, reference, progress), cfg)
    phot = gaia_photometry(table["teff_k"].to_numpy(), table["logl_lsun"].to_numpy(),
                           table["logg"].to_numpy(), z_to_feh(z), distance_pc, ebv)
    table = table.assign(**phot)
    note = table["note"].to_numpy(object)
    modelled = np.isfinite(table["teff_k"].to_numpy())
    for missing, text in ((~np.isfinite(phot["bc_g_mag"]), NOTE_NO_BC),
                          (~np.isfinite(phot["bp_rp0"]), NOTE_NO_COLOUR)):
        hit = missing & modelled
        note[hit] = np.where(note[hit] == "", text, note[hit] + "; " + text)
    table["note"] = note
    table.attrs["summary"] = window_summary(table)
    return table


def favourable_by_stage(table: pd.DataFrame) -> pd.DataFrame:
    """Per stage: points, favourable points and the initial masses where they lie.

    Parameters
    ----------
    table : pandas.DataFrame
        A :func:`detectability_map` or :func:`cluster_window` table.

    Returns
    -------
    pandas.DataFrame
        Index the stages present (in evolutionary order); columns ``points``,
        ``favourable``, ``mass_min_msun`` and ``mass_max_msun`` (of the favourable
        points; NaN if none), ``mass_ranges`` (text: the runs of neighbouring masses
        of the table with a favourable point in that stage, e.g.
        ``"0.80-1.05, 1.35-1.40"``) and ``lifetime_max_myr``.
    """
    rows = []
    for stage in STAGES:
        here = table[table["stage"] == stage]
        if here.empty:
            continue
        fav = here[here["favourable"].astype(bool)]
        rows.append({"stage": stage, "points": len(here), "favourable": len(fav),
                     "mass_min_msun": fav["initial_mass_msun"].min(),
                     "mass_max_msun": fav["initial_mass_msun"].max(),
                     "mass_ranges": _mass_runs(here["initial_mass_msun"], fav["initial_mass_msun"]),
                     "lifetime_max_myr": fav["lifetime_myr"].max()})
    return pd.DataFrame(rows, columns=["stage", "points", "favourable", "mass_min_msun",
                                       "mass_max_msun", "mass_ranges",
                                       "lifetime_max_myr"]).set_index("stage")


def _mass_runs(masses: pd.Series, favourable: pd.Series) -> str:
    """Runs of neighbouring masses (among ``masses``) that are in ``favourable``, as text."""
    grid = np.unique(masses.to_numpy(float))
    hit = np.isin(grid, favourable.to_numpy(float))
    edges = np.flatnonzero(np.diff(np.concatenate([[0], hit.astype(int), [0]])))
    runs = [(grid[a], grid[b - 1]) for a, b in zip(edges[::2], edges[1::2])]
    return ", ".join(f"{lo:.2f}" if lo == hi else f"{lo:.2f}-{hi:.2f}" for lo, hi in runs)


def window_summary(window: pd.DataFrame) -> str:
    """One line: the G range of the favourable isochrone points, per stage.

    Parameters
    ----------
    window : pandas.DataFrame
        A :func:`cluster_window` table.

    Returns
    -------
    str
        E.g. ``"favourable: 14 of 198 isochrone points, G 11.2-12.9 mag (subgiant
        12.1-12.9; lower_giant_branch 11.2-11.9)"``.
    """
    fav = window[window["favourable"].astype(bool)]
    if fav.empty:
        return f"favourable: none of {len(window)} isochrone points"
    g = fav["g_mag"]
    parts = []
    for stage in STAGES:
        s = fav.loc[fav["stage"] == stage, "g_mag"]
        if len(s):
            parts.append(f"{stage} {_range(s)}")
    text = f"favourable: {len(fav)} of {len(window)} isochrone points, G {_range(g)} mag ({'; '.join(parts)})"
    if g.isna().any():
        text += f"; {int(g.isna().sum())} without a G magnitude (Teff outside the calibrations)"
    return text


def _range(values: pd.Series) -> str:
    v = values.dropna()
    if v.empty:
        return "n/a"
    return f"{v.min():.1f}" if np.isclose(v.min(), v.max(), atol=0.05) else f"{v.min():.1f}-{v.max():.1f}"
