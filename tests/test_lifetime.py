"""Signature lifetime bookkeeping on hand-made tracks with known answers."""

import numpy as np

from prioritize.lithium.lifetime import signature_lifetime

NAN = np.nan


def test_dilution_crossing_is_interpolated():
    age = np.array([[100.0, 110.0, 120.0, 130.0]])
    z = np.array([[6.0, 4.0, 2.0, 1.0]])  # crosses 3 halfway between 110 and 120
    life, end = signature_lifetime(age, z, 3.0, np.array([NAN]))
    assert life[0] == 15.0 and end[0] == "dilution"


def test_bump_comes_first_and_past_bump_is_zero():
    age = np.array([[100.0, 110.0, 120.0], [100.0, 110.0, 120.0]])
    z = np.array([[6.0, 5.0, 4.0], [6.0, 5.0, 4.0]])
    life, end = signature_lifetime(age, z, 3.0, np.array([105.0, 90.0]))
    assert life[0] == 5.0 and end[0] == "rgb_bump"
    assert life[1] == 0.0 and end[1] == "past_rgb_bump"


def test_end_of_track_and_no_signal():
    age = np.array([[100.0, 110.0, NAN], [100.0, 110.0, 120.0]])
    z = np.array([[6.0, 5.0, NAN], [2.0, 5.0, 6.0]])
    life, end = signature_lifetime(age, z, 3.0, np.array([NAN, NAN]))
    assert life[0] == 10.0 and end[0] == "end_of_track"
    assert life[1] == 0.0 and end[1] == "below_threshold"
