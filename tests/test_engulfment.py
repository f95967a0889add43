"""Engulfment odds from the star's own history against published planet demographics."""

import numpy as np
import pytest

from prioritize import engulfment as eg
from prioritize.stars.tracks import feh_to_z, load_grid

OCCURRENCE_RTOL = 0.02     # the normalisations are the published fractions (round-off only)
KEPLER_RTOL = 1e-3         # 1 AU = 215.03 R_sun, 1 yr = 365.25 d (IAU nominal values)


def test_occurrence_reproduces_the_published_fractions():
    """Cumming et al. 2008: 10.5% with 0.3-10 M_J at 2-2000 d; Wright et al. 2012: ~1% hot Jupiters."""
    total = eg.planets_within_period(2000.0, 0.3) - eg.planets_within_period(2.0, 0.3)
    hot = eg.planets_within_period(10.0, 0.3)
    warm = total - (hot - eg.planets_within_period(2.0, 0.3))
    np.testing.assert_allclose(hot, eg.HOT_JUPITER_FRACTION, rtol=OCCURRENCE_RTOL)
    np.testing.assert_allclose(warm, eg.CUMMING_FRACTION * (2000 ** 0.26 - 10 ** 0.26) / (2000 ** 0.26 - 2 ** 0.26),
                               rtol=OCCURRENCE_RTOL)
    assert eg.planets_within_period(0.5, 1.0) < 0.1 * eg.planets_within_period(3.0, 1.0)


def test_kepler_third_law():
    np.testing.assert_allclose(eg.period_at_radius_d(215.032, 1.0), 365.25, rtol=KEPLER_RTOL)


def _p(r_now, r_then, window=100.0, mass=1.2, feh=0.0, mp=1.0):
    return float(eg.engulfment_probability(np.array([r_now]), np.array([r_then]), np.array([window]),
                                           np.array([mass]), np.array([feh]), mp).p_engulfed_history[0])


def test_odds_grow_with_window_radius_metals_and_smaller_planets():
    assert _p(8, 5, 100) > _p(8, 5, 10)
    assert _p(10, 5) > _p(8, 5)
    assert _p(8, 5, mp=0.5) > _p(8, 5, mp=5.0)
    assert _p(8, 5, feh=0.3) > _p(8, 5, feh=-0.3)
    # a main-sequence dwarf barely grows within its few-Myr signature: orders of magnitude
    # below a lower-RGB giant sweeping the hot-Jupiter zone in 100 Myr
    assert _p(1.0, 0.999, window=5.0, mass=1.0) < 1e-2 * _p(8.0, 5.0, window=100.0)


def test_clump_star_keeps_background_odds():
    assert _p(150.0, 150.0, window=50.0) > 0


@pytest.fixture(scope="module")
def grid():
    return load_grid()


def test_radius_history_on_the_grid(grid):
    z = np.full(2, feh_to_z(0.0))
    mass = np.array([1.0, 1.0])
    eep = np.array([330.0, 520.0])        # lower giant branch, red clump
    now, then = eg.radius_history(grid, mass, z, eep, np.array([50.0, 10.0]))
    r = 10 ** grid.interpolate(mass, z, eep, columns=["logr"])["logr"]
    assert np.all(now >= r * (1 - 1e-9)) and np.all(then <= now)
    # the clump star's largest radius so far is the RGB tip's (~100-200 R_sun in these tracks)
    assert 100.0 < now[1] < 250.0
