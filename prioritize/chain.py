"""The physics chain as one pure function of a batch: a canonical table in, a table out.

``run_batch`` takes validated rows (canonical columns plus ``status``/``note``) and
returns one output row per input row, in the same order; no I/O, no global state
beyond cached read-only tables (:mod:`prioritize.track_tables`).  The runner
(:mod:`prioritize.runner`) maps it over batches and processes and ranks the result.

Chain per batch (one direction; every stage a function of arrays):
photometry -> placement on tracks (samples) -> envelope -> lithium baseline and
enrichment per sample -> significance, P(z >= threshold) -> lifetime along the
track of the median sample -> priority.
"""

from __future__ import annotations


import numpy as np
import pandas as pd

from . import engulfment, exposure, rotation, score, spectra, track_tables
from .catalog import status as st
from .catalog import validate
from .config import Config, with_overrides
from .errors import PrioritizeError
from .lithium import baseline, lifetime
from .constants import M_JUP_MSUN, M_SUN_G, R_SUN_CM, Z_PROTOSOLAR
from .lithium.enrichment import (GAS_KINDS, PlanetComposition, enriched_abundance, mjup_to_msun,
                                 planet_mass_for_abundance)
from .stars import evolution, placement
from .instruments import load_instrument
from .stars.photometry import derive_stellar_parameters, teff_from_b_v_dwarf
from .lithium import burning, deposition
from .stars.tracks import (PHASE_EEPS, TrackGrid, convective_envelope, envelope_profile, load_grid,
                           z_to_feh)

PRIOR_SOURCE = "prior (model, not measured)"
ENVELOPE_OUTPUT_COLUMNS = ("t_bcz_k", "rho_bcz_gcc", "r_bcz_rsun", "m_li_preserved_msun",
                           "envelope_quality")
ODDS_COLUMNS = ("p_engulfed_history", "planets_swept", "capture_radius_now_rsun",
                "capture_radius_then_rsun", "p_background")
DEPOSITION_COLUMNS = ("deposited_fraction_full", "deposited_fraction_ram_pressure",
                      "deposited_fraction_virial", "disruption_radius_ram_rsun",
                      "disruption_radius_virial_rsun")
MAX_BODY_MJUP = 80.0        # hydrogen-burning limit (~0.075-0.08 Msun, from memory): above it no planet or brown dwarf
NO_BURNING_MYR = 1e6        # a surface-Li e-folding time beyond 10^6 Myr (70 Hubble times) is written inf
FEH_BEYOND_GRID_DEX = 0.3   # [Fe/H] further than this (and 3 sigma) beyond the grid: not placed
BREAKUP_KMS_SOLAR = 436.76  # sqrt(G M_sun / R_sun) in km/s (IAU 2015 nominal GM_sun and R_sun)
MIN_SCATTER_DEX = 0.05   # no baseline is tighter than a good A(Li) measurement (common practice)
OTHER_PLANET_PREFIXES = ("z_enrich_", "p_detect_", "lifetime_myr_")  # + "<mass>mj" per extra planet
HISTORY_NODES = 48           # points sampled along the past track for the deepest envelope so far
TABLE_MASS_SPLIT = 2         # table of the deepest envelope: the grid's mass steps halved
RADIUS_FRACTIONAL_ERROR = 0.10  # assumed radius error for v_eq = 2 pi R / P (common practice)
LIFETIME_CHUNK = 500         # stars per chunk when following tracks into the future (~120 MB)
STAR_CHUNK = 1000           # stars per sub-chunk of a batch for the per-sample stages (bounds memory)
EARLY_EEP_STEPS = (0.001, 0.003, 0.01, 0.03, 0.1, 0.3)  # sub-steps after the present point
PRESERVED_MASS_EEPS = (0.0, 50.0, 100.0, 150.0)  # main-sequence points searched for the Li-preserving layer
TURNOFF_EEP = PHASE_EEPS["main_sequence"][0] + evolution.TURNOFF_FRACTION * (
    PHASE_EEPS["main_sequence"][1] - PHASE_EEPS["main_sequence"][0])

OUTPUT_COLUMNS = [
    "star_id", "rank", "priority", "status", "note",
    "mass_msun", "mass_err_msun", "age_gyr", "age_err_gyr", "stage", "eep",
    "teff_k", "logl_lsun", "radius_rsun", "feh", "m_cz_msun",
    "t_bcz_k", "rho_bcz_gcc", "r_bcz_rsun", "m_li_preserved_msun", "envelope_quality",
    "li_burning_timescale_myr", "deposition_scenario", "deposited_fraction_full",
    "deposited_fraction_ram_pressure", "deposited_fraction_virial", "disruption_radius_ram_rsun",
    "disruption_radius_virial_rsun",
    "a_li_base", "a_li_scatter", "a_li_enriched", "delta_a_li", "z_enrich", "z_enrich_err",
    "p_detect", "lifetime_myr", "lifetime_p16_myr", "lifetime_p84_myr", "lifetime_end",
    "m_planet_min_mjup", "a_li_detection_limit", "li_rich_tail_fraction",
    "z_observed", "z_observed_is_limit", "m_planet_needed_mjup",
    "veq_kms", "veq_expected_kms", "veq_expected_spread_kms", "rot_expect_source",
    "rot_anomaly_sigma", "rapid_rotator", "m_planet_spin_mjup", "spin_li_consistency",
    "spin_up_kms", "spin_visible_fraction", "rotation_likelihood_ratio",
    "p_engulfed_history", "planets_swept", "capture_radius_now_rsun", "capture_radius_then_rsun",
    "p_background", "p_engulfed",
    "ew_base_mA", "ew_enriched_mA", "delta_ew_mA", "line_fwhm_A", "snr_needed", "r_c_mag",
    "r_c_source", "exposure_s", "exposure_flag", "snr_at_exposure", "overhead_s", "time_on_target_s",
    "delta_ew_measurable", "p_measured", "instrument", "lines_to_measure", "coverage_missing",
    "placement_method", "teff_source", "logl_source", "feh_source", "baseline_source", "baseline_n",
    "teff_zams_k", "a_li_main_sequence", "dilution_dex", "m_planet_msun", "chi2_best",
]

_CLUSTER_KEYS = {"cluster_age_gyr": "age_gyr", "cluster_feh": "feh",
                 "cluster_distance_pc": "distance_pc", "cluster_ebv": "ebv"}


def planet_composition(cfg: Config) -> PlanetComposition:
    """The configured planet's composition.

    For gas giants and brown dwarfs with ``li_follows_metals``, lithium arrives with the
    solids that enriched the planet in metals: A(Li)_p = a_li + log10(Z_p / Z_protosolar)
    (Z_protosolar = 0.0142, Asplund et al. 2009; Jupiter's bulk Z ~0.03-0.13 from
    interior models fitted to Juno gravity data, e.g. Wahl et al. 2017, GRL 44, 4649 —
    range from memory)."""
    p = cfg.planet
    a_li = p.a_li
    if p.li_follows_metals and p.kind in GAS_KINDS:
        a_li = p.a_li + float(np.log10(p.bulk_metallicity / Z_PROTOSOLAR))
    return PlanetComposition(p.kind, p.hydrogen_fraction, a_li, p.li_mass_fraction)


def _column(df: pd.DataFrame, name: str, dtype=float) -> np.ndarray:
    if name in df.columns:
        return df[name].to_numpy(dtype=dtype, na_value=np.nan) if dtype is float else \
            df[name].to_numpy(dtype=object)
    return np.full(len(df), np.nan) if dtype is float else np.full(len(df), None, dtype=object)


def with_cluster_context(df: pd.DataFrame, cfg: Config) -> pd.DataFrame:
    """Fill cluster columns from the config where the catalog lacks them, and let
    members inherit the cluster's distance, reddening and [Fe/H] when they have none."""
    df = df.copy()
    for col, key in _CLUSTER_KEYS.items():
        value = getattr(cfg.cluster, key)
        if col not in df.columns:
            df[col] = value
        else:
            df[col] = pd.to_numeric(df[col], errors="coerce").fillna(value)
    member = np.isfinite(df["cluster_age_gyr"].to_numpy(float))
    for own, col in (("distance_pc", "cluster_distance_pc"), ("ebv", "cluster_ebv"),
                     ("feh", "cluster_feh")):
        if own not in df.columns:
            df[own] = np.nan
        fill = member & df[own].isna().to_numpy()
        if own == "distance_pc" and "parallax_mas" in df.columns:
            fill &= df["parallax_mas"].isna().to_numpy()
        df.loc[fill, own] = df.loc[fill, col]
    return df


def _routes(df: pd.DataFrame, params: pd.DataFrame) -> np.ndarray:
    """Placement route per row by the rule ``prioritize check`` also applies
    (:func:`prioritize.catalog.validate.placement_routes`): mass+stage, cluster
    isochrone, Teff+L, Teff+logg, or '' (cannot place)."""
    from .catalog.validate import ROUTE_NONE, placement_routes
    route = placement_routes(df, params)
    return np.where(route == ROUTE_NONE, "", route)


def _place(df, params, route, grid, cfg, rng):
    """Run each route on its rows and merge the samples (rows stay in blocks of S)."""
    n = len(df)
    s = cfg.scoring.samples_per_star
    parts = []
    placed = np.zeros(n, bool)
    note = np.full(n, "", dtype=object)
    chi2 = np.full(n, np.nan)
    teff, teff_err = params["teff_k"].to_numpy(float), params["teff_k_err"].to_numpy(float)
    logl, logl_err = params["logl_lsun"].to_numpy(float), params["logl_lsun_err"].to_numpy(float)
    feh, feh_err = params["feh"].to_numpy(float), params["feh_err"].to_numpy(float)
    logg, logg_err = _column(df, "logg"), _column(df, "logg_err")
    seismic_mass, seismic_mass_err = _column(df, "seismic_mass_msun"), _column(df, "seismic_mass_err_msun")
    for name in ("mass+stage", "asteroseismic+stage", "cluster isochrone", "posterior"):
        rows = np.flatnonzero(np.isin(route, ("Teff+L", "Teff+logg", "asteroseismic")) if name == "posterior"
                              else route == name)
        if rows.size == 0:
            continue
        if name in ("mass+stage", "asteroseismic+stage"):
            given = name == "mass+stage"
            p = placement.place_by_mass_stage(
                grid, (_column(df, "mass_msun") if given else seismic_mass)[rows],
                (_column(df, "mass_msun_err") if given else seismic_mass_err)[rows],
                _column(df, "stage", object)[rows], feh[rows], placement._subset(rng, rows), s,
                teff=teff[rows], teff_err=teff_err[rows], logg=logg[rows], logg_err=logg_err[rows],
                logl=logl[rows], logl_err=logl_err[rows])
        elif name == "cluster isochrone":
            p = placement.place_on_isochrone(grid, teff[rows], teff_err[rows], logl[rows],
                                             logl_err[rows], _column(df, "cluster_age_gyr")[rows],
                                             feh[rows], placement._subset(rng, rows), s)
        else:
            p = placement.place_by_posterior(grid, teff[rows], teff_err[rows], logl[rows],
                                             logl_err[rows], logg[rows], logg_err[rows], feh[rows],
                                             feh_err[rows], placement._subset(rng, rows), s)
        redo = np.zeros(0, int)
        if name in ("mass+stage", "asteroseismic+stage"):
            p, redo = _stage_contradicted_by_l(grid, p, rows, teff, logl, logl_err, s)
        placed[rows] = p.placed
        note[rows] = _append(note[rows], p.note)
        chi2[rows] = p.chi2_min
        parts.append((rows[p.star], p.mass, p.z, p.eep))
        # placed from Teff and L by the posterior step below; the output's
        # placement_method says so
        route[redo] = "Teff+L"
    if parts:
        star, mass, z, eep = (np.concatenate(x) for x in zip(*parts))
        order = np.argsort(star, kind="stable")
        star, mass, z, eep = star[order], mass[order], z[order], eep[order]
    else:
        star = mass = z = eep = np.zeros(0)
    return star.astype(int), mass, z, eep, placed, note, chi2


def _with_seismic_parameters(df, params, route, cfg):
    """Rows placed by an asteroseismic route take the scaling relations' log g (where
    the catalog gives none), radius and L (where the catalog gives no log L), with the
    source recorded; the chain then places and reports them from these."""
    from .stars.seismology import scaling_relations
    rows = np.isin(route, ("asteroseismic+stage", "asteroseismic"))
    if not rows.any():
        return df, params
    clump = _column(df, "stage", object) == "red_clump"
    f = np.where(clump, cfg.seismology.f_dnu_clump, cfg.seismology.f_dnu_rgb)
    seis = scaling_relations(_column(df, "numax_uhz"), _column(df, "dnu_uhz"), params["teff_k"].to_numpy(float),
                             _column(df, "numax_uhz_err"), _column(df, "dnu_uhz_err"),
                             params["teff_k_err"].to_numpy(float), f)
    df, params = df.copy(), params.copy()
    df["seismic_mass_msun"], df["seismic_mass_err_msun"] = seis.mass_msun, seis.mass_err_msun
    logg = _column(df, "logg")
    fill_g = rows & ~np.isfinite(logg)
    df["logg"] = np.where(fill_g, seis.logg, logg)
    df["logg_err"] = np.where(fill_g, seis.logg_err, _column(df, "logg_err"))
    fill_l = rows & (params["logl_source"].to_numpy(object) != "catalog")
    for column, value in (("logl_lsun", seis.logl_lsun), ("logl_lsun_err", seis.logl_err),
                          ("radius_rsun", seis.radius_rsun)):
        params[column] = np.where(fill_l, value, params[column].to_numpy(float))
    params["logl_source"] = np.where(fill_l, "asteroseismic R + Teff", params["logl_source"].to_numpy(object))
    params["radius_source"] = np.where(fill_l, "asteroseismic scaling relations",
                                       params["radius_source"].to_numpy(object))
    return df, params


STAGE_L_CONTRADICTION_SIGMA = 5.0   # given stage vs measured log L: beyond this ...
STAGE_L_CONTRADICTION_DEX = 0.3     # ... and this far (dex), place by Teff+L instead


def _stage_contradicted_by_l(grid, p, rows, teff, logl, logl_err, s):
    """Rows of a mass+stage placement whose given stage the measured luminosity
    contradicts (the placed models' median log L more than
    :data:`STAGE_L_CONTRADICTION_SIGMA` away): they are taken out of ``p`` and
    returned (catalog row numbers) to be placed from Teff and L instead, with a note.
    A given stage is otherwise respected."""
    have = np.isfinite(teff[rows]) & np.isfinite(logl[rows])
    if not (have & p.placed).any() or p.star.size == 0:
        return p, np.zeros(0, int)
    model_l = grid.interpolate(p.mass, p.z, p.eep, columns=["logl"])["logl"].reshape(-1, s)
    local = p.star.reshape(-1, s)[:, 0]
    err = np.where(np.isfinite(logl_err[rows]) & (logl_err[rows] > 0), logl_err[rows], 0.1)
    # the closest of the stage's samples (they span the mass error): a stage is only
    # contradicted when none of its models at the given mass reaches the luminosity
    gap = np.nanmin(np.abs(model_l - logl[rows][local][:, None]), axis=1)
    dist = gap / err[local]
    # and by a stage-sized gap (a factor 2 in L), not a mass-luminosity tension
    bad_local = local[have[local] & (dist > STAGE_L_CONTRADICTION_SIGMA) & (gap > STAGE_L_CONTRADICTION_DEX)]
    if bad_local.size == 0:
        return p, np.zeros(0, int)
    keep = ~np.isin(p.star, bad_local)
    note = p.note.copy()
    for j, d in zip(local, dist):
        if j in bad_local:
            # the mass+stage clash notes described models that are no longer used
            note[j] = (f"the given stage is contradicted by log L = {logl[rows][j]:.2f} ({d:.0f} sigma "
                       "from the closest of the stage's models at this mass): placed from Teff and L instead, the "
                       "catalog mass and stage not used")
    placed = p.placed.copy()
    placed[bad_local] = False
    return placement.Placement(p.star[keep], p.mass[keep], p.z[keep], p.eep[keep], placed, note,
                               p.chi2_min), rows[bad_local]


def _deepest_envelope_so_far(grid, mass, z, eep, m_cz_now):
    """Deepest convective envelope reached between the ZAMS and ``eep`` (M_sun):
    dilution of the star's own lithium never reverses.  The direct computation
    (:data:`HISTORY_NODES` points along the past track); the chain reads it from a
    table of the same function on the grid's nodes (:func:`_deepest_envelope`)."""
    past = eep[..., None] * np.linspace(0.0, 1.0, HISTORY_NODES)
    past_cz = convective_envelope(grid, mass[..., None], z[..., None], past,
                                  columns=("m_cz_msun",))["m_cz_msun"]
    return np.fmax(np.nanmax(np.where(np.isfinite(past_cz), past_cz, -np.inf), axis=-1), m_cz_now)


def _deepest_envelope_nodes(mass, z, eep, grid):
    m_cz = convective_envelope(grid, mass, z, eep, columns=("m_cz_msun",))["m_cz_msun"]
    return {"m_cz_max_msun": _deepest_envelope_so_far(grid, mass, z, eep, m_cz)}


def deepest_envelope_table(grid) -> track_tables.PointTable:
    """:func:`_deepest_envelope_so_far` on every node of the grid, cached (log M_cz)."""
    def build(g):
        masses = track_tables.refined_masses(g, TABLE_MASS_SPLIT)
        values = track_tables.evaluate_on_nodes(g, lambda m, z, e: _deepest_envelope_nodes(m, z, e, g),
                                                masses=masses)
        return track_tables.PointTable(masses, g.z, g.eeps.size, track_tables.log_values(values),
                                       log_names=("m_cz_max_msun",))
    return track_tables.cached_table(grid, "deepest-envelope", build,
                                     extra=f"history_nodes={HISTORY_NODES};split={TABLE_MASS_SPLIT}")


def _deepest_envelope(grid, mass, z, eep, m_cz_now):
    """:func:`_deepest_envelope_so_far` interpolated from :func:`deepest_envelope_table`
    (never shallower than the envelope now)."""
    got = deepest_envelope_table(grid)(mass, z, eep)["m_cz_max_msun"]
    return np.fmax(np.where(np.isfinite(got), got, -np.inf), m_cz_now)


def _li_preserving_mass(grid, mass, z):
    """Mass above the 2.5 MK isotherm at its shallowest on the main sequence: the layer
    that never burnt its lithium, which first dredge-up dilutes (grid envelope
    integration); the interim 2% of the mass where the grid has none."""
    nodes = np.array(PRESERVED_MASS_EEPS)
    got = convective_envelope(grid, np.asarray(mass)[..., None], np.asarray(z)[..., None],
                              nodes)["m_li_preserved_msun"]
    got = np.where(np.isfinite(got) & (got > 0), got, np.inf).min(axis=-1)
    return np.where(np.isfinite(got), got, baseline.li_preserving_mass_interim(mass))


def _preserved_reservoir(grid, mass, z, eep, direct=True):
    """Mass holding the main-sequence lithium: the Li-preserving layer, or the convective
    envelope before the turnoff where that was deeper (M_sun).  ``direct=False`` reads
    the deepest envelope from its table (:func:`_deepest_envelope`)."""
    turnoff = np.minimum(eep, TURNOFF_EEP)
    deepest = _deepest_envelope_so_far if direct else _deepest_envelope
    m_cz_ms = deepest(grid, mass, z, turnoff,
                      convective_envelope(grid, mass, z, turnoff, columns=("m_cz_msun",))["m_cz_msun"])
    return np.fmax(_li_preserving_mass(grid, mass, z), m_cz_ms)


def _giant_branch(grid, mass, z):
    """RGB bump (fractional EEP, log L, age) and the age at the RGB tip per track;
    NaN bump values where the track has no bump."""
    bump_eep, bump_logl = evolution.rgb_bump(grid, mass, z)
    has = np.isfinite(bump_eep)
    ages = grid.interpolate(mass, z, np.where(has, bump_eep, 0.0), columns=["age_myr"])["age_myr"]
    tip = grid.interpolate(mass, z, np.zeros(np.shape(mass)) + PHASE_EEPS["giant_branch"][1] - 1,
                           columns=["age_myr"])["age_myr"]
    return {"bump_eep": bump_eep, "bump_logl": bump_logl,
            "bump_age": np.where(has, ages, np.nan), "tip_age": tip}


def _surface_burning_time_yr(grid, mass, z, eep, m_cz):
    """e-folding time of surface lithium by 7Li(p, alpha) at the base of the envelope
    (``burning.surface_li_timescale_yr``) at track points; inf where the grid has no
    convective base or the base is too cool to burn."""
    env = convective_envelope(grid, mass, z, eep, columns=("t_bcz_k", "rho_bcz_gcc", "r_bcz_rsun"))
    current = grid.interpolate(mass, z, eep, columns=["mass_msun"])["mass_msun"]
    ok = (np.isfinite(env["t_bcz_k"]) & (env["t_bcz_k"] > 0) & np.isfinite(env["rho_bcz_gcc"])
          & (env["rho_bcz_gcc"] > 0) & (env["r_bcz_rsun"] > 0) & (m_cz > 0) & (m_cz < current))
    tau = np.full(np.shape(ok), np.inf)
    if ok.any():
        tau[ok] = burning.surface_li_timescale_yr(env["t_bcz_k"][ok], env["rho_bcz_gcc"][ok],
                                                  env["r_bcz_rsun"][ok], m_cz[ok], current[ok])
    return tau


def _deposition(grid, mass, z, eep, cfg):
    """Where the configured planet dissolves, for every scenario (:mod:`prioritize.lithium.deposition`).

    Returns the columns of :func:`deposition.deposition_columns` (shape of ``mass``) and
    the fraction the ranking uses (config ``planet.deposition``); the fraction is 1
    where the grid has no envelope profile or the planet is outside the radius laws."""
    shape = np.shape(mass)
    prof = envelope_profile(grid, mass, z, eep)
    current = grid.interpolate(mass, z, eep, columns=["mass_msun"])["mass_msun"]
    r_cm = prof["r_rsun"] * R_SUN_CM
    shell = 4.0 * np.pi * r_cm ** 2 * prof["rho_gcc"]
    above = np.concatenate([np.zeros(shape + (1,)),
                            np.cumsum(0.5 * (shell[..., 1:] + shell[..., :-1]) * -np.diff(r_cm, axis=-1),
                                      axis=-1)], axis=-1) / M_SUN_G
    m_r = current[..., None] - above
    ok = np.all(np.isfinite(prof["rho_gcc"]) & np.isfinite(prof["t_k"]) & (m_r > 0), axis=-1)
    names = ["deposited_fraction_full", "deposited_fraction_ram_pressure", "deposited_fraction_virial",
             "disruption_radius_ram_rsun", "disruption_radius_virial_rsun"]
    cols = {k: np.full(shape, np.nan) for k in names}
    if ok.any():
        try:
            got = deposition.deposition_columns(cfg.planet.mass_mjup, cfg.planet.kind,
                                                prof["r_rsun"][ok], prof["rho_gcc"][ok],
                                                prof["t_k"][ok], m_r[ok])
        except PrioritizeError:  # e.g. a planet mass outside the radius laws
            got = {}
        for k, v in got.items():
            cols[k][ok] = v
    key = "deposited_fraction_" + cfg.planet.deposition.replace("-", "_")
    used = np.where(np.isfinite(cols[key]), cols[key], 1.0)
    return cols, used


def _envelope_and_lithium(grid, mass, z, eep, model, gb, cfg, composition, reference, deposit=1.0,
                          lookup=None):
    """Envelope now and deepest so far, the lithium reservoir, and the lithium at points."""
    m_cz = convective_envelope(grid, mass, z, eep, columns=("m_cz_msun",))["m_cz_msun"]
    m_cz_max = _deepest_envelope(grid, mass, z, eep, m_cz)
    m_pres = _preserved_reservoir(grid, mass, z, eep, direct=False)
    li = _lithium_at(grid, mass, z, eep, model, m_cz, m_cz_max, m_pres, gb, cfg, composition,
                     reference=reference, deposit=deposit, lookup=lookup)
    return m_cz, m_cz_max, m_pres, li


def _lithium_at(grid, mass, z, eep, model, m_mix, m_cz_max, m_pres, gb, cfg, composition,
                reference=None, deposit=1.0, li_survival=1.0, lookup=None):
    """Baseline, enrichment and significance at track points (any shape).

    ``model`` holds the points' ``age_myr``, ``logteff``, ``logl`` and ``logg``; ``gb``
    the tracks' giant-branch ages (:func:`_giant_branch`, broadcastable).  ``m_mix`` is
    the envelope mass the planet is mixed into, ``m_cz_max`` the deepest envelope so
    far, ``m_pres`` the reservoir of main-sequence lithium (dilution starts when the
    envelope reaches below it).  The baseline is the built-in prior by stage, or the
    reference population looked up at ``lookup`` (``teff_k``, ``logg``: the star's own
    spectroscopic values where given, else the model's).  The significance compares the
    enriched abundance with the baseline or, where that is below the detection limit
    (the EW floor), with the limit: a censored comparison."""
    age_myr = model["age_myr"]
    zeros = np.zeros_like(age_myr)
    zams = grid.interpolate(mass, z, zeros, columns=["logteff"])
    tams = grid.interpolate(mass, z, zeros + PHASE_EEPS["main_sequence"][1], columns=["age_myr"])
    teff_zams = 10 ** zams["logteff"]
    feh = z_to_feh(z) + zeros
    stage_i = evolution.stage_index(eep, model["logl"], gb["bump_logl"], PHASE_EEPS)
    thermohaline = baseline.thermohaline_depletion(age_myr, gb["bump_age"], gb["tip_age"],
                                                   eep >= PHASE_EEPS["core_he_burning"][0],
                                                   cfg.baseline.thermohaline_depletion_dex)
    a_base, a_ms, dilution = baseline.prior_baseline(teff_zams, feh, age_myr / 1e3,
                                                     tams["age_myr"] / 1e3, m_cz_max, m_pres,
                                                     thermohaline)
    sigma = (np.full_like(a_base, cfg.baseline.prior_scatter_dex) if cfg.baseline.prior_scatter_dex > 0
             else baseline.prior_scatter(stage_i, teff_zams, feh))
    source = np.full(a_base.shape, PRIOR_SOURCE, dtype=object)
    count = np.zeros(a_base.shape)
    prior_used = np.ones(a_base.shape, dtype=bool)
    lookup = lookup or {}
    teff_at = np.broadcast_to(lookup.get("teff_k", 10 ** model["logteff"]), a_base.shape)
    logg_at = np.broadcast_to(lookup.get("logg", model["logg"]), a_base.shape)
    teff_at = np.where(np.isfinite(teff_at), teff_at, 10 ** model["logteff"])
    logg_at = np.where(np.isfinite(logg_at), logg_at, model["logg"])
    if reference is not None:
        ref = reference.lookup(teff_at, logg_at, feh if cfg.baseline.feh_step > 0 else None)
        hit = np.isfinite(ref["a_li_base"])
        a_base = np.where(hit, ref["a_li_base"], a_base)
        sigma = np.where(hit, ref["a_li_scatter"], sigma)
        source = np.where(hit, ref["baseline_source"], "prior (" + ref["baseline_source"].astype(object) + ")")
        count = np.where(hit, ref["baseline_n"], 0)
        prior_used = ~hit
    sigma = np.maximum(np.hypot(sigma, cfg.baseline.measurement_error_dex), MIN_SCATTER_DEX)
    floor = cfg.observing.ew_floor_mA
    a_limit = (spectra.a_li_for_weak_ew(teff_at, logg_at, feh, floor) if floor > 0
               else np.full(a_base.shape, np.nan))
    a_new = enriched_abundance(a_base, m_mix, mjup_to_msun(cfg.planet.mass_mjup) * deposit, composition,
                               li_survival=li_survival)
    a_compared = baseline.censored_baseline(a_base, a_limit)
    # the prior's Li-rich tail past the bump (internal production); a reference
    # population brings its own distribution
    tail = np.where(prior_used, baseline.tail_fraction(stage_i, mass), 0.0)
    z_sig = baseline.tail_aware_significance(a_new, a_compared, sigma, tail)
    return {"a_base": a_base, "sigma": sigma, "a_new": a_new, "z": z_sig, "tail": tail,
            "a_limit": a_limit, "a_compared": a_compared, "stage": stage_i,
            "teff_zams": teff_zams, "a_ms": a_ms, "dilution": dilution, "source": source,
            "count": count}


def _cumulative(rate, age):
    """Trapezoidal integral of ``rate`` (1/Myr) over ``age`` (Myr) along the last axis,
    starting at 0 (the present point)."""
    steps = 0.5 * (rate[:, 1:] + rate[:, :-1]) * np.nan_to_num(np.diff(age, axis=1))
    return np.concatenate([np.zeros((rate.shape[0], 1)), np.cumsum(np.nan_to_num(steps), axis=1)], axis=1)


def _lifetimes(grid, mass, z, eep, m_cz_max_now, m_pres, cfg, composition, reference=None,
               deposit=1.0, lookup=None):
    """Lifetime of the signature following each (mass, z) track from ``eep``, and the
    process that ends it (``lithium.lifetime``).

    Along the future track the planet's lithium is diluted into the deepest envelope
    reached since engulfment and destroyed or hidden by every process that acts there:
    burning at the base of the envelope, the main-sequence depletion the prior implies
    for the same star (the larger of the two counts, since the prior's depletion
    includes burning), thermohaline mixing above the RGB bump, and fingering mixing
    after a metal-rich accretion.  The baseline follows the star too (dredge-up,
    thermohaline depletion, the clump), so z is recomputed at every point.

    ``lookup`` (``teff_k``, ``logg``, one value per star, NaN where not given) is the
    star's own Teff and logg now: the detection limit and the reference bins at the
    present point are those of the star itself, as in its ``z_enrich``, and along the
    future track they move with the model (Teff scaled by the star's ratio to the model
    now, logg shifted by its offset), so the lifetime starts from the same z as the
    significance the ranked row reports."""
    n = mass.size
    lookup = lookup or {}
    given_teff = np.broadcast_to(np.asarray(lookup.get("teff_k", np.nan), dtype=float), (n,))
    given_logg = np.broadcast_to(np.asarray(lookup.get("logg", np.nan), dtype=float), (n,))
    life = np.full(n, np.nan)
    end = np.full(n, "", dtype=object)
    deposit = np.broadcast_to(np.asarray(deposit, dtype=float), (n,))
    gb_all = _giant_branch(grid, mass, z)
    args = (grid, mass, z, eep, m_cz_max_now, m_pres, deposit, gb_all, cfg, composition, reference,
            given_teff, given_logg)
    # the present point alone first: a star whose signature is below the threshold now
    # has lifetime 0 (below_threshold) whatever its future, so only the others are
    # followed along their tracks (column 0 is the same in both passes)
    z_now = np.full(n, np.nan)
    for start in range(0, n, LIFETIME_CHUNK * 8):
        rows = np.arange(start, min(start + LIFETIME_CHUNK * 8, n))
        life[rows], end[rows], z_now[rows] = _follow_tracks(*args, rows, present_only=True)
    live = np.flatnonzero(z_now >= cfg.thresholds.z_signature)
    for start in range(0, live.size, LIFETIME_CHUNK):
        rows = live[start:start + LIFETIME_CHUNK]
        life[rows], end[rows], _ = _follow_tracks(*args, rows, present_only=False)
    return life, end


def _follow_tracks(grid, mass, z, eep, m_cz_max_now, m_pres, deposit, gb_all, cfg, composition,
                   reference, given_teff, given_logg, rows, present_only):
    """Lifetime, ending process and present z of ``rows`` (see :func:`_lifetimes`);
    ``present_only`` evaluates the present point alone."""
    nodes = np.asarray(grid.eeps, dtype=float)
    gb0, gb1 = PHASE_EEPS["giant_branch"]
    ms1 = PHASE_EEPS["main_sequence"][1]
    planet_z = cfg.planet.bulk_metallicity if composition.kind in GAS_KINDS else 1.0
    m_planet = mjup_to_msun(cfg.planet.mass_mjup) * deposit
    sl = rows
    m, zz, e = mass[sl, None], z[sl, None], eep[sl, None]
    if present_only:
        future = np.where(e <= nodes[-1], e, np.nan)
    else:
        # fractions of the next EEP step resolve the first Myr after engulfment (one
        # main-sequence step is ~50 Myr; fingering mixing acts within a few Myr)
        soon = np.minimum(e + np.array(EARLY_EEP_STEPS)[None, :], np.floor(e) + 1.0)
        future = np.concatenate([e, soon, np.where(nodes[None, :] > e, nodes[None, :], np.nan)], axis=1)
        future = np.where(future <= nodes[-1], future, np.nan)
        future = np.sort(future, axis=1)          # NaN to the end, current point first
    ok = np.isfinite(future)
    mm = np.broadcast_to(m, future.shape)
    zb = np.broadcast_to(zz, future.shape)
    eb = np.where(ok, future, 0.0)
    cols = grid.interpolate(mm, zb, eb, columns=["age_myr", "logl", "logteff", "logg"])
    now = grid.interpolate(m[:, 0], zz[:, 0], e[:, 0], columns=["mass_msun", "core_mass_msun"])
    m_cz = np.where(ok, convective_envelope(grid, mm, zb, eb, columns=("m_cz_msun",))["m_cz_msun"], np.nan)
    # the planet's lithium stays in the deepest envelope reached since engulfment
    m_mix = np.fmax.accumulate(m_cz, axis=1)
    m_max = np.fmax(m_mix, m_cz_max_now[sl, None])
    age = np.where(ok, cols["age_myr"], np.nan)
    gb = {k: v[sl, None] for k, v in gb_all.items()}
    burn = np.where(ok, 1e6 / _surface_burning_time_yr(grid, mm, zb, eb, m_mix), 0.0)
    teff_zams = 10 ** grid.interpolate(m[:, 0], zz[:, 0], np.zeros(m.shape[0]),
                                       columns=["logteff"])["logteff"]
    prior_rate = np.where(ok & (eb < ms1),
                          1.0 / baseline.main_sequence_efolding_myr(teff_zams[:, None], age), 0.0)
    above_bump = ok & (eb >= gb["bump_eep"]) & (eb < gb1)
    thm = np.where(above_bump, np.nan_to_num(lifetime.thermohaline_rate_per_myr(
        gb["bump_age"], gb["tip_age"], cfg.baseline.thermohaline_depletion_dex)), 0.0)
    fingering = lifetime.fingering_survival(
        age - age[:, :1], m_planet[sl, None], planet_z, zz, m_cz[:, :1],
        now["mass_msun"][:, None] - now["core_mass_msun"][:, None] - m_cz[:, :1])
    losses = {lifetime.END_DILUTION: np.log(m_mix / m_mix[:, :1]),
              lifetime.END_BURNING: _cumulative(burn, age),
              lifetime.END_MS_DEPLETION: _cumulative(np.maximum(prior_rate - burn, 0.0), age),
              lifetime.END_THERMOHALINE: _cumulative(thm, age),
              lifetime.END_FINGERING: -np.log(fingering)}
    survival = np.exp(-sum(v for k, v in losses.items() if k != lifetime.END_DILUTION))
    teff_model = 10 ** cols["logteff"]
    t_now, g_now = given_teff[sl, None], given_logg[sl, None]
    along = {"teff_k": teff_model * np.where(np.isfinite(t_now), t_now / teff_model[:, :1], 1.0),
             "logg": cols["logg"] + np.where(np.isfinite(g_now), g_now - cols["logg"][:, :1], 0.0)}
    li = _lithium_at(grid, mm, zb, eb, cols, m_mix, m_max, m_pres[sl, None], gb, cfg,
                     composition, reference=reference, deposit=deposit[sl, None],
                     li_survival=survival, lookup=along)
    z_along = np.where(ok, li["z"], np.nan)
    life, crossing, ends = lifetime.signature_lifetime(age, z_along, cfg.thresholds.z_signature)
    return life, lifetime.ending_process(ends, crossing, losses), z_along[:, 0]


def signature_at(grid: TrackGrid, mass, z, eep, cfg: Config, reference=None) -> dict:
    """Enrichment signature of the configured planet at track points (1-D arrays).

    The same physics as :func:`run_batch` applies to one sample per point: envelope,
    baseline, enrichment, z, and the lifetime following the point's own track.  Used
    by the detectability map.

    Returns
    -------
    dict
        ``m_cz_msun, a_li_base, a_li_scatter, a_li_enriched, z_enrich, lifetime_myr,
        lifetime_end, age_myr, logteff, logl, logg`` (arrays of the input length).
    """
    mass, z, eep = (np.asarray(x, dtype=float).ravel() for x in (mass, z, eep))
    composition = planet_composition(cfg)
    model = grid.interpolate(mass, z, eep, columns=["logteff", "logl", "logg", "age_myr"])
    gb = _giant_branch(grid, mass, z)
    m_cz, m_cz_max, m_pres, li = _envelope_and_lithium(grid, mass, z, eep, model, gb, cfg,
                                                       composition, reference)
    ok = np.isfinite(li["z"])
    life = np.full(mass.size, np.nan)
    end = np.full(mass.size, "", dtype=object)
    if ok.any():
        life[ok], end[ok] = _lifetimes(grid, mass[ok], z[ok], eep[ok], m_cz_max[ok], m_pres[ok],
                                       cfg, composition, reference)
    return {"m_cz_msun": m_cz, "a_li_base": li["a_base"], "a_li_scatter": li["sigma"],
            "a_li_enriched": li["a_new"], "z_enrich": li["z"], "lifetime_myr": life,
            "lifetime_end": end, **model}


def run_batch(df: pd.DataFrame, cfg: Config, grid: TrackGrid | None = None,
              rng=None, reference=None, first_row: int = 0) -> pd.DataFrame:
    """The whole chain for a batch of validated rows; one output row per input row.

    The placement draws are one uniform number per star fixed by (``scoring.seed``,
    the row's place in the whole catalog, ``first_row`` + its place in the batch;
    :class:`prioritize.stars.placement.RowUniforms`), so a star's numbers do not
    depend on the batch size; ``rng`` (a ``numpy.random.Generator``) replaces them
    where given.

    ``reference`` is a :class:`~prioritize.lithium.reference.ReferenceBaseline` (see
    :func:`load_baseline_reference`); None uses the built-in prior.  Missing values
    propagate as NaN by design, so numpy's floating-point warnings are silenced here;
    every row's ``status`` and ``note`` say what could not be computed."""
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        if rng is None:
            rng = placement.RowUniforms.for_rows(cfg.scoring.seed, first_row, len(df))
        return _run_batch(df, cfg, grid, rng, reference)


def _without_rejected_values(df: pd.DataFrame, status: np.ndarray) -> pd.DataFrame:
    """The batch as the chain computes it: rows that validation already rejected
    (any status but ok: invalid_value, duplicate_id, ...) have their numeric inputs
    blanked, so that no step downstream (rotation, line widths, exposure) meets a
    value outside its domain and one bad row cannot stop the batch.  Their status and
    note say why; the output passes their inputs through unchanged."""
    rejected = status != st.OK
    if not rejected.any():
        return df
    df = df.copy()
    for c in df.columns:
        if c not in ("star_id", "status", "note") and pd.api.types.is_numeric_dtype(df[c]) \
                and not pd.api.types.is_bool_dtype(df[c]):
            df[c] = df[c].astype(float)
            df.loc[rejected, c] = np.nan
    return df


def _star_columns(df, params, route, status, note, cfg, grid, rng, reference, first=0):
    """The per-star part of the chain for rows of a batch (``first``: the first one's
    place in the batch): placement, envelope, lithium, lifetimes, odds and the
    measured-lithium columns.  Returns the output columns so far, the age samples
    (rows x samples), the main-sequence lifetimes, the model logg, and the rows'
    status, note and placement route."""
    n = len(df)
    star, mass, z, eep, placed, pnote, chi2 = _place(df, params, route, grid, cfg, rng)
    note = _append(note, pnote)
    # a metallicity far outside the tracks is not extrapolated (the map refuses it too)
    feh_in, feh_in_err = params["feh"].to_numpy(float), params["feh_err"].to_numpy(float)
    lo, hi = z_to_feh(grid.z.min()), z_to_feh(grid.z.max())
    beyond = np.fmax(lo - feh_in, feh_in - hi)
    off_grid = (route != "") & np.isfinite(beyond) & (
        beyond > np.fmax(FEH_BEYOND_GRID_DEX, 3.0 * np.nan_to_num(feh_in_err, nan=0.1)))
    if off_grid.any():
        placed = placed & ~off_grid
        keep = ~np.isin(star, np.flatnonzero(off_grid))      # all samples of those stars
        star, mass, z, eep = star[keep], mass[keep], z[keep], eep[keep]
        for said in ("[Fe/H] outside the grid range; nearest grid metallicity used", "[Fe/H] clamped to the grid range"):
            note[off_grid] = np.array([n.replace(said + "; ", "").replace("; " + said, "").replace(said, "")
                                       for n in note[off_grid]], dtype=object)
        note[off_grid] = _append(note[off_grid], np.array(
            [f"[Fe/H] = {f:+.2f} is outside the track grid ({lo:+.2f} to {hi:+.2f}): not extrapolated"
             for f in feh_in[off_grid]], dtype=object))
    unplaced = (route != "") & ~placed
    status[unplaced] = st.OUT_OF_MODEL_RANGE
    out = pd.DataFrame({"star_id": df["star_id"].astype(str).to_numpy() if "star_id" in df
                        else np.arange(first + 1, first + n + 1).astype(str)})
    composition = planet_composition(cfg)
    s = cfg.scoring.samples_per_star
    idx = np.unique(star)
    res = {}
    if star.size:
        shape = (idx.size, s)
        mass, z, eep = mass.reshape(shape), z.reshape(shape), eep.reshape(shape)
        model = grid.interpolate(mass, z, eep, columns=["logteff", "logl", "logr", "logg", "age_myr"])
        r = np.arange(idx.size)
        # where the planet dissolves: evaluated at each star's median-EEP sample (the
        # envelope profile is the costly part) and applied to all its samples
        mid = np.argmin(np.abs(eep - np.median(eep, axis=1, keepdims=True)), axis=1)
        dep_cols, deposit = _deposition(grid, mass[r, mid], z[r, mid], eep[r, mid], cfg)
        deposit = np.repeat(deposit[:, None], s, axis=1)
        gb = _giant_branch(grid, mass, z)
        lookup = {"teff_k": params["teff_k"].to_numpy(float)[idx, None],
                  "logg": _column(df, "logg")[idx, None]}
        m_cz, m_cz_max, m_pres, li = _envelope_and_lithium(grid, mass, z, eep, model, gb, cfg,
                                                           composition, reference, deposit, lookup)
        stage_i = li["stage"]
        zs = li["z"]
        z_med = np.nanmedian(zs, axis=1)
        # the representative sample: the one closest to the median z from above, so a
        # star whose median z clears the threshold is followed from a z that clears it
        above = np.where(np.isfinite(zs) & (zs >= z_med[:, None]), zs - z_med[:, None], np.inf)
        rep = np.where(np.isfinite(above).any(axis=1), np.argmin(above, axis=1),
                       np.nanargmin(np.abs(np.where(np.isfinite(zs), zs, np.inf) - z_med[:, None]), axis=1))
        own = {k: v[:, 0] for k, v in lookup.items()}
        life, end = _lifetimes(grid, mass[r, rep], z[r, rep], eep[r, rep], m_cz_max[r, rep],
                               m_pres[r, rep], cfg, composition, reference, deposit[r, rep], own)
        life_lo, life_hi = _lifetime_spread(grid, mass, z, eep, zs, m_cz_max, m_pres, cfg, composition,
                                            reference, deposit, own)
        odds = _engulfment_odds(grid, mass[r, rep], z[r, rep], eep[r, rep], life, cfg)
        env = convective_envelope(grid, mass[r, rep], z[r, rep], eep[r, rep])
        tau = _surface_burning_time_yr(grid, mass[r, rep], z[r, rep], eep[r, rep], m_cz[r, rep])
        t_ms = grid.interpolate(mass[r, rep], z[r, rep], np.full(idx.size, float(PHASE_EEPS["main_sequence"][1])),
                                columns=["age_myr"])["age_myr"]
        res = {
            "mass_msun": mass.mean(axis=1), "mass_err_msun": mass.std(axis=1),
            "age_gyr": model["age_myr"].mean(axis=1) / 1e3,
            "age_err_gyr": model["age_myr"].std(axis=1) / 1e3,
            "eep": np.median(eep, axis=1),
            "stage": evolution.stage_names(_mode(stage_i)),
            "model_teff": np.median(10 ** model["logteff"], axis=1),
            "model_logl": np.median(model["logl"], axis=1),
            "model_radius": np.median(10 ** model["logr"], axis=1),
            "model_feh": np.median(z_to_feh(z), axis=1),
            "m_cz_msun": m_cz[r, rep],
            "a_li_base": li["a_base"][r, rep], "a_li_scatter": li["sigma"][r, rep],
            "a_li_enriched": li["a_new"][r, rep],
            "z_enrich": z_med, "z_enrich_err": np.nanstd(zs, axis=1),
            "p_detect": np.mean(zs >= cfg.thresholds.z_signature, axis=1),
            "lifetime_myr": life, "lifetime_end": end,
            "lifetime_p16_myr": life_lo, "lifetime_p84_myr": life_hi,
            "teff_zams_k": li["teff_zams"][r, rep], "a_li_main_sequence": li["a_ms"][r, rep],
            "dilution_dex": li["dilution"][r, rep],
            "a_li_detection_limit": li["a_limit"][r, rep],
            "li_rich_tail_fraction": li["tail"][r, rep],
            "baseline_source": li["source"][r, rep], "baseline_n": li["count"][r, rep],
            "model_logg": model["logg"][r, rep],
            **{k: env[k] for k in ENVELOPE_OUTPUT_COLUMNS},
            "li_burning_timescale_myr": np.where(tau / 1e6 > NO_BURNING_MYR, np.inf, tau / 1e6),
            **dep_cols,
            **_other_planets(grid, mass, z, eep, model, gb, m_cz, m_cz_max, m_pres, rep, mid, cfg,
                             reference, lookup),
            **odds,
            "age_samples_myr": model["age_myr"],
            "t_ms_myr": t_ms,
        }
    for col in ("mass_msun", "mass_err_msun", "age_gyr", "age_err_gyr", "eep", "m_cz_msun",
                "a_li_base", "a_li_scatter", "a_li_enriched", "z_enrich", "z_enrich_err",
                "p_detect", "lifetime_myr", "lifetime_p16_myr", "lifetime_p84_myr", "teff_zams_k",
                "a_li_main_sequence", "dilution_dex", "li_rich_tail_fraction"):
        out[col] = _scatter(n, idx, res.get(col), float)
    for col in ("stage", "lifetime_end"):
        out[col] = _scatter(n, idx, res.get(col), object)
    out["delta_a_li"] = out["a_li_enriched"] - out["a_li_base"]
    out["m_planet_msun"] = np.where(out["z_enrich"].notna(), mjup_to_msun(cfg.planet.mass_mjup), np.nan)
    out["deposition_scenario"] = np.where(out["z_enrich"].notna(), cfg.planet.deposition, "")
    out["chi2_best"] = chi2
    _adopt(out, params, idx, res, n)
    out["note"] = ""
    out["placement_method"] = np.where(route == "", "", route)
    out["baseline_source"] = _scatter(n, idx, res.get("baseline_source"), object)
    out["baseline_n"] = _scatter(n, idx, res.get("baseline_n"), float)
    model_logg = _scatter(n, idx, res.get("model_logg"), float)
    # a given logg the placement did not use (L was given) must agree with the model
    g_in, g_err = _column(df, "logg"), _column(df, "logg_err")
    g_err = np.where(np.isfinite(g_err) & (g_err > 0), g_err, placement.DEFAULT_ERRORS["logg"])
    g_dist = np.abs(model_logg - g_in) / g_err
    g_clash = (out["placement_method"].to_numpy(object) == "Teff+L") & np.isfinite(g_dist) \
        & (g_dist > placement.CLASH_SIGMA)
    out.loc[g_clash, "note"] = _append(out.loc[g_clash, "note"].to_numpy(object), np.array(
        [f"logg = {g:.2f} given, the placement from Teff and L has {m:.2f} ({d:.1f} sigma): check "
         "the logg, the parallax and the photometry" for g, m, d in
         zip(g_in[g_clash], model_logg[g_clash], g_dist[g_clash])], dtype=object))
    out["a_li_detection_limit"] = _scatter(n, idx, res.get("a_li_detection_limit"), float)
    compared = np.fmax(out["a_li_base"].to_numpy(float),
                       np.nan_to_num(out["a_li_detection_limit"].to_numpy(float), nan=-np.inf))
    out["m_planet_min_mjup"] = planet_mass_for_abundance(
        out["a_li_base"], baseline.abundance_for_significance(
            cfg.thresholds.z_signature, compared, out["a_li_scatter"].to_numpy(float),
            np.nan_to_num(out["li_rich_tail_fraction"].to_numpy(float))),
        out["m_cz_msun"], composition) / M_JUP_MSUN
    computed = np.isfinite(out["a_li_base"].to_numpy(float)) & np.isfinite(out["m_cz_msun"].to_numpy(float))
    out.loc[~computed, "m_planet_min_mjup"] = np.nan           # not placed: nothing to say
    beyond = computed & (out["m_planet_min_mjup"].to_numpy(float) > MAX_BODY_MJUP)
    out.loc[beyond, "m_planet_min_mjup"] = np.inf
    out.loc[beyond, "note"] = _append(out.loc[beyond, "note"].to_numpy(object),
                                      f"no body of the configured kind up to {MAX_BODY_MJUP:g} M_J gives "
                                      "z >= threshold (m_planet_min_mjup = inf)")
    for col in (*ENVELOPE_OUTPUT_COLUMNS, "li_burning_timescale_myr", *DEPOSITION_COLUMNS,
                *ODDS_COLUMNS):
        out[col] = _scatter(n, idx, res.get(col), float)
    for col in [k for k in res if _is_other_planet_column(k)]:
        out[col] = _scatter(n, idx, res[col], float)
    _measured_lithium_columns(out, df, composition)
    ages = np.full((n, s), np.nan)
    if "age_samples_myr" in res:
        ages[idx] = res["age_samples_myr"]
    # values no star can have mean the inputs are wrong: a status, not a note
    period = _column(df, "prot_d")
    validate.apply_rules(validate.RESULT_RULES, {
        "veq_from_period_kms": 2.0 * np.pi * out["radius_rsun"].to_numpy(float) * R_SUN_CM / 1e5
        / (np.where(period > 0, period, np.nan) * 86400.0),
        "age_gyr": out["age_gyr"].to_numpy(float)}, status, note)
    t_ms = _scatter(n, idx, res.get("t_ms_myr"), float)
    return out, ages, t_ms, model_logg, status, note, route


def _run_batch(df, cfg, grid, rng, reference):
    grid = grid or load_grid()
    n = len(df)
    df = with_cluster_context(df.reset_index(drop=True), cfg)
    status = df["status"].to_numpy(object).copy()
    note = df["note"].fillna("").to_numpy(object).copy()
    given = df                       # what the catalog gave: passed through to the output
    df = _without_rejected_values(df, status)
    params = derive_stellar_parameters(df)
    route = _routes(df, params)
    active = status == st.OK
    missing = active & (route == "")
    status[missing] = st.MISSING_INPUTS
    why = params["deriv_note"].fillna("").to_numpy(object) if "deriv_note" in params else ""
    note[missing] = _append(_append(note[missing], "cannot place on tracks: give mass+stage, or a "
                                    "Teff/colour with parallax, distance, log L or logg"),
                            np.asarray(why, dtype=object)[missing] if len(why) else "")
    route = np.where(active & ~missing, route, "")
    df, params = _with_seismic_parameters(df, params, route, cfg)

    # the per-sample stages (placement, envelope, lithium, lifetimes) in sub-chunks of
    # STAR_CHUNK stars: every star's numbers depend on its own row only, so this bounds
    # the memory without changing a number; what is fitted per batch (the clusters'
    # rotation sequences) is fitted below on the whole batch
    size = STAR_CHUNK if isinstance(rng, placement.RowUniforms) else n
    parts = []
    for a in range(0, max(n, 1), max(1, size)):
        b = min(a + size, n)
        sub = (df, params) if (a, b) == (0, n) else \
            (df.iloc[a:b].reset_index(drop=True), params.iloc[a:b].reset_index(drop=True))
        parts.append(_star_columns(*sub, route[a:b].copy(), status[a:b].copy(), note[a:b], cfg, grid,
                                   rng if (a, b) == (0, n) else rng.subset(np.arange(a, b)),
                                   reference, first=a))
    if len(parts) == 1:
        out, ages, t_ms, model_logg, status, note, route = parts[0]
    else:
        out = pd.concat([part[0] for part in parts], ignore_index=True)
        ages, t_ms, model_logg, status, note, route = (np.concatenate([part[k] for part in parts])
                                                       for k in range(1, 7))
    del parts
    _rotation_columns(out, df, params, ages, cfg, t_ms)
    _observing_columns(out, df, model_logg, cfg, params["ebv_used"].to_numpy(float))
    out["p_engulfed"] = score.engulfed_posterior(out["p_engulfed_history"],
                                                 out["rotation_likelihood_ratio"])
    out["priority"] = score.detections_per_hour(out["p_engulfed"], out["p_detect"], out["p_measured"],
                                                out["time_on_target_s"])
    if cfg.rotation.rapid_only:
        slow = (status == st.OK) & ~out["rapid_rotator"].to_numpy(bool)
        status[slow] = st.NOT_ANOMALOUS_ROTATOR
        out.loc[slow, "note"] = _append(out.loc[slow, "note"].to_numpy(object),
                                        "left out by the rapid-rotator filter")
    out["status"] = status
    out["note"] = _append(note, out["note"].to_numpy(object))
    out["rank"] = np.nan
    extra = [c for c in given.columns if c not in out.columns and c not in ("status", "note")]
    passthrough = given[extra].rename(columns={c: c for c in extra})
    clash = [c for c in given.columns if c in out.columns and c not in ("star_id", "status", "note")]
    for c in clash:
        passthrough[f"input_{c}"] = given[c].to_numpy()
    other = [c for c in out.columns if _is_other_planet_column(c)]
    return pd.concat([out[OUTPUT_COLUMNS + other], passthrough.reset_index(drop=True)], axis=1)


def _engulfment_odds(grid, mass, z, eep, life, cfg):
    """Prior probability that the star engulfed the configured planet within the
    signature's lifetime before now (``engulfment.engulfment_probability``), from its
    own radius history along the track."""
    window = np.where(np.isfinite(life), life, 0.0)
    r_now, r_then = engulfment.radius_history(grid, mass, z, eep, window)
    current = grid.interpolate(mass, z, eep, columns=["mass_msun"])["mass_msun"]
    odds = engulfment.engulfment_probability(r_now, r_then, window, current, z_to_feh(z),
                                             cfg.planet.mass_mjup, cfg.planet.kind)
    return {k: np.asarray(getattr(odds, k), dtype=float) for k in ODDS_COLUMNS}


def _lifetime_spread(grid, mass, z, eep, zs, m_cz_max, m_pres, cfg, composition, reference, deposit,
                     lookup=None):
    """Lifetimes of the samples at the 16th and 84th percentiles of z (the spread the
    placement uncertainty gives); zero where no sample reaches the threshold."""
    n = mass.shape[0]
    lo, hi = np.zeros(n), np.zeros(n)
    some = np.nanmax(np.where(np.isfinite(zs), zs, -np.inf), axis=1) >= cfg.thresholds.z_signature
    rows = np.flatnonzero(some)
    for q, target in ((0.16, lo), (0.84, hi)):
        if rows.size == 0:
            break
        zq = np.nanquantile(zs[rows], q, axis=1)
        pick = np.nanargmin(np.abs(np.where(np.isfinite(zs[rows]), zs[rows], np.inf) - zq[:, None]), axis=1)
        target[rows], _ = _lifetimes(grid, mass[rows, pick], z[rows, pick], eep[rows, pick],
                                     m_cz_max[rows, pick], m_pres[rows, pick], cfg, composition,
                                     reference, deposit[rows, pick],
                                     {k: v[rows] for k, v in (lookup or {}).items()})
    return lo, hi


def _is_other_planet_column(name: str) -> bool:
    return name.startswith(OTHER_PLANET_PREFIXES) and name.endswith("mj")


def _other_planets(grid, mass, z, eep, model, gb, m_cz, m_cz_max, m_pres, rep, mid, cfg, reference,
                   lookup):
    """z, P(z >= threshold) and lifetime for each extra planet mass of the config (each
    with its own disruption depth)."""
    cols = {}
    r = np.arange(mass.shape[0])
    for m in cfg.planet.extra_masses_mjup:
        cfg_m = with_overrides(cfg, {"planet.mass_mjup": m})
        comp = planet_composition(cfg_m)
        _, dep = _deposition(grid, mass[r, mid], z[r, mid], eep[r, mid], cfg_m)
        dep = np.repeat(dep[:, None], mass.shape[1], axis=1)
        li = _lithium_at(grid, mass, z, eep, model, m_cz, m_cz_max, m_pres, gb, cfg_m, comp,
                         reference=reference, deposit=dep, lookup=lookup)
        life, _ = _lifetimes(grid, mass[r, rep], z[r, rep], eep[r, rep], m_cz_max[r, rep],
                             m_pres[r, rep], cfg_m, comp, reference, dep[r, rep],
                             {k: np.asarray(v, dtype=float)[:, 0] for k, v in lookup.items()})
        tag = f"{m:g}mj"
        cols[f"z_enrich_{tag}"] = np.nanmedian(li["z"], axis=1)
        cols[f"p_detect_{tag}"] = np.mean(li["z"] >= cfg.thresholds.z_signature, axis=1)
        cols[f"lifetime_myr_{tag}"] = life
    return cols


def _measured_lithium_columns(out, df, composition):
    """Where the catalog has A(Li): its excess over the baseline in sigma, and the planet
    that would explain it (an upper limit gives an upper bound on both)."""
    a_obs = _column(df, "a_li")
    err = np.nan_to_num(_column(df, "a_li_err"))
    limit = (df["a_li_is_limit"].fillna(False).astype(bool).to_numpy() if "a_li_is_limit" in df
             else np.zeros(len(df), bool))
    base, scatter = out["a_li_base"].to_numpy(float), out["a_li_scatter"].to_numpy(float)
    tail = np.nan_to_num(out["li_rich_tail_fraction"].to_numpy(float))
    out["z_observed"] = baseline.tail_aware_significance(a_obs, base, np.hypot(scatter, err), tail)
    out["z_observed_is_limit"] = np.isfinite(a_obs) & limit
    needed = planet_mass_for_abundance(base, a_obs, out["m_cz_msun"].to_numpy(float), composition)
    out["m_planet_needed_mjup"] = np.where(np.isfinite(a_obs) & np.isfinite(base), needed / M_JUP_MSUN,
                                           np.nan)


def _b_v0(df, params):
    """Dereddened B-V: the catalog's where given, else from Teff by inverting the
    Casagrande et al. (2010) dwarf relation (at [Fe/H] = 0; used only for gyrochronology)."""
    grid_bv = np.linspace(0.18, 1.29, 400)
    grid_teff = teff_from_b_v_dwarf(grid_bv, np.zeros_like(grid_bv)).value
    teff = params["teff_k"].to_numpy(float)
    from_teff = np.interp(teff, grid_teff[::-1], grid_bv[::-1], left=np.nan, right=np.nan)
    observed = _column(df, "b_v") - np.nan_to_num(_column(df, "ebv"))
    return np.where(np.isfinite(observed), observed, from_teff)


def _rotation_columns(out, df, params, age_samples, cfg, t_ms_myr=None):
    """Rotation evidence (``rotation.rotation_evidence``): observed and expected v_eq, the
    anomaly, the spin-up the configured planet would give, the planet the spin excess
    needs, and the bounded likelihood ratio of a recent engulfment.  ``t_ms_myr`` is each
    star's main-sequence lifetime on its track (it sets how much the gyrochronology ages
    lean on the age prior, ``rotation.age_prior_weight``)."""
    n = len(out)
    t_ms_myr = np.full(n, np.nan) if t_ms_myr is None else np.asarray(t_ms_myr, dtype=float)
    radius = out["radius_rsun"].to_numpy(float)
    radius = np.where(radius > 0, radius, np.nan)
    prot, prot_err = _column(df, "prot_d"), _column(df, "prot_d_err")
    prot = np.where(prot > 0, prot, np.nan)
    vsini, vsini_err = _column(df, "vsini_kms"), _column(df, "vsini_kms_err")
    vsini = np.where(vsini >= 0, vsini, np.nan)
    stage = out["stage"].to_numpy(object)
    stage_ok = np.isin(stage, st.STAGES)
    b_v0 = _b_v0(df, params)
    cluster_period = np.full(n, np.nan)
    cluster_ln = np.full(n, np.nan)
    if "cluster" in df.columns and np.isfinite(prot).sum() >= 9:
        seq = _cluster_sequences(df["cluster"].astype(str).to_numpy(), b_v0, prot, stage)
        if seq is not None:
            cluster_period, spread = seq.predict(b_v0)
            cluster_ln = spread / cluster_period
    veq = 2.0 * np.pi * radius * R_SUN_CM / 1e5 / (prot * 86400.0)
    mass = out["mass_msun"].to_numpy(float)
    # nothing rotates faster than break-up, v_crit = sqrt(G M / R) (a definition)
    v_crit = BREAKUP_KMS_SOLAR * np.sqrt(mass / radius)
    too_fast_p = np.isfinite(veq) & (veq > v_crit)
    too_fast_v = np.isfinite(vsini) & (vsini > v_crit)
    out["note"] = _append(out["note"].to_numpy(object), np.where(
        too_fast_p, [f"prot_d = {p:.3g} d gives v_eq = {v:.3g} km/s, above break-up ({c:.0f} km/s): "
                     "period not used" for p, v, c in zip(prot, veq, v_crit)], ""))
    out["note"] = _append(out["note"].to_numpy(object), np.where(
        too_fast_v, [f"vsini_kms = {v:.3g} is above break-up ({c:.0f} km/s): not used"
                     for v, c in zip(vsini, v_crit)], ""))
    prot = np.where(too_fast_p, np.nan, prot)
    veq = np.where(too_fast_p, np.nan, veq)
    vsini = np.where(too_fast_v, np.nan, vsini)
    veq_err = veq * np.hypot(np.nan_to_num(prot_err / prot), RADIUS_FRACTIONAL_ERROR)
    m_cz = np.minimum(out["m_cz_msun"].to_numpy(float), mass)   # initial vs current mass
    usable = stage_ok & np.isfinite(radius) & np.isfinite(mass)
    spin_up = np.full(n, np.nan)
    spin_up[usable] = rotation.engulfment_spin_up_kms(cfg.planet.mass_mjup, mass[usable], radius[usable],
                                                      m_cz[usable], stage[usable])
    ev = rotation.rotation_evidence(
        np.where(stage_ok, stage, ""), out["teff_k"].to_numpy(float), mass, radius, b_v0, age_samples,
        veq, veq_err, vsini, vsini_err, spin_up, out["lifetime_myr"].to_numpy(float),
        cluster_period_d=cluster_period, cluster_ln_scatter=cluster_ln,
        gyro_relation=cfg.rotation.gyro_relation,
        other_cause_fraction=cfg.rotation.other_cause_fraction,
        age_prior_weight=rotation.age_prior_weight(t_ms_myr))
    exceeds, vnote = rotation.vsini_consistency(vsini, vsini_err, radius, RADIUS_FRACTIONAL_ERROR * radius,
                                                prot, prot_err)
    out["veq_kms"] = veq
    out["veq_expected_kms"] = np.where(usable, ev.veq_expected_kms, np.nan)
    out["veq_expected_spread_kms"] = np.where(usable, ev.veq_expected_spread_kms, np.nan)
    out["rot_expect_source"] = np.where(usable, ev.rot_expect_source, "")
    anomaly = np.where(usable, ev.rot_anomaly_sigma, np.nan)
    out["rot_anomaly_sigma"] = anomaly
    out["rapid_rotator"] = np.nan_to_num(anomaly, nan=-np.inf) >= cfg.rotation.rapid_anomaly_sigma
    observed = np.where(np.isfinite(veq), veq, vsini)
    excess = np.clip(observed - out["veq_expected_kms"].to_numpy(float), 0.0, None)
    # the spin-up is linear in the planet mass: the planet for the excess is its inverse
    out["m_planet_spin_mjup"] = np.where(spin_up > 0, excess * cfg.planet.mass_mjup / spin_up, np.nan)
    out["spin_li_consistency"] = rotation.spin_lithium_consistency(out["m_planet_spin_mjup"].to_numpy(float),
                                                                   out["m_planet_min_mjup"].to_numpy(float))
    out["spin_up_kms"] = spin_up
    out["spin_visible_fraction"] = np.where(usable, ev.spin_visible_fraction, np.nan)
    out["rotation_likelihood_ratio"] = np.where(usable & np.isfinite(ev.rotation_likelihood_ratio),
                                                ev.rotation_likelihood_ratio, 1.0)
    out["note"] = _append(out.get("note", pd.Series([""] * n)).fillna("").to_numpy(object),
                          np.where(exceeds, vnote, ""))


def _cluster_sequences(cluster, b_v0, prot, stage):
    """One robust rotation sequence per cluster from its dwarfs with periods (None if
    no cluster has enough); returned as a per-row lookup object."""
    fits = {}
    dwarf = np.isin(stage, rotation.GYRO_STAGES)
    for name in np.unique(cluster):
        sel = (cluster == name) & dwarf & np.isfinite(prot) & np.isfinite(b_v0)
        if sel.sum() >= 9:
            try:
                fits[name] = rotation.fit_cluster_sequence(b_v0[sel], prot[sel])
            except PrioritizeError:
                continue
    if not fits:
        return None
    return _PerClusterSequence(cluster, fits)


class _PerClusterSequence:
    """Adapter: predict with each row's own cluster sequence (NaN for rows without one)."""

    def __init__(self, cluster, fits):
        self.cluster, self.fits = cluster, fits

    def predict(self, color):
        color = np.broadcast_to(np.asarray(color, dtype=float), self.cluster.shape)
        period = np.full(self.cluster.shape, np.nan)
        spread = np.full(self.cluster.shape, np.nan)
        for name, fit in self.fits.items():
            sel = self.cluster == name
            period[sel], spread[sel] = fit.predict(color[sel])
        return period, spread


def _observing_columns(out, df, model_logg, cfg, ebv):
    """Li 6708 line strength, S/N needed, exposure and the lines to take (:mod:`prioritize.spectra`,
    :mod:`prioritize.exposure`)."""
    inst = load_instrument(cfg.observing.instrument)
    teff = out["teff_k"].to_numpy(float)
    logg = np.where(np.isfinite(_column(df, "logg")), _column(df, "logg"), model_logg)
    feh = out["feh"].to_numpy(float)
    ew_base = spectra.ew_li6708_mA(teff, logg, feh, out["a_li_base"].to_numpy(float))
    ew_new = spectra.ew_li6708_mA(teff, logg, feh, out["a_li_enriched"].to_numpy(float))
    vsini = _column(df, "vsini_kms")
    broadening = np.where(np.isfinite(vsini), vsini,
                          np.pi / 4 * np.nan_to_num(out["veq_expected_kms"].to_numpy(float)))
    fwhm = spectra.line_fwhm_angstrom(inst.resolving_power, teff, broadening)
    # the line a non-enriched star would show: the baseline, or the detection limit
    # where the baseline is a set of upper limits (the same censored comparison as z)
    ew_compared = np.fmax(ew_base, np.nan_to_num(cfg.observing.ew_floor_mA))
    delta = ew_new - ew_compared
    measurable = np.isfinite(delta) & (delta >= max(cfg.observing.ew_floor_mA, 0.0)) & (delta > 0)
    snr = spectra.snr_needed(np.where(delta > 0, delta, np.nan), fwhm, inst.pixel_width_angstrom(),
                             k_sigma=cfg.observing.k_sigma)
    snr = np.fmax(snr, cfg.observing.min_snr_per_pixel)
    bp_rp = _column(df, "bp_rp")
    r_c, r_c_source = exposure.r_c_from_catalog(
        r_mag=_column(df, "r_mag"), g_mag=_column(df, "g_mag"),
        bp_rp=np.where(np.isfinite(bp_rp), bp_rp, _column(df, "bp_mag") - _column(df, "rp_mag")),
        v_mag=_column(df, "v_mag"), b_v=_column(df, "b_v"), teff=teff, logg=logg, feh=feh,
        ebv=ebv, giant=logg < 3.5)
    out["r_c_source"] = r_c_source
    plan = exposure.plan_exposure(inst, snr, r_c, a_v=0.0, airmass=cfg.observing.airmass,
                                  extinction_coeff=cfg.observing.extinction_coeff)
    out["ew_base_mA"], out["ew_enriched_mA"], out["delta_ew_mA"] = ew_base, ew_new, delta
    out["line_fwhm_A"], out["snr_needed"], out["r_c_mag"] = fwhm, snr, r_c
    out["exposure_s"] = plan.exposure_s
    out["exposure_flag"] = np.where(np.isfinite(plan.exposure_s), plan.flag, "")
    out["snr_at_exposure"] = plan.snr_reached
    out["overhead_s"] = np.where(np.isfinite(plan.exposure_s), plan.overhead_s, np.nan)
    out["time_on_target_s"] = plan.total_s
    out["delta_ew_measurable"] = measurable
    cool = np.isfinite(teff) & (teff < cfg.observing.cool_limit_k)
    p_measured = np.where(measurable, np.clip((plan.snr_reached / snr) ** 2, 0.0, 1.0), 0.0)
    out["p_measured"] = np.where(cool, cfg.observing.cool_measured_factor, 1.0) * p_measured
    out["instrument"] = inst.name
    computed = np.isfinite(teff) & np.isfinite(out["a_li_enriched"].to_numpy(float))
    lines, missing = spectra.lines_to_measure(
        np.where(computed, teff, 5000.0), np.where(np.isfinite(logg), logg, 4.0),
        np.where(computed, out["a_li_enriched"], 1.0),
        np.where(np.isfinite(plan.snr_reached) & (plan.snr_reached > 0), plan.snr_reached, 1.0), inst,
        feh=np.nan_to_num(feh), vsini_kms=np.nan_to_num(broadening), k_sigma=cfg.observing.k_sigma)
    out["lines_to_measure"] = np.where(computed, ["; ".join(x) for x in lines], "")
    out["coverage_missing"] = np.where(computed, ["; ".join(x) for x in missing], "")
    small = computed & np.isfinite(delta) & ~measurable
    out["note"] = _append(out["note"].to_numpy(object),
                          np.where(small, f"EW(6708) rise below the {cfg.observing.ew_floor_mA:g} mA systematic "
                                          "floor (continuum placement, Fe I 6707.4 blend): not counted as "
                                          "measurable", ""))
    out["note"] = _append(out["note"].to_numpy(object),
                          np.where(computed & cool, f"Teff below {cfg.observing.cool_limit_k:.0f} K: TiO "
                                   "blankets 6708 A and the line-strength fit is extrapolated; P(measured) "
                                   f"x {cfg.observing.cool_measured_factor:g}", ""))
    no_mag = computed & ~np.isfinite(r_c)
    out["note"] = _append(out["note"].to_numpy(object),
                          np.where(no_mag, "no magnitude for an exposure estimate (give g_mag or v_mag, "
                                           "with its colour or a Teff the colour-Teff relations cover): "
                                           "not ranked by detections per hour", ""))
    from_teff = computed & (np.char.find(r_c_source.astype(str), "from Teff") >= 0)
    out["note"] = _append(out["note"].to_numpy(object),
                          np.where(from_teff, np.char.add("R_C for the exposure from ",
                                                          r_c_source.astype(str)).astype(object), ""))


def _mode(stage_index):
    """Most frequent stage index per row (ties to the earlier stage)."""
    counts = np.stack([(stage_index == k).sum(axis=1) for k in range(-1, 6)], axis=1)
    return counts.argmax(axis=1) - 1


def _scatter(n, idx, values, dtype):
    out = np.full(n, np.nan if dtype is float else "", dtype=dtype)
    if values is not None:
        out[idx] = values
    return out


def _append(a, b):
    a = np.asarray(a, dtype=object)
    b = np.asarray(b, dtype=object)
    both = (a != "") & (b != "")
    return np.where(both, a + "; " + b, np.where(a != "", a, b))


def _adopt(out, params, idx, res, n):
    """Teff, L, R and [Fe/H]: the star's own (catalog or photometry) where known,
    else the placed model's, with the source recorded."""
    for col, model_key, source_col in (("teff_k", "model_teff", "teff_source"),
                                       ("logl_lsun", "model_logl", "logl_source"),
                                       ("radius_rsun", "model_radius", "radius_source"),
                                       ("feh", "model_feh", "feh_source")):
        own = params[col].to_numpy(float)
        model = _scatter(n, idx, res.get(model_key), float)
        src = params[source_col].fillna("").to_numpy(object) if source_col in params else \
            np.full(n, "", dtype=object)
        use_model = ~np.isfinite(own) & np.isfinite(model)
        out[col] = np.where(use_model, model, own)
        if source_col != "radius_source":
            out[source_col] = np.where(use_model, "track model", src)
