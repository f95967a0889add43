"""The built-in lithium prior against the reference points it is built on."""

import numpy as np

from prioritize.constants import A_LI_METEORITIC, A_LI_SUN
from prioritize.lithium.baseline import (dredge_up_dilution, li_preserving_mass_interim,
                                         main_sequence_lithium, prior_baseline)

# The Sun: A(Li) = 1.05 +- 0.10 at 4.57 Gyr (Asplund et al. 2009); the Sun's ZAMS Teff
# is ~5650 K (from memory; standard solar models start ~4-5% fainter and ~100 K cooler).
SUN_TOL_DEX = 0.10


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


def test_first_dredge_up_dilution_is_standard():
    """Iben (1967): FDU dilution 30-60x (1.5-1.8 dex) for 1-3 M_sun with M_cz ~0.7-0.85 M."""
    for mass, frac in [(1.0, 0.75), (2.0, 0.8), (3.0, 0.85)]:
        dex = -dredge_up_dilution(frac * mass, li_preserving_mass_interim(mass))
        assert 1.5 <= dex <= 1.8


def test_no_dilution_before_the_envelope_deepens_and_scatter_passed_through():
    a, s = prior_baseline(6000.0, 1.0, 5.0, 0.001, 0.02, 0.4)
    assert a == main_sequence_lithium(6000.0, 1.0) and s == 0.4
    a_giant, _ = prior_baseline(6000.0, 6.0, 5.0, 0.8, 0.02, 0.4)
    np.testing.assert_allclose(a_giant, main_sequence_lithium(6000.0, 5.0) + np.log10(0.02 / 0.8))
