"""Signature lifetime bookkeeping on hand-made tracks with known answers, and the
mixing timescales that end signatures."""

import pytest
import numpy as np

from prioritize.lithium.baseline import THERMOHALINE_DEPLETION_DEX
from prioritize.lithium.lifetime import (ending_process, fingering_survival, signature_lifetime,
                                         thermohaline_rate_per_myr)

NAN = np.nan


def test_dilution_crossing_is_interpolated():
    age = np.array([[100.0, 110.0, 120.0, 130.0]])
    z = np.array([[6.0, 4.0, 2.0, 1.0]])  # crosses 3 halfway between 110 and 120
    life, crossing, end = signature_lifetime(age, z, 3.0)
    assert life[0] == 15.0 and crossing[0] == 2 and end[0] == "dilution"


def test_end_of_track_and_no_signal():
    age = np.array([[100.0, 110.0, NAN], [100.0, 110.0, 120.0]])
    z = np.array([[6.0, 5.0, NAN], [2.0, 5.0, 6.0]])
    life, crossing, end = signature_lifetime(age, z, 3.0)
    assert life[0] == 10.0 and end[0] == "end_of_track" and crossing[0] == -1
    assert life[1] == 0.0 and end[1] == "below_threshold"


def test_ending_process_is_the_one_with_most_efolds():
    end = np.array(["dilution", "dilution", "end_of_track"], dtype=object)
    crossing = np.array([1, 1, -1])
    losses = {"dilution": np.array([[0, 0.2], [0, 2.0], [0, 0]]),
              "burning": np.array([[0, 1.0], [0, 0.1], [0, 5]])}
    np.testing.assert_array_equal(ending_process(end, crossing, losses),
                                  ["burning", "dilution", "end_of_track"])


def test_thermohaline_rate_gives_the_bump_to_tip_depletion():
    """Charbonnel & Zahn 2007: Li falls by ~1 dex from the bump to the tip (from memory)."""
    rate = thermohaline_rate_per_myr(1000.0, 1050.0)
    np.testing.assert_allclose(np.log10(np.exp(-rate * 50.0)), -THERMOHALINE_DEPLETION_DEX)
    assert np.isnan(thermohaline_rate_per_myr(NAN, 1050.0))


def test_fingering_survival_limits():
    """f = 1 at engulfment; tends to M_cz/(M_cz + M_rad); no effect without a metal excess."""
    args = dict(m_planet_msun=1e-3, planet_z=0.06, star_z=0.02, m_cz_msun=0.025, m_radiative_msun=0.9)
    assert fingering_survival(0.0, **args) == 1.0
    np.testing.assert_allclose(fingering_survival(1e4, **args), 0.025 / 0.925, rtol=1e-9)
    assert fingering_survival(1e4, **{**args, "planet_z": 0.01}) == 1.0
    # a few Myr below a thin main-sequence envelope (Théado & Vauclair 2012): half gone by 5 Myr
    assert fingering_survival(5.0, **args) < 0.5
    # a giant's envelope sits on almost no radiative mass: hardly any effect
    assert fingering_survival(1e4, 1e-3, 0.06, 0.02, 0.7, 0.01) > 0.98


def test_the_thermohaline_depletion_is_a_config_choice():
    """[baseline] thermohaline_depletion_dex sets both the baseline past the bump and the
    rate that destroys the planet's lithium there (same physics, same star): halfway
    from the bump to the tip the baseline is lower by half the configured amount, and
    the rate scales with it."""
    from prioritize.config import Config, with_overrides
    from prioritize.engine import _giant_branch, signature_at
    from prioritize.lithium.baseline import thermohaline_depletion
    from prioritize.lithium.lifetime import thermohaline_rate_per_myr
    from prioritize.stars.tracks import load_grid

    assert thermohaline_depletion(150.0, 100.0, 200.0, False, 2.0) == -1.0
    assert thermohaline_depletion(150.0, 100.0, 200.0, True, 2.0) == -2.0
    assert thermohaline_rate_per_myr(100.0, 200.0, 2.0) == 2 * thermohaline_rate_per_myr(100.0, 200.0, 1.0)
    grid = load_grid()
    mass, z = np.array([1.2]), np.array([0.02])
    gb = _giant_branch(grid, mass, z)
    bump_age, tip_age = gb["bump_age"][0], gb["tip_age"][0]
    eeps = np.linspace(gb["bump_eep"][0] + 0.5, 449.0, 200)
    ages = grid.interpolate(np.full(eeps.size, 1.2), np.full(eeps.size, 0.02), eeps,
                            columns=["age_myr"])["age_myr"]
    eep = eeps[np.argmin(np.abs(ages - 0.5 * (bump_age + tip_age)))]
    strong = signature_at(grid, mass, z, [eep], with_overrides(Config(), {"baseline.thermohaline_depletion_dex": 2.0}))
    weak = signature_at(grid, mass, z, [eep], Config())
    frac = (grid.interpolate(mass, z, np.array([eep]), columns=["age_myr"])["age_myr"][0] - bump_age) / (tip_age - bump_age)
    assert 0.3 < frac < 0.7
    assert strong["a_li_base"][0] - weak["a_li_base"][0] == pytest.approx(-1.0 * frac, abs=1e-6)
