"""Stellar track grid and its interpolation (prioritize.stars.tracks, prioritize.data.build_tracks).

Outside references:

- Values computed with cosmic-popsynth's single-star evolution
  (the Hurley, Pols & Tout 2000 fits) at cosmic's default ``zsun = 0.014`` and
  Z = 0.014: the Sun at 4.57 Gyr has L = 0.956 L_sun, R = 0.985 R_sun,
  Teff = 5777 K; t_MS = 11.0 Gyr (1 M_sun), 3.37 / 2.25 / 1.16 Gyr (1.4 / 1.6 /
  2.0 M_sun).  cosmic multiplies the Z it is given by 0.02/zsun before it reaches the
  fits (checked below), so those runs are our Z = 0.02 runs (zsun = 0.02).
- Fresh cosmic-popsynth 4.3.3 runs at off-grid masses and metallicity, resampled by
  the builder's own function, against the shipped grid interpolated there.  Measured
  when the grid was built (masses 1.025 / 1.3125 / 2.225 / 3.125 M_sun, Z = 0.0155):
  worst 1.2% (R, 1.025 M_sun, main sequence), ages within 1.7%.  Over the whole grid
  (the midpoint of every mass and Z interval, 584,640 points) and for points younger
  than the Universe, the 95th / 99th percentiles are 0.3 / 0.9% (main sequence),
  0.4 / 0.6% (subgiant), 0.8 / 1.9% (giant branch), 0.9 / 3.5% (core-He burning).
  The worst places: the main-sequence hook onset (4.9%, 1.26 M_sun, Z = 0.0045); the
  giant-branch tip next to M_HeF (10%, 1.99 M_sun); the horizontal branch of
  low-mass metal-poor stars (18%, 0.875 M_sun, Z = 0.0032); EEPs 480-489 (the
  descent from the tip after non-degenerate He ignition, which cosmic resolves with
  a few steps, and which changes nature at M_HeF: 5% at the 95th percentile, 160%
  next to M_HeF); and the giant branch and core-He burning of metal-rich stars of
  0.7-0.95 M_sun, older than the Universe (up to 67%).
"""

from __future__ import annotations

import json
from importlib import resources

import numpy as np
import pandas as pd
import pytest
from typer.testing import CliRunner

from prioritize.data import build_tracks
from prioritize.errors import CatalogError, PrioritizeError
from prioritize.stars.tracks import (DATA_COLUMNS, ENVELOPE_COLUMNS, ENVELOPE_OUTPUTS, N_EEPS,
                                     OUTSIDE_PHASES, PHASE_EEPS, PROVENANCE_METADATA_KEY, TrackGrid,
                                     convective_envelope, feh_to_z, grid_from_table, load_grid,
                                     stage_of_eep, z_to_feh)

SUN_AGE_MYR = 4570.0                         # the solar age used for the cosmic-popsynth check
SUN_L_LSUN, SUN_R_RSUN, SUN_TEFF_COSMIC_K = 0.956, 0.985, 5777.0   # computed with cosmic-popsynth
SUN_REL_TOL = 0.001                          # the computed values carry 3-4 significant digits
SUN_TEFF_TOL_K = 1.0
COSMIC_TEFF_SUN_K = 1000.0 * 1130.0 ** 0.25  # cosmic's Teff = 1000 (1130 L/R^2)^(1/4) K (its output, checked here)
TEFF_SUN_IAU_K = 5772.0                      # IAU 2015 B3, the convention of the grid's logteff
T_MS_GYR = {1.0: 11.0, 1.4: 3.37, 1.6: 2.25, 2.0: 1.16}   # cosmic-popsynth (cosmic Z=0.014 = our Z=0.02)
T_MS_REL_TOL = 0.005                         # the values above carry 3 significant digits
FEH_OF_Z_003 = 0.18                          # Z = 0.03 is [Fe/H] ~ +0.18 with Z_sun = 0.02
FEH_TOL = 0.01
OFF_GRID_MASSES = (1.025, 1.3125, 2.225, 3.125)
OFF_GRID_Z = 0.0155
INTERP_REL_TOL = 0.02                        # L, R, Teff at matched EEPs (required accuracy; measured 1.2%)
AGE_REL_TOL = 0.03                           # ages at matched EEPs (measured 1.7%)
STORAGE_REL_TOL = 2.0 ** -build_tracks.ENVELOPE_SIGNIFICANT_BITS  # rounding of the stored floats (the coarsest)
NODE_REL_TOL = 1e-12                         # grid nodes: exact up to log/exp of the age
HUBBLE_TIME_MYR = 13_800.0                   # Planck 2018 age of the Universe, from memory
DESCENT = slice(PHASE_EEPS["core_he_burning"][0], PHASE_EEPS["core_he_burning"][0]
                + build_tracks.CHEB_DESCENT_EEPS)


@pytest.fixture(scope="module")
def grid():
    return load_grid()


@pytest.fixture(scope="module")
def fresh_tracks():
    """Off-grid tracks evolved now and resampled with the builder's own function."""
    table, missing = build_tracks.tracks_table(OFF_GRID_MASSES, [OFF_GRID_Z])
    assert missing == []
    return table


def _relative_error(log_a, log_b):
    return np.abs(10.0 ** (np.asarray(log_a) - np.asarray(log_b)) - 1.0)


# --- published and computed reference values -------------------------------------------

def test_cosmic_scales_z_by_its_zsun():
    """cosmic at (Z = 0.014, zsun = 0.014) evolves exactly as at (Z = 0.02, zsun = 0.02).

    This is why the cosmic-popsynth values above, computed at cosmic's defaults, are
    checked below against our Z = 0.02 (cosmic rescales Z by its ``zsun`` option).
    """
    options = build_tracks.default_bse_options()
    t_ms = []
    for z, zsun in ((0.014, 0.014), (0.02, 0.02)):
        bcm = build_tracks.evolve_single_stars([1.4], z, dict(options, zsun=zsun))
        t_ms.append(bcm["tphys"][bcm["kstar_1"] >= 2].iloc[0])
    assert t_ms[0] == pytest.approx(t_ms[1], rel=1e-12)
    assert t_ms[1] / 1e3 == pytest.approx(T_MS_GYR[1.4], rel=T_MS_REL_TOL)


def test_sun_at_solar_age(grid):
    """Sun at 4.57 Gyr, Z = 0.02 (cosmic-popsynth: L = 0.956, R = 0.985, Teff = 5777 K).

    The grid's Teff follows from L and R with the IAU 5772 K; cosmic's 5777 K uses
    its own solar constant, 1000 * 1130**0.25 = 5797.9 K, so the grid gives
    5777 * 5772 / 5797.9 = 5751 K for the same L and R.
    """
    eep = grid.eep_at_age(1.0, 0.02, SUN_AGE_MYR)
    sun = grid.interpolate(1.0, 0.02, eep)
    assert sun["age_myr"] == pytest.approx(SUN_AGE_MYR, rel=1e-9)
    assert 10 ** sun["logl"] == pytest.approx(SUN_L_LSUN, rel=SUN_REL_TOL)
    assert 10 ** sun["logr"] == pytest.approx(SUN_R_RSUN, rel=SUN_REL_TOL)
    teff_cosmic = 10 ** sun["logteff"] * COSMIC_TEFF_SUN_K / TEFF_SUN_IAU_K
    assert teff_cosmic == pytest.approx(SUN_TEFF_COSMIC_K, abs=SUN_TEFF_TOL_K)
    assert stage_of_eep(eep) == "main_sequence"
    assert sun["kstar"] == 1


def test_cosmic_teff_convention():
    """cosmic's teff_1 is 1000 (1130 L/R^2)^(1/4) K, the constant used above."""
    bcm = build_tracks.evolve_single_stars([1.0], 0.02)
    formula = COSMIC_TEFF_SUN_K * (bcm["lum_1"] / bcm["rad_1"] ** 2) ** 0.25
    alive = bcm["kstar_1"] < 10
    np.testing.assert_allclose(bcm["teff_1"][alive], formula[alive], rtol=1e-12)


@pytest.mark.parametrize("mass", sorted(T_MS_GYR))
def test_main_sequence_lifetime(grid, mass):
    """t_MS (age at the first subgiant EEP) against the cosmic-popsynth values; the masses are
    grid nodes, so this checks the build, not the interpolation."""
    start = PHASE_EEPS["subgiant"][0]
    t_ms = grid.interpolate(mass, 0.02, start, columns=["age_myr"])["age_myr"] / 1e3
    assert t_ms == pytest.approx(T_MS_GYR[mass], rel=T_MS_REL_TOL)


def test_feh_z_conversions():
    """Z = 0.02 x 10^[Fe/H] (Hurley et al. 2000 scale)."""
    assert feh_to_z(0.0) == pytest.approx(0.02)
    assert z_to_feh(0.03) == pytest.approx(FEH_OF_Z_003, abs=FEH_TOL)
    feh = np.linspace(-1.0, 0.3, 7)
    np.testing.assert_allclose(z_to_feh(feh_to_z(feh)), feh, atol=1e-12)
    assert np.isnan(z_to_feh(np.nan))
    with pytest.raises(PrioritizeError, match="positive"):
        z_to_feh([0.02, 0.0])


# --- interpolation against fresh cosmic runs ---------------------------------------------

@pytest.mark.parametrize("mass", OFF_GRID_MASSES)
def test_interpolation_matches_fresh_tracks(grid, fresh_tracks, mass):
    """Off-grid mass and Z: interpolated L, R, Teff and age at every EEP against a
    fresh cosmic run resampled by the builder (tolerances and measured worst values
    in the module docstring)."""
    assert grid.in_range(mass, OFF_GRID_Z)
    assert mass not in grid.masses and OFF_GRID_Z not in grid.z
    fresh = fresh_tracks[fresh_tracks["initial_mass_msun"] == mass]
    got = grid.track(mass, OFF_GRID_Z)
    for column in ("logl", "logr", "logteff"):
        error = _relative_error(got[column], fresh[column])
        assert np.all(np.isfinite(error))
        assert error.max() <= INTERP_REL_TOL, column
    age = fresh["age_myr"].to_numpy()
    np.testing.assert_allclose(got["age_myr"][1:], age[1:], rtol=AGE_REL_TOL)
    np.testing.assert_array_equal(got["kstar"], fresh["kstar"])


def test_log_z_interpolation_between_nodes(grid):
    """Halfway in log Z between two nodes, a column of the grid is the mean of the nodes."""
    i = list(grid.z).index(0.014)
    z_mid = np.sqrt(grid.z[i] * grid.z[i + 1])
    got = grid.interpolate(1.5, z_mid, grid.eeps, columns=["logl"])["logl"]
    m = list(grid.masses).index(1.5)
    expected = 0.5 * (grid.data["logl"][i, m] + grid.data["logl"][i + 1, m])
    np.testing.assert_allclose(got, expected, rtol=1e-6)


# --- the shipped grid ------------------------------------------------------------------

def test_grid_nodes_are_exact(grid):
    rng = np.random.default_rng(7)
    iz = rng.integers(0, grid.z.size, 400)
    im = rng.integers(0, grid.masses.size, 400)
    ie = rng.integers(0, N_EEPS, 400)
    got = grid.interpolate(grid.masses[im], grid.z[iz], grid.eeps[ie])
    for column in DATA_COLUMNS:
        stored = grid.data[column][iz, im, ie].astype(float)
        if column == "kstar":
            stored = np.where(stored < 0, np.nan, stored)
        np.testing.assert_allclose(got[column], stored, rtol=NODE_REL_TOL, equal_nan=True,
                                   err_msg=column)


def test_outside_the_grid_is_nan(grid):
    mass = [grid.masses[0] - 0.01, grid.masses[-1] + 0.01, 1.0, 1.0, 1.0, 1.0, np.nan, 1.0]
    z = [0.02, 0.02, grid.z[0] * 0.99, grid.z[-1] * 1.01, 0.02, 0.02, 0.02, np.nan]
    eep = [10.0, 10.0, 10.0, 10.0, -0.5, N_EEPS - 0.5, 10.0, 10.0]
    got = grid.interpolate(mass, z, eep)
    for column in DATA_COLUMNS:
        assert np.all(np.isnan(got[column])), column
    assert not grid.in_range(mass, z)[:4].any()
    assert np.all(np.isnan(grid.eep_at_age(mass[:4], z[:4], 100.0)))
    inside = grid.interpolate(1.0, 0.02, 10.0)
    assert all(np.isfinite(v) for v in inside.values())


def test_interpolation_broadcasts_and_keeps_shape(grid):
    mass = np.linspace(1.0, 2.0, 3)[:, None]
    eep = np.array([0.0, 150.5, 300.0, 500.0])
    got = grid.interpolate(mass, 0.014, eep, columns=["logl", "kstar"])
    assert got["logl"].shape == (3, 4)
    np.testing.assert_array_equal(got["kstar"][0], [1, 1, 3, 4])
    with pytest.raises(PrioritizeError, match="unknown column"):
        grid.interpolate(1.0, 0.02, 0.0, columns=["luminosity"])


def test_eep_at_age_inverts_the_age_interpolation(grid):
    rng = np.random.default_rng(3)
    n = 2000
    mass = rng.uniform(0.9, 3.4, n)
    z = np.exp(rng.uniform(np.log(0.004), np.log(0.028), n))
    eep = rng.uniform(0.0, PHASE_EEPS["giant_branch"][1] - 1, n)
    age = grid.interpolate(mass, z, eep, columns=["age_myr"])["age_myr"]
    back = grid.eep_at_age(mass, z, age)
    again = grid.interpolate(mass, z, back, columns=["age_myr"])["age_myr"]
    np.testing.assert_allclose(again, age, rtol=1e-9)
    last = grid.interpolate(mass, z, N_EEPS - 1, columns=["age_myr"])["age_myr"]
    assert np.all(np.isnan(grid.eep_at_age(mass, z, -1.0)))
    assert np.all(np.isnan(grid.eep_at_age(mass, z, last * 1.001)))
    np.testing.assert_allclose(grid.eep_at_age(mass, z, 0.0), 0.0)


def test_shipped_tracks_are_complete_and_monotonic(grid):
    """Every track has a main sequence, Hertzsprung gap and giant branch; age never
    decreases and grows within each phase; L grows along the giant branch; only the
    tracks listed in the provenance lack core-He burning, and those stars are older
    than the Universe before they even leave the main sequence."""
    age = grid.data["age_myr"]
    kstar = grid.data["kstar"]
    core_he = slice(*PHASE_EEPS["core_he_burning"])
    before_he = slice(0, PHASE_EEPS["core_he_burning"][0])
    assert np.all(np.isfinite(age[:, :, before_he]))
    assert np.all(np.isin(kstar[:, :, slice(*PHASE_EEPS["main_sequence"])], (0, 1)))
    assert np.all(kstar[:, :, slice(*PHASE_EEPS["subgiant"])] == 2)
    assert np.all(kstar[:, :, slice(*PHASE_EEPS["giant_branch"])] == 3)
    with np.errstate(invalid="ignore"):
        step = np.diff(np.where(np.isfinite(age), age, np.inf), axis=2)
    assert np.all(np.nan_to_num(step, nan=0.0, posinf=0.0) >= 0)
    for name, (start, stop) in PHASE_EEPS.items():
        inner = step[:, :, start:stop - 1]
        if name == "core_he_burning":
            inner = step[:, :, DESCENT.stop:stop - 1]
        assert np.all((inner > 0) | ~np.isfinite(inner)), name
    assert np.all(np.diff(grid.data["logl"][:, :, slice(*PHASE_EEPS["giant_branch"])], axis=2) > 0)
    no_he = ~np.all(kstar[:, :, core_he] == 4, axis=2)
    assert np.all(np.isnan(age[:, :, core_he][no_he]))
    listed = {(t["z"], t["initial_mass_msun"]) for t in grid.provenance["tracks_without_core_he_burning"]}
    found = {(grid.z[i], grid.masses[j]) for i, j in zip(*np.nonzero(no_he))}
    assert found == listed
    t_ms = age[:, :, PHASE_EEPS["subgiant"][0]]
    assert np.all(t_ms[no_he] > HUBBLE_TIME_MYR)
    iz, im = (v[0] for v in np.nonzero(no_he))
    tip = PHASE_EEPS["giant_branch"][1] - 1
    at_tip = grid.interpolate(grid.masses[im], grid.z[iz], [tip, tip + 0.5], columns=["logl"])
    assert np.isfinite(at_tip["logl"][0]) and np.isnan(at_tip["logl"][1])


def test_provenance_matches_the_grid(grid):
    sidecar = json.loads(resources.files("prioritize.data").joinpath("tracks_provenance.json").read_text())
    assert sidecar == grid.provenance
    assert sidecar["initial_masses_msun"] == list(grid.masses)
    assert sidecar["z"] == list(grid.z)
    assert sidecar["phase_eeps"] == {k: list(v) for k, v in PHASE_EEPS.items()}
    assert sidecar["cosmic_version"] == "4.3.3"
    assert sidecar["zsun"] == 0.02 and sidecar["dtp_myr"] == 0.0
    assert sidecar["bse_options"] == build_tracks.default_bse_options()
    assert sidecar["initial_binaries"] == {"m2": 0, "porb": -1, "ecc": -1, "kstar1": 1,
                                           "kstar2": 15, "tphysf_myr": build_tracks.TPHYSF_MYR}
    assert list(grid.masses) == list(build_tracks.DEFAULT_MASSES)
    assert list(grid.z) == list(build_tracks.DEFAULT_Z)


def test_stage_of_eep():
    eep = [0, 199.9, 200, 279.5, 280, 479, 480, 579, 579.5, -1, np.nan]
    expected = ["main_sequence", "main_sequence", "subgiant", "subgiant", "giant_branch",
                "giant_branch", "core_he_burning", "core_he_burning", OUTSIDE_PHASES,
                OUTSIDE_PHASES, OUTSIDE_PHASES]
    assert list(stage_of_eep(eep)) == expected


def test_convective_envelope_access_point(grid):
    """The access point returns our envelope columns, interpolated like every other column."""
    env = convective_envelope(grid, [1.0, 1.0], 0.02, [0.0, 350.0])
    cols = grid.interpolate([1.0, 1.0], 0.02, [0.0, 350.0], columns=ENVELOPE_OUTPUTS)
    assert set(env) == set(ENVELOPE_OUTPUTS)
    for name in ENVELOPE_OUTPUTS:
        np.testing.assert_allclose(env[name], cols[name], err_msg=name)
    radius = 10 ** grid.interpolate([1.0, 1.0], 0.02, [0.0, 350.0], columns=["logr"])["logr"]
    assert np.all((env["r_bcz_rsun"] > 0) & (env["r_bcz_rsun"] < radius))
    assert env["m_cz_msun"][1] > 10 * env["m_cz_msun"][0]     # deep envelope on the giant branch
    assert np.all(np.isnan(convective_envelope(grid, 5.0, 0.02, 10.0)["t_bcz_k"]))


# --- the builder end to end and the file format ----------------------------------------------

def test_tiny_build_end_to_end(tmp_path, grid):
    """Two masses at one Z through the builder's entry function: the files, their
    provenance, and the same tracks and envelopes as the shipped grid (deterministic
    build: seeded cosmic runs, the same envelope integration and strides)."""
    output = tmp_path / "tiny_grid.parquet"
    provenance = build_tracks.build(output, masses=[2.0, 1.0], z=[0.02], command="test", workers=1)
    assert output.exists() and (tmp_path / "tiny_provenance.json").exists()
    assert json.loads((tmp_path / "tiny_provenance.json").read_text()) == provenance
    assert provenance["initial_masses_msun"] == [1.0, 2.0] and provenance["command"] == "test"
    assert provenance["run_time_s"] >= 0 and provenance["tracks_without_core_he_burning"] == []
    assert provenance["envelope"]["alpha_solar"] == grid.provenance["envelope"]["alpha_solar"]
    tiny = load_grid(output)
    assert tiny.provenance == provenance
    iz = list(grid.z).index(0.02)
    for j, mass in enumerate((1.0, 2.0)):
        im = list(grid.masses).index(mass)
        for column in DATA_COLUMNS + tuple(ENVELOPE_COLUMNS):
            np.testing.assert_allclose(tiny.data[column][0, j], grid.data[column][iz, im],
                                       rtol=STORAGE_REL_TOL, err_msg=column)
        for name in tiny.profiles:
            np.testing.assert_array_equal(tiny.profiles[name][0, j], grid.profiles[name][iz, im])
    assert np.all(np.isfinite(tiny.interpolate(1.5, 0.02, grid.eeps, columns=["logl"])["logl"]))
    assert np.all(np.isnan(tiny.interpolate(1.5, 0.021, 10.0, columns=["logl"])["logl"]))


def test_truncated_track_is_an_error_naming_mass_and_z():
    with pytest.raises(PrioritizeError, match=r"M = 1\.000 M_sun, Z = 0\.0200 is truncated"):
        build_tracks.tracks_table([1.0], [0.02], tphysf_myr=11_500.0)


def test_builder_command_line_rejects_bad_values(tmp_path):
    result = CliRunner().invoke(build_tracks.app, ["--output", str(tmp_path / "x.parquet"),
                                                   "--masses", "1.0:abc"])
    assert result.exit_code != 0
    assert "start:stop:step" in result.output
    result = CliRunner().invoke(build_tracks.app, ["--output", str(tmp_path / "x.parquet"),
                                                   "--masses", "1.0", "--z", "0.05"])
    assert result.exit_code == 1
    assert "where the Hurley et al. (2000) fits hold" in result.output
    assert not (tmp_path / "x.parquet").exists()


def test_load_grid_reports_missing_columns(tmp_path, grid):
    table = pd.DataFrame({"initial_mass_msun": [1.0], "z": [0.02], "eep": [0], "logl": [0.0]})
    path = tmp_path / "mine.parquet"
    table.to_parquet(path)
    with pytest.raises(CatalogError, match="missing .*'logg'") as info:
        load_grid(path)
    assert str(path) in str(info.value)
    bad = tmp_path / "not_parquet.parquet"
    bad.write_text("initial_mass_msun,z\n")
    with pytest.raises(CatalogError, match="Parquet"):
        load_grid(bad)


def test_user_table_round_trip(grid):
    """A user grid in the documented long format gives the same interpolation."""
    iz = slice(9, 11)
    im = slice(10, 13)
    rows = []
    for i, z in enumerate(grid.z[iz]):
        for j, mass in enumerate(grid.masses[im]):
            frame = pd.DataFrame({c: grid.data[c][iz][i, im][j] for c in DATA_COLUMNS})
            frame.insert(0, "eep", grid.eeps)
            frame.insert(0, "z", z)
            frame.insert(0, "initial_mass_msun", mass)
            rows.append(frame)
    mine = grid_from_table(pd.concat(rows).sample(frac=1.0, random_state=1), source="mine")
    assert isinstance(mine, TrackGrid)
    mass = np.mean(grid.masses[im])
    z = np.sqrt(grid.z[iz][0] * grid.z[iz][1])
    np.testing.assert_allclose(mine.track(mass, z)["logl"], grid.track(mass, z)["logl"])
    with pytest.raises(CatalogError, match="EEPs 0..579"):
        grid_from_table(pd.concat(rows).iloc[:-1], source="mine")


def test_parquet_metadata_carries_the_provenance():
    import pyarrow.parquet as pq

    path = resources.files("prioritize.data").joinpath("tracks_grid.parquet")
    meta = pq.read_schema(path).metadata
    assert json.loads(meta[PROVENANCE_METADATA_KEY])["generator"] == "prioritize.data.build_tracks"
