"""Enrichment by atom counting against a check table computed from the same formula."""

import numpy as np
import pytest

from prioritize.constants import M_EARTH_MSUN, M_JUP_MSUN
from prioritize.lithium.enrichment import (PlanetComposition, enriched_abundance,
                                           planet_mass_for_abundance)

# Check table computed from the atom-counting formula with X_* = X_p = 0.70,
# A_p = 3.26, w_Li = 1.5 ppm; values are quoted to 0.001 dex, so the tolerance is the
# rounding plus an accepted 0.002 dex.
ABUNDANCE_TOL_DEX = 0.002
GAS = PlanetComposition("gas_giant", 0.70, 3.26)
ROCK = PlanetComposition("rocky", li_mass_fraction=1.5e-6)

TABLE = [  # A_*, M_cz, 1 MJ, 10 MJ, 1 ME rocky, 5 ME rocky
    (1.0, 0.05, 1.643, 2.477, 1.458, 2.015),
    (1.0, 0.3, 1.197, 1.818, 1.118, 1.408),
    (1.0, 1.0, 1.069, 1.433, 1.039, 1.167),
    (2.0, 0.05, 2.121, 2.575, 2.074, 2.287),
    (2.0, 0.3, 2.023, 2.185, 2.013, 2.063),
    (2.0, 1.0, 2.007, 2.065, 2.004, 2.020),
]


@pytest.mark.parametrize("a_star,m_cz,one_mj,ten_mj,one_me,five_me", TABLE)
def test_check_table(a_star, m_cz, one_mj, ten_mj, one_me, five_me):
    got = enriched_abundance(a_star, m_cz, np.array([1, 10]) * M_JUP_MSUN, GAS)
    np.testing.assert_allclose(got, [one_mj, ten_mj], atol=ABUNDANCE_TOL_DEX)
    got = enriched_abundance(a_star, m_cz, np.array([1, 5]) * M_EARTH_MSUN, ROCK)
    np.testing.assert_allclose(got, [one_me, five_me], atol=ABUNDANCE_TOL_DEX)


def test_inverse_is_exact():
    """The planet mass that gives a target abundance gives it back exactly."""
    rng = np.random.default_rng(1)
    a_star = rng.uniform(-0.5, 2.5, 200)
    m_cz = 10 ** rng.uniform(-3, 0.3, 200)
    target = a_star + rng.uniform(0.01, 0.6, 200)
    for comp in (GAS, ROCK):
        m_p = planet_mass_for_abundance(a_star, target, m_cz, comp)
        ok = np.isfinite(m_p)
        np.testing.assert_allclose(enriched_abundance(a_star[ok], m_cz[ok], m_p[ok], comp),
                                   target[ok], atol=1e-9)


def test_unreachable_and_trivial_targets():
    # A gas giant at A = 3.26 cannot lift an envelope above 3.26.
    assert np.isinf(planet_mass_for_abundance(1.0, 3.3, 0.1, GAS))
    assert planet_mass_for_abundance(1.0, 0.9, 0.1, GAS) == 0.0
