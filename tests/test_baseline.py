"""The built-in lithium prior against the population facts it is built on."""

import numpy as np
import pytest

from prioritize.config import Config
from prioritize.constants import A_LI_METEORITIC, A_LI_SUN
from prioritize.lithium.baseline import (LI_RICH_A_LI, censored_baseline, dredge_up_dilution,
                                         main_sequence_lithium, prior_baseline, prior_scatter)
from prioritize.stars.tracks import feh_to_z, load_grid

# The Sun: A(Li) = 1.05 +- 0.10 at 4.57 Gyr (Asplund et al. 2009); the Sun's ZAMS Teff
# is ~5650 K (from memory; standard solar models start ~4-5% fainter and ~100 K cooler).
SUN_TOL_DEX = 0.10


@pytest.fixture(scope="module")
def grid():
    return load_grid()


def test_sun_reaches_its_photospheric_lithium():
    assert abs(main_sequence_lithium(5650.0, 4.57) - A_LI_SUN) < SUN_TOL_DEX


def test_hot_f_stars_keep_meteoritic_lithium_and_dip_is_depleted():
    # Hot F stars outside the dip keep A(Li) ~3.0-3.3 (Boesgaard & Tripicco 1986; from memory).
    assert main_sequence_lithium(7000.0, 1.0) > 3.0
    # The dip at ~6600 K is >1.5 dex below its hotter and cooler neighbours by Hyades age.
    dip = main_sequence_lithium(6600.0, 0.7)
    assert main_sequence_lithium(6200.0, 0.7) - dip > 1.0
    assert main_sequence_lithium(7000.0, 0.7) - dip > 1.5
    # Young stars have not yet formed the dip.
    assert main_sequence_lithium(6600.0, 0.0) == A_LI_METEORITIC


def test_li_dip_moves_cooler_at_lower_metallicity():
    """Balachandran 1995 (ApJ 446, 203): the dip's centre is cooler in metal-poor clusters."""
    teff = np.arange(6000.0, 7200.0, 10.0)
    centre = [teff[np.argmin(main_sequence_lithium(teff, 1.0, feh))] for feh in (-0.5, 0.0, 0.3)]
    assert centre[0] < centre[1] < centre[2]


def _dilution_on_track(grid, mass, eep):
    from prioritize.engine import _deepest_envelope_so_far, _preserved_reservoir
    from prioritize.stars.tracks import convective_envelope
    m, z, e = np.array([mass]), np.array([feh_to_z(0.0)]), np.array([eep])
    m_cz = convective_envelope(grid, m, z, e)["m_cz_msun"]
    return dredge_up_dilution(_deepest_envelope_so_far(grid, m, z, e, m_cz),
                              _preserved_reservoir(grid, m, z, e))[0]


def test_first_dredge_up_dilution_of_a_solar_mass_giant_is_standard(grid):
    """Standard models: first dredge-up dilutes a 1 Msun star's main-sequence lithium by
    1.2-1.8 dex (Iben 1967, ApJ 147, 624: a factor ~60; from memory)."""
    dex = -_dilution_on_track(grid, 1.0, 335.0)     # lower giant branch, before the bump
    assert 1.2 <= dex <= 1.8


def test_giant_and_clump_baselines_stay_below_the_li_rich_line(grid):
    """Post-dredge-up giants sit below A(Li) = 1.5, the Li-rich line (Iben 1967;
    Brown et al. 1989, ApJS 71, 293), at every mass of the grid's giants."""
    from prioritize.engine import signature_at
    cfg = Config()
    masses = np.array([1.0, 1.3, 1.6, 2.0, 2.5, 3.0])
    for eep in (330.0, 420.0, 520.0):               # lower RGB, upper RGB, clump
        got = signature_at(grid, masses, np.full(masses.size, feh_to_z(0.0)),
                           np.full(masses.size, eep), cfg)
        assert np.all(got["a_li_base"] < LI_RICH_A_LI), (eep, got["a_li_base"])


def test_li_rich_fraction_of_giants_is_about_one_percent(grid):
    """~1% of G/K giants exceed A(Li) = 1.5 (Brown et al. 1989; 0.2-2%, Gao et al. 2022):
    the prior's median and scatter, over giants drawn from the grid (Salpeter masses
    1-2.5 Msun, time-weighted points on the lower giant branch and in the clump)."""
    from prioritize.engine import signature_at
    rng = np.random.default_rng(3)
    n = 3000
    u = rng.uniform(size=n)
    mass = (1.0 ** -1.35 + u * (2.5 ** -1.35 - 1.0 ** -1.35)) ** (1 / -1.35)
    eep = np.where(rng.uniform(size=n) < 0.5, rng.uniform(300, 340, n), rng.uniform(485, 575, n))
    cfg = Config()
    got = signature_at(grid, mass, np.full(n, feh_to_z(0.0)), eep, cfg)
    draws = got["a_li_base"] + got["a_li_scatter"] * rng.standard_normal(n)
    fraction = np.mean(draws > LI_RICH_A_LI)
    assert 0.002 <= fraction <= 0.03, fraction


def test_scatter_by_stage_and_in_the_dip():
    ms, lrgb, clump = prior_scatter(np.array([0, 3, 5]), 5800.0, 0.0)
    assert clump > lrgb and ms > lrgb
    assert prior_scatter(0, 6600.0, 0.0) > prior_scatter(0, 5800.0, 0.0) + 0.1


def test_no_dilution_before_the_envelope_deepens():
    a, a_ms, dil = prior_baseline(6000.0, 0.0, 1.0, 5.0, 0.001, 0.02)
    assert a == main_sequence_lithium(6000.0, 1.0) == a_ms and dil == 0.0


def test_censored_comparison_uses_the_detection_limit():
    np.testing.assert_array_equal(censored_baseline(np.array([-1.0, 2.0, 0.5]),
                                                    np.array([0.3, 0.3, np.nan])), [0.3, 2.0, 0.5])


# --- the clump's Li-rich tail (internal production near the helium flash) ---

def test_without_a_tail_the_significance_is_the_gaussian_one():
    from prioritize.lithium.baseline import tail_aware_significance
    a = np.array([-1.0, 0.5, 2.0, 4.0])
    z = tail_aware_significance(a, 0.0, 0.35, 0.0)
    assert np.array_equal(z, a / 0.35)


def test_tail_significance_is_the_mixture_p_value():
    """Against a direct evaluation with scipy.stats of the mixture's upper-tail
    probability: p = (1 - f) Q(z) + f exp(-(a - 1.5) / s)."""
    from scipy import stats
    from prioritize.lithium.baseline import (LI_RICH_TAIL_SCALE_DEX, tail_aware_significance)
    f, base, sigma = 0.01, -0.1, 0.35
    for a in (0.5, 1.2, 2.0, 2.8, 3.6):
        p = (1 - f) * stats.norm.sf((a - base) / sigma) + f * np.exp(-max(a - 1.5, 0) / LI_RICH_TAIL_SCALE_DEX)
        assert tail_aware_significance(a, base, sigma, f) == pytest.approx(stats.norm.isf(p), rel=1e-9)


def test_a_jupiter_cannot_stand_out_of_the_clump_tail_but_a_brown_dwarf_can():
    """With ~1% of normal clump stars Li-rich, an A(Li) below the Li-rich line is at
    most a 1-in-100 event (z <= 2.33, Q^-1(0.01)); an enrichment far above the tail
    (A(Li) ~3.3, the meteoritic value) still clears 3 sigma."""
    from prioritize.lithium.baseline import LI_RICH_TAIL_FRACTION, tail_aware_significance
    f = LI_RICH_TAIL_FRACTION["red_clump"]
    assert tail_aware_significance(1.3, -0.1, 0.35, f) <= 2.33 + 1e-6
    assert tail_aware_significance(3.3, -0.1, 0.35, f) > 3.0


def test_tail_only_for_clump_stars_that_went_through_the_helium_flash():
    from prioritize.catalog.status import STAGES
    from prioritize.lithium.baseline import tail_fraction
    idx = np.arange(len(STAGES))
    low = tail_fraction(idx, 1.2)
    assert low[STAGES.index("red_clump")] > 0
    assert np.all(np.delete(low, STAGES.index("red_clump")) == 0)
    # a 2.5 M_sun clump star ignited helium quietly (secondary clump): no flash tail
    assert tail_fraction(STAGES.index("red_clump"), 2.5) == 0


def test_abundance_for_significance_inverts_the_significance():
    from prioritize.lithium.baseline import abundance_for_significance, tail_aware_significance
    for f in (0.0, 0.01):
        a = abundance_for_significance(3.0, -0.1, 0.35, f)
        assert tail_aware_significance(a, -0.1, 0.35, f) == pytest.approx(3.0, abs=1e-6)
    # the tail raises the abundance a 3-sigma signature needs
    assert abundance_for_significance(3.0, -0.1, 0.35, 0.01) > -0.1 + 3.0 * 0.35 + 1.0
