"""Engulfment odds from the star's history, against published planet demographics,
Kepler's law and a brute-force scan of the track grid."""

import astropy.units as u
import numpy as np
import pytest
from scipy.integrate import dblquad

from prioritize import engulfment as eg
from prioritize.errors import ConfigError, PrioritizeError
from prioritize.stars.tracks import N_EEPS, feh_to_z, load_grid

GIANTS = eg.POPULATIONS["giant_planets"]
BROWN_DWARFS = eg.POPULATIONS["brown_dwarfs"]
SMALL = eg.POPULATIONS["small_planets"]

# Cumming et al. 2008, PASP 120, 531 (abstract): 10.5 % of solar-type stars host a planet
# of 0.3-10 M_J at 2-2000 d, dN = C M^-0.31 P^0.26 dlnM dlnP.  The analytic integrals
# must agree with a numerical quadrature of that density to quadrature accuracy.
CUMMING_FRACTION = 0.105
QUADRATURE_RTOL = 1e-6
# Wright et al. 2012, ApJ 753, 160 (abstract): hot Jupiters (P < 10 d) around 1.2 +- 0.38 %
# of FGK dwarfs; the tolerance is their 1-sigma error.
WRIGHT_HOT_JUPITERS, WRIGHT_SIGMA = 0.012, 0.0038
# Howard et al. 2012, ApJS 201, 15 (abstract): < 0.001 planets per star with P < 2 d, R > 2 R_earth.
HOWARD_INSIDE_2D = 0.001
# Grether & Lineweaver 2006, ApJ 640, 1051 (abstract): < 1 % brown-dwarf companions with P < 5 yr.
GRETHER_BD_BOUND = 0.01
# Silburt, Gaidos & Wu 2015, ApJ 799, 180 (abstract): 0.46 +- 0.03 planets of 1-4 R_earth per
# star at 20-200 d, ~0.66 including those inside 20 d (no error quoted: we allow 0.07, 10 %).
SILBURT_20_200, SILBURT_SIGMA = 0.46, 0.03
SILBURT_ALL, SILBURT_ALL_TOL = 0.66, 0.07
# Johnson et al. 2010, PASP 122, 905 (abstract): f ∝ M_* 10^(1.2 [Fe/H]); 3.5 % at 0.5 M_sun,
# 14 % at 2 M_sun (a factor 4).  The model applies the scaling exactly: round-off only.
JOHNSON_RTOL = 1e-12
# Kepler's third law: 1 AU around 1 M_sun is one sidereal year, 365.256 d; the IAU 2015
# nominal G M_sun and 1 au = 149,597,870.7 km agree with it to ~1e-6.
SIDEREAL_YEAR_D, KEPLER_RTOL = 365.256, 1e-5
# The sampled R_max (48 uniform nodes + phase ends) against the maximum over every grid EEP
# of the interpolated track (exact for a track linear between EEPs).  Over 400 random grid
# points (0.8-3 M_sun, [Fe/H] -0.5..+0.15, any EEP, windows 0-300 Myr) we measured at most
# 0.17 % low now and 0.7 % low one window ago (where R is not monotonic: hook, blue loop).
RMAX_SAMPLING_RTOL = 0.01
# The RGB-tip radius of the 1 M_sun solar-metallicity track of the shipped grid (Hurley et
# al. 2000 fits), measured here: 187.8 R_sun.
TIP_RADIUS_1MSUN_RSUN, TIP_RADIUS_ABS_TOL = 187.8, 0.1
FLOAT_RTOL = 1e-12


def _odds(r_now, r_then, window=100.0, mass=1.2, feh=0.0, mp=1.0, kind="gas_giant"):
    return eg.engulfment_probability(np.array([r_now]), np.array([r_then]), np.array([window]),
                                     np.array([mass]), np.array([feh]), mp, kind)


def _p(*args, **kwargs):
    return float(_odds(*args, **kwargs).p_engulfed_history[0])


def test_giant_planets_reproduce_cumming_2008():
    """Cumming et al. 2008: 10.5 % in the box; sub-boxes match a quadrature of C M^a P^b."""
    assert eg.population_count(GIANTS, 2.0, 2000.0, 0.3, 10.0, 1.0, 0.0) == pytest.approx(
        CUMMING_FRACTION, rel=FLOAT_RTOL)

    def density(log_m, log_p):
        return np.exp(-0.31 * log_m + 0.26 * log_p)
    box, _ = dblquad(density, np.log(2.0), np.log(2000.0), np.log(0.3), np.log(10.0))
    sub, _ = dblquad(density, np.log(20.0), np.log(300.0), np.log(1.0), np.log(5.0))
    expected = CUMMING_FRACTION * sub / box
    assert eg.population_count(GIANTS, 20.0, 300.0, 1.0, 5.0, 1.0, 0.0) == pytest.approx(
        expected, rel=QUADRATURE_RTOL)


def test_hot_jupiter_rate_and_inner_edge():
    """Wright et al. 2012: 1.2 +- 0.38 % within 10 d; Howard et al. 2012: < 0.001 inside 2 d."""
    hot = eg.population_count(GIANTS, 0.0, 10.0, 0.3, 10.0, 1.0, 0.0)
    assert abs(hot - WRIGHT_HOT_JUPITERS) < WRIGHT_SIGMA
    assert eg.population_count(GIANTS, 0.0, 2.0, 0.3, 13.0, 1.0, 0.0) < HOWARD_INSIDE_2D
    # the paucity inside ~1 d: per ln P at 0.5 d far below the density at 3 d
    assert (eg.population_count(GIANTS, 0.45, 0.55, 0.3, 13.0, 1.0, 0.0)
            < 0.01 * eg.population_count(GIANTS, 2.7, 3.3, 0.3, 13.0, 1.0, 0.0))


def test_brown_dwarf_desert_and_small_planets():
    """Grether & Lineweaver 2006: < 1 % brown dwarfs within 5 yr; Silburt et al. 2015."""
    assert eg.population_count(BROWN_DWARFS, 0.0, 1826.0, 13.0, 80.0, 1.0, 0.0) < GRETHER_BD_BOUND
    m_lo, m_hi = SMALL.mass_range_mjup
    assert abs(eg.population_count(SMALL, 20.0, 200.0, m_lo, m_hi, 1.0, 0.0) - SILBURT_20_200) < SILBURT_SIGMA
    assert abs(eg.population_count(SMALL, 0.0, 200.0, m_lo, m_hi, 1.0, 0.0) - SILBURT_ALL) < SILBURT_ALL_TOL


def test_host_scaling_follows_johnson_2010():
    """Johnson et al. 2010: a factor 4 from 0.5 to 2 M_sun; 10^(1.2 [Fe/H])."""
    def count(mass, feh):
        return eg.population_count(GIANTS, 2.0, 2000.0, 0.3, 10.0, mass, feh)
    assert count(2.0, 0.0) / count(0.5, 0.0) == pytest.approx(4.0, rel=JOHNSON_RTOL)
    assert count(1.0, 0.3) / count(1.0, 0.0) == pytest.approx(10 ** 0.36, rel=JOHNSON_RTOL)
    assert count(3.0, 0.0) == pytest.approx(count(2.0, 0.0), rel=JOHNSON_RTOL)   # held beyond 2 M_sun


def test_kepler_third_law():
    """One sidereal year at 1 AU around 1 M_sun."""
    au_rsun = (1 * u.au).to(u.R_sun).value
    assert eg.orbital_period_days(au_rsun, 1.0) == pytest.approx(SIDEREAL_YEAR_D, rel=KEPLER_RTOL)
    assert eg.orbital_period_days(au_rsun, 4.0) == pytest.approx(SIDEREAL_YEAR_D / 2, rel=KEPLER_RTOL)


def test_capture_factor():
    assert eg.capture_factor(1.0) == pytest.approx(2.0, rel=FLOAT_RTOL)
    assert eg.capture_factor(2.0 ** 8) == pytest.approx(4.0, rel=FLOAT_RTOL)
    assert eg.capture_factor(1e-6) == 1.0


def test_odds_grow_with_window_radius_metals_and_smaller_planets():
    assert _p(8.0, 5.0, window=100.0) > _p(8.0, 5.0, window=10.0) > _p(8.0, 5.0, window=1.0) > 0
    assert _p(10.0, 5.0) > _p(8.0, 5.0) > _p(6.0, 5.0)
    assert _p(8.0, 5.0, mp=0.5) > _p(8.0, 5.0, mp=1.0) > _p(8.0, 5.0, mp=5.0) > _p(8.0, 5.0, mp=30.0)
    assert _p(8.0, 5.0, feh=0.3) > _p(8.0, 5.0, feh=0.0) > _p(8.0, 5.0, feh=-0.3)
    assert _p(8.0, 5.0, mp=0.01, kind="rocky") > _p(8.0, 5.0, mp=0.05, kind="rocky")


def test_main_sequence_dwarf_far_below_a_lower_rgb_giant():
    """A Sun-like dwarf growing from 0.9 to 1.0 R_sun in 100 Myr sweeps only P < 0.35 d;
    a 1.2 M_sun giant growing from 5 to 8 R_sun in the same window sweeps 3.3-6.8 d.
    Measured: 6.5e-5 (nearly all background) against 3.9e-3."""
    dwarf = _p(1.0, 0.9, window=100.0, mass=1.0)
    giant = _p(8.0, 5.0, window=100.0, mass=1.2)
    assert 0 < dwarf < giant / 30.0
    odds = _odds(1.0, 0.9, window=100.0, mass=1.0)
    assert odds.period_swept_max_d[0] < 0.35
    assert odds.planets_swept[0] < 1e-3 * odds.p_background[0]


def test_clump_star_keeps_the_background():
    """A window that does not reach back to the RGB tip sweeps nothing but keeps the
    dynamically delivered background."""
    odds = _odds(188.0, 188.0, window=10.0, mass=0.9)
    assert odds.planets_swept[0] == 0.0
    assert odds.p_engulfed_history[0] > 0
    assert odds.p_background[0] == pytest.approx(odds.p_engulfed_history[0], rel=FLOAT_RTOL)
    assert _p(5.0, 5.0, window=0.0) == 0.0


def test_bad_rows_are_nan_and_config_errors_raise():
    odds = eg.engulfment_probability(np.array([8.0, np.nan, 5.0, 8.0, 8.0]),
                                     np.array([5.0, 5.0, 8.0, 5.0, 5.0]),
                                     np.array([100.0, 100.0, 100.0, -1.0, 100.0]),
                                     np.array([1.2, 1.2, 1.2, 1.2, 0.0]), 0.0, 1.0)
    assert np.isfinite(odds.p_engulfed_history[0])
    assert np.all(np.isnan(odds.p_engulfed_history[1:]))
    assert odds.p_engulfed_history[0] == pytest.approx(_p(8.0, 5.0), rel=FLOAT_RTOL)
    with pytest.raises(ConfigError, match="planet kind"):
        _odds(8.0, 5.0, kind="comet")
    with pytest.raises(ConfigError, match="planet mass"):
        _odds(8.0, 5.0, mp=0.0)


@pytest.fixture(scope="module")
def grid():
    return load_grid()


def _present_logr(grid, mass, z, eep):
    return grid.interpolate(mass, z, eep, columns=["logr"])["logr"]


def test_radius_history_on_the_shipped_grid(grid):
    """R_max now >= R now, then <= now; a 1 M_sun clump star's R_max is its RGB tip."""
    z = feh_to_z(0.0)
    mass = np.array([1.0, 1.2, 1.2, 1.0, 1.5, 2.5, 1.0])
    eep = np.array([100.0, 240.0, 300.0, 530.0, 560.0, 520.0, 530.0])   # MS .. clump
    window = np.array([100.0, 100.0, 100.0, 10.0, 100.0, 100.0, 100.0])
    zz = np.full(mass.size, z)
    now, then = eg.radius_history(grid, mass, zz, eep, window)
    present = 10 ** _present_logr(grid, mass, zz, eep)
    assert np.all(now >= present * (1 - FLOAT_RTOL)) and np.all(then <= now)
    tip = 10 ** _present_logr(grid, 1.0, z, 479.0)
    assert tip == pytest.approx(TIP_RADIUS_1MSUN_RSUN, abs=TIP_RADIUS_ABS_TOL)
    assert now[3] == pytest.approx(tip, rel=FLOAT_RTOL)
    assert then[3] == now[3]                      # ~60 Myr past the tip: 10 Myr do not reach it
    assert then[6] < 0.2 * now[6]                 # 100 Myr reaches back onto the RGB

    # brute force: the maximum over every grid EEP of the interpolated track
    for m, e, w, r_now, r_then in zip(mass, eep, window, now, then):
        logr = _present_logr(grid, m, z, np.arange(N_EEPS, dtype=float))
        e_then = grid.eep_at_age(m, z, grid.interpolate(m, z, e, columns=["age_myr"])["age_myr"] - w)
        exact_now = 10 ** max(np.nanmax(logr[: int(e) + 1]), _present_logr(grid, m, z, e))
        exact_then = 10 ** max(np.nanmax(logr[: int(e_then) + 1]), _present_logr(grid, m, z, e_then))
        assert r_now == pytest.approx(exact_now, rel=RMAX_SAMPLING_RTOL)
        assert r_then == pytest.approx(exact_then, rel=RMAX_SAMPLING_RTOL)


def test_radius_history_before_the_zams_and_bad_rows(grid):
    z = feh_to_z(0.0)
    now, then = eg.radius_history(grid, np.array([1.0, 1.0, np.nan, 1.0]), np.full(4, z),
                                  np.array([5.0, 100.0, 100.0, 100.0]),
                                  np.array([1e5, np.nan, 10.0, -5.0]))
    zams = 10 ** _present_logr(grid, 1.0, z, 0.0)
    assert then[0] == pytest.approx(zams, rel=FLOAT_RTOL)
    assert np.isfinite(now[1]) and np.isnan(then[1])
    assert np.isnan(now[2]) and np.isnan(then[2])
    assert np.isfinite(now[3]) and np.isnan(then[3])
    with pytest.raises(PrioritizeError, match="n_nodes"):
        eg.radius_history(grid, [1.0], [z], [100.0], [10.0], n_nodes=1)
