"""Placing stars on tracks: inject stars drawn from the grid, recover their masses.

Inject-and-recover is the acceptance check for the posterior: with honest error
bars, the true mass must lie within the reported 1-sigma spread in >= 60% of cases
(a Gaussian gives 68%) and within 2 sigma in >= 95%.
"""

import numpy as np
import pytest

from prioritize.stars import evolution, placement
from prioritize.stars.tracks import PHASE_EEPS, feh_to_z, load_grid, z_to_feh

N_STARS = 600
SAMPLES = 256
ONE_SIGMA_MIN = 0.60    # acceptance level (a Gaussian gives 0.683)
TWO_SIGMA_MIN = 0.95    # acceptance level (a Gaussian gives 0.954)


@pytest.fixture(scope="module")
def grid():
    return load_grid()


def _draw_population(grid, rng, n):
    """Stars drawn from the prior the posterior assumes: Salpeter masses over the grid,
    ages uniform up to 13.8 Gyr (constant star formation), [Fe/H] uniform over the grid;
    dead stars (past the end of their track) are dropped."""
    lo, hi = grid.masses.min(), grid.masses.max()
    u = rng.uniform(size=n)
    mass = (lo ** -1.35 + u * (hi ** -1.35 - lo ** -1.35)) ** (-1 / 1.35)
    feh = rng.uniform(z_to_feh(grid.z.min()), z_to_feh(grid.z.max()), n)
    z = feh_to_z(feh)
    eep = grid.eep_at_age(mass, z, rng.uniform(0, 13800.0, n))
    cols = grid.interpolate(mass, z, eep, columns=["logteff", "logl", "logg"])
    ok = np.isfinite(eep) & np.all([np.isfinite(v) for v in cols.values()], axis=0)
    return mass[ok], feh[ok], eep[ok], {k: v[ok] for k, v in cols.items()}


def _coverage(true, samples):
    mean, std = samples.mean(axis=1), samples.std(axis=1)
    dev = np.abs(true - mean) / std
    return np.mean(dev <= 1), np.mean(dev <= 2)


def _observe(rng, cols, feh, teff_err, logl_err, logg_err, feh_err):
    n = feh.size
    return (10 ** cols["logteff"] + rng.normal(0, teff_err, n), cols["logl"] + rng.normal(0, logl_err, n),
            cols["logg"] + rng.normal(0, logg_err, n), feh + rng.normal(0, feh_err, n))


def test_posterior_recovers_masses_of_subgiants_and_giants(grid):
    """Teff +- 80 K, log L +- 0.04 dex (parallax ~5%), [Fe/H] +- 0.1 dex: survey-like errors.

    Coverage holds for stars drawn from the prior itself, hence the population draw;
    the evolved stars are then selected on the observed logg (< 3.9), which keeps the
    coverage honest because the posterior conditions on the observations."""
    rng = np.random.default_rng(7)
    mass, feh, eep, cols = _draw_population(grid, rng, 40 * N_STARS)
    teff, logl, logg, feh_obs = _observe(rng, cols, feh, 80.0, 0.04, 0.1, 0.1)
    pick = np.flatnonzero(logg < 3.9)[:N_STARS]
    n = pick.size
    p = placement.place_by_posterior(grid, teff[pick], np.full(n, 80.0), logl[pick], np.full(n, 0.04),
                                     np.full(n, np.nan), np.full(n, np.nan), feh_obs[pick],
                                     np.full(n, 0.1), rng, SAMPLES)
    assert p.placed.mean() > 0.97
    one, two = _coverage(mass[pick][p.placed], p.mass.reshape(-1, SAMPLES))
    assert one >= ONE_SIGMA_MIN, one
    assert two >= TWO_SIGMA_MIN, two


def test_posterior_with_logg_instead_of_luminosity(grid):
    rng = np.random.default_rng(11)
    mass, feh, eep, cols = _draw_population(grid, rng, 40 * N_STARS)
    teff, logl, logg, feh_obs = _observe(rng, cols, feh, 60.0, 0.04, 0.05, 0.1)
    pick = np.flatnonzero(logg < 3.9)[:N_STARS]
    n = pick.size
    p = placement.place_by_posterior(grid, teff[pick], np.full(n, 60.0), np.full(n, np.nan),
                                     np.full(n, np.nan), logg[pick], np.full(n, 0.05), feh_obs[pick],
                                     np.full(n, 0.1), rng, SAMPLES)
    one, two = _coverage(mass[pick][p.placed], p.mass.reshape(-1, SAMPLES))
    assert one >= ONE_SIGMA_MIN and two >= TWO_SIGMA_MIN, (one, two)


def test_star_far_from_every_track_is_not_placed(grid):
    rng = np.random.default_rng(3)
    # 9000 K at log L = 0: a white-dwarf-ish position no track in the grid reaches.
    p = placement.place_by_posterior(grid, np.array([9000.0]), np.array([50.0]), np.array([0.0]),
                                     np.array([0.02]), np.array([np.nan]), np.array([np.nan]),
                                     np.array([0.0]), np.array([0.1]), rng, SAMPLES)
    assert not p.placed[0] and "no track point" in p.note[0]


def test_mass_stage_route_respects_the_stage_and_mass(grid):
    rng = np.random.default_rng(5)
    mass = np.array([1.2, 1.6, 2.0])
    p = placement.place_by_mass_stage(grid, mass, np.array([0.05, 0.05, 0.1]),
                                      np.array(["subgiant", "lower_giant_branch", "red_clump"]),
                                      np.zeros(3), rng, SAMPLES)
    assert p.placed.all()
    eep = p.eep.reshape(3, SAMPLES)
    assert np.all((eep[0] >= PHASE_EEPS["subgiant"][0]) & (eep[0] < PHASE_EEPS["subgiant"][1]))
    assert np.all((eep[2] >= PHASE_EEPS["core_he_burning"][0]))
    np.testing.assert_allclose(p.mass.reshape(3, SAMPLES).mean(axis=1), mass, atol=0.03)


def test_cluster_members_recover_masses_along_the_isochrone(grid):
    """Members drawn from a 2 Gyr solar-metallicity isochrone, Teff +- 60 K, log L +- 0.03."""
    rng = np.random.default_rng(9)
    iso = placement.isochrone(grid, 2000.0, float(feh_to_z(0.0)))
    pick = rng.choice(iso["mass"].size, 120, replace=False)
    n = pick.size
    teff = 10 ** iso["logteff"][pick] + rng.normal(0, 60, n)
    logl = iso["logl"][pick] + rng.normal(0, 0.03, n)
    p = placement.place_on_isochrone(grid, teff, np.full(n, 60.0), logl, np.full(n, 0.03),
                                     np.full(n, 2.0), np.zeros(n), rng, SAMPLES)
    assert p.placed.mean() > 0.97
    one, two = _coverage(iso["mass"][pick][p.placed], p.mass.reshape(-1, SAMPLES))
    assert one >= ONE_SIGMA_MIN and two >= TWO_SIGMA_MIN, (one, two)


def test_same_seed_same_samples(grid):
    args = (grid, np.array([5000.0]), np.array([80.0]), np.array([1.2]), np.array([0.05]),
            np.array([np.nan]), np.array([np.nan]), np.array([0.0]), np.array([0.1]))
    a = placement.place_by_posterior(*args, np.random.default_rng(1), SAMPLES)
    b = placement.place_by_posterior(*args, np.random.default_rng(1), SAMPLES)
    np.testing.assert_array_equal(a.mass, b.mass)


MASS_ERR = 0.1          # Msun, the catalog error of the mass+stage stars below
MASS_KEPT_SIGMA = 1.0   # acceptance level: the placed current mass stays within 1 sigma


def _mass_stage(grid, mass, stage, feh=0.0, seed=5, **measured):
    n = len(mass)
    cols = {k: np.asarray(v, float) for k, v in measured.items()}
    return placement.place_by_mass_stage(grid, np.asarray(mass, float), np.full(n, MASS_ERR),
                                         np.asarray(stage, dtype=object), np.full(n, feh),
                                         np.random.default_rng(seed), SAMPLES, **cols)


def _at_samples(grid, p, column):
    return grid.interpolate(p.mass, p.z, p.eep, columns=[column])[column].reshape(-1, SAMPLES)


def test_ages_never_exceed_the_age_of_the_universe_on_any_route(grid):
    """A 0.9 Msun solar-metallicity subgiant would be 17-25 Gyr old on its track; the
    part of its mass range that cannot be a subgiant within 13.8 Gyr is left out."""
    p = _mass_stage(grid, [0.9, 1.0, 1.0], ["subgiant", "lower_giant_branch", "red_clump"])
    assert p.placed.all()
    assert _at_samples(grid, p, "age_myr").max() <= placement.MAX_AGE_MYR
    assert "within 13.8 Gyr: left out" in str(p.note[0])
    q = placement.place_by_posterior(grid, np.array([4900.0]), np.array([80.0]), np.array([0.3]),
                                     np.array([0.05]), np.array([np.nan]), np.array([np.nan]),
                                     np.array([-0.5]), np.array([0.1]), np.random.default_rng(2), SAMPLES)
    assert _at_samples(grid, q, "age_myr").max() <= placement.MAX_AGE_MYR
    r = placement.place_on_isochrone(grid, np.array([5000.0]), np.array([80.0]), np.array([0.5]),
                                     np.array([0.05]), np.array([14.0]), np.array([-0.5]),
                                     np.random.default_rng(2), SAMPLES)
    assert "13.8 Gyr used" in str(r.note[0])
    if r.placed[0]:
        assert _at_samples(grid, r, "age_myr").max() <= placement.MAX_AGE_MYR * (1 + 1e-9)


@pytest.mark.parametrize("stage", ["main_sequence", "turnoff", "subgiant", "lower_giant_branch",
                                   "upper_giant_branch", "red_clump"])
def test_given_mass_is_kept_within_its_error(grid, stage):
    """1.8 and 1.0 Msun +- 0.1 on every stage: the samples' current mass (the track's
    mass after winds, which is what a catalog mass measures) has its mean within 1 sigma
    of the given mass, also when a Teff or logg far from the tracks pulls on it.  Before,
    a clashing logg dragged the mass to the edge of the range (1.8 Msun red clump with
    logg 4.3: 1.96 Msun, spread 0)."""
    p = _mass_stage(grid, [1.8, 1.0, 1.8], [stage] * 3,
                    logg=[np.nan, np.nan, 4.3], logg_err=[np.nan, np.nan, 0.1])
    now = _at_samples(grid, p, "mass_msun").mean(axis=1)
    assert np.all(np.abs(now - [1.8, 1.0, 1.8]) <= MASS_KEPT_SIGMA * MASS_ERR), now
    if stage in ("main_sequence", "turnoff", "subgiant", "lower_giant_branch"):
        # no wind mass loss yet: initial = current
        initial = p.mass.reshape(3, SAMPLES).mean(axis=1)
        assert np.all(np.abs(initial - [1.8, 1.0, 1.8]) <= MASS_KEPT_SIGMA * MASS_ERR), initial


def test_red_clump_mass_is_the_current_mass(grid):
    """A 1.0 Msun clump star now started near 1.18 Msun on the grid's tracks (Reimers
    winds on the giant branch, Hurley et al. 2000); the note gives the initial mass."""
    p = _mass_stage(grid, [1.0], ["red_clump"])
    assert abs(_at_samples(grid, p, "mass_msun").mean() - 1.0) < 0.02
    assert p.mass.mean() > 1.1 and "initial mass 1." in str(p.note[0])


def test_bright_rgb_star_is_placed_above_the_bump(grid):
    """Stage "RGB" (normalised to lower_giant_branch) at log L = 2.2 +- 0.05 for 1.8 Msun:
    the track's bump is at log L ~1.8, so L puts the star above it; without L the given
    side is kept."""
    p = _mass_stage(grid, [1.8, 1.8], ["lower_giant_branch"] * 2, logl=[2.2, np.nan],
                    logl_err=[0.05, np.nan])
    logl = grid.interpolate(p.mass, p.z, p.eep, columns=["logl"])["logl"]
    bump = evolution.rgb_bump(grid, p.mass, p.z)[1]
    stage = evolution.stage_index(p.eep, logl, bump, PHASE_EEPS).reshape(2, SAMPLES)
    assert np.all(stage[0] == evolution.STAGES.index("upper_giant_branch"))
    assert np.all(stage[1] == evolution.STAGES.index("lower_giant_branch"))
    assert "placed on upper_giant_branch" in str(p.note[0]) and str(p.note[1]) == ""
    assert abs(np.median(logl.reshape(2, SAMPLES)[0]) - 2.2) < 0.1


def test_luminosity_contradicting_a_non_giant_stage_keeps_the_stage_with_a_note(grid):
    """1.0 Msun main_sequence star with log L = 2.2: no main-sequence point of such a track
    is that bright; the stage is kept and the row says how far off L is."""
    p = _mass_stage(grid, [1.0], ["main_sequence"], logl=[2.2], logl_err=[0.05])
    assert np.all(p.eep < PHASE_EEPS["main_sequence"][1])
    assert "log L = 2.20 ± 0.05 given" in str(p.note[0])


def test_clashing_logg_gets_a_note(grid):
    """1.0 Msun subgiant with logg 4.3 +- 0.1: the placed subgiant has logg ~3.9-4.0
    (> 3 sigma away), so the row carries a note; a consistent logg gets none."""
    p = _mass_stage(grid, [1.0, 1.0], ["subgiant"] * 2, logg=[4.3, 3.9], logg_err=[0.1, 0.1])
    placed_logg = np.median(_at_samples(grid, p, "logg"), axis=1)
    assert 4.3 - placed_logg[0] > placement.CLASH_SIGMA * 0.1
    assert "logg = 4.30 ± 0.10 given, the placed model has" in str(p.note[0])
    assert "logg" not in str(p.note[1])
