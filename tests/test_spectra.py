"""Checks of prioritize.spectra against published values and an independent 3D non-LTE library.

References used below:
- Check table: EW(6708) computed with ``breidablik`` from the Wang et al.
  (2021, MNRAS 500, 2159) 3D non-LTE grid, [Fe/H] = 0; EW(6104) values computed the same way.
- ``breidablik`` 1.5.1 (PyPI), ``Rew().find_abund(teff, logg, feh, log10(EW/lambda))``
  with lambda = 6709.659 A (6708 line) or 6105.298 A (6104 line), vacuum, same units as EW.
- Cayrel (1988, IAU Symp. 132, p. 345): sigma_EW x S/N table computed from his formula.
- Gray, *Observation and Analysis of Stellar Photospheres*, 3rd ed.: rotation kernel
  (eq. 18.14) and the thermal Doppler width (from memory).
"""

from __future__ import annotations

import dataclasses
import math
import warnings

import numpy as np
import pytest

from prioritize import spectra
from prioritize.errors import PrioritizeError
from prioritize.instruments import load_instrument

EW_TABLE_TOL_DEX = 0.08         # the compact form must match the 3D NLTE table (Wang et al. 2021) to 0.08 dex
ROUND_TRIP_TOL_DEX = 0.10       # A(Li) recovered by breidablik from our EW (project acceptance level)
LI6104_TABLE_TOL_DEX = 0.10     # EW(6104) values (breidablik, Wang et al. 2021)
LI6104_ROUND_TRIP_TOL_DEX = 0.10
A_ERROR_REL_TOL = 0.15          # linear error propagation vs finite differences through breidablik
CAYREL_REL_TOL = 0.01           # the Cayrel (1988) table below is rounded to 3 digits; 1%

LI6708_VACUUM_A = 6709.659      # breidablik's line centre (670.9659 nm)
LI6104_VACUUM_A = 6105.298      # breidablik's line centre (610.5298 nm)

# EW(6708) in mA, 3D NLTE (breidablik, Wang et al. 2021), [Fe/H] = 0, A(Li) = 0.5, 1.0, ..., 3.5
SCIENCE_EW_TABLE = {
    (6000, 4.0): (0.7, 2.1, 6.5, 19.7, 55.5, 130, 235),
    (5777, 4.44): (1.0, 3.3, 10.2, 30.5, 80.8, 170, 275),
    (5500, 4.0): (1.8, 5.7, 17.4, 49.5, 118, 218, 314),
    (5000, 3.5): (6.0, 18.4, 51.7, 123, 222, 314, 388),
    (4750, 2.5): (11.2, 32.4, 82.9, 171, 268, 347, 411),
    (4500, 2.5): (24.3, 65.8, 145, 245, 329, 393, 451),
    (4250, 2.0): (50.7, 118, 216, 307, 375, 429, 486),
}
SCIENCE_A_LI = np.arange(0.5, 3.51, 0.5)

# EW(6104) in mA (breidablik, Wang et al. 2021) at A(Li) = 2.0, 2.5, 3.0, 3.5
SCIENCE_EW6104_TABLE = {
    (4500, 2.5): (7.4, 22, 60, 130),
    (4750, 2.5): (4.6, 14, 40, 97),
}


@pytest.fixture(scope="module")
def rew():
    interpolate = pytest.importorskip("breidablik.interpolate.rew")
    return interpolate.Rew()


def _find_abund(rew, teff, logg, feh, ew_mA, centre_A):
    """A(Li) from breidablik, or None where breidablik says the star is off its grid."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        a_li = rew.find_abund(teff, logg, feh, math.log10(ew_mA / 1000.0 / centre_A), center=centre_A / 10.0)
    if any("stellar parameters" in str(w.message) for w in caught):
        return None
    return a_li


def test_ew6708_matches_science_table():
    """3D NLTE check table (Wang et al. 2021), rows with EW < 300 mA, within 0.08 dex."""
    worst = 0.0
    for (teff, logg), row in SCIENCE_EW_TABLE.items():
        ours = spectra.ew_li6708_mA(teff, logg, 0.0, SCIENCE_A_LI)
        reference = np.array(row, dtype=float)
        used = reference < 300.0
        worst = max(worst, np.max(np.abs(np.log10(ours[used] / reference[used]))))
    assert worst < EW_TABLE_TOL_DEX


def test_ew6708_round_trip_through_breidablik(rew):
    """Our EW fed to breidablik's 3D NLTE inversion returns our A(Li) within 0.1 dex.

    Grid: Teff 4000-7000 K (250 K), log g 1.5-5.0 (0.5), [Fe/H] -1, -0.5, 0, +0.25,
    A(Li) -0.5 to 4.0 (0.5), kept where our model and breidablik's grid both hold and
    EW <= 300 mA (the model's stated accuracy range).
    """
    errors = []
    for teff in np.arange(4000.0, 7001.0, 250.0):
        for logg in np.arange(1.5, 5.01, 0.5):
            for feh in (-1.0, -0.5, 0.0, 0.25):
                if not spectra.ew_model_valid(teff, logg, feh):
                    continue
                for a_li in np.arange(-0.5, 4.01, 0.5):
                    ew = float(spectra.ew_li6708_mA(teff, logg, feh, a_li))
                    if ew > spectra.EW_ACCURATE_MAX_MA:
                        continue
                    recovered = _find_abund(rew, teff, logg, feh, ew, LI6708_VACUUM_A)
                    if recovered is not None:
                        errors.append(recovered - a_li)
    assert len(errors) > 300
    assert np.max(np.abs(errors)) < ROUND_TRIP_TOL_DEX


def test_ew6104_matches_science_values():
    worst = 0.0
    for (teff, logg), row in SCIENCE_EW6104_TABLE.items():
        ours = spectra.ew_li6104_mA(teff, logg, 0.0, [2.0, 2.5, 3.0, 3.5])
        worst = max(worst, np.max(np.abs(np.log10(ours / np.array(row)))))
    assert worst < LI6104_TABLE_TOL_DEX


def test_ew6104_round_trip_through_breidablik(rew):
    """The 6104 line over 1-100 mA, against breidablik's own 6104 3D NLTE model."""
    errors = []
    for teff in np.arange(4000.0, 7001.0, 500.0):
        for logg in np.arange(1.5, 5.01, 1.0):
            if not spectra.ew_model_valid(teff, logg, 0.0):
                continue
            for a_li in np.arange(1.0, 4.01, 0.5):
                ew = float(spectra.ew_li6104_mA(teff, logg, 0.0, a_li))
                if not 1.0 <= ew <= 100.0:
                    continue
                recovered = _find_abund(rew, teff, logg, 0.0, ew, LI6104_VACUUM_A)
                if recovered is not None:
                    errors.append(recovered - a_li)
    assert len(errors) > 10
    assert np.max(np.abs(errors)) < LI6104_ROUND_TRIP_TOL_DEX


def test_curve_of_growth_slope_is_derivative_and_weak_limit_is_one():
    teff, logg, feh = 4500.0, 2.5, 0.0
    a_li = np.linspace(-0.5, 4.0, 19)
    step = 1e-5
    numeric = (np.log10(spectra.ew_li6708_mA(teff, logg, feh, a_li + step))
               - np.log10(spectra.ew_li6708_mA(teff, logg, feh, a_li - step))) / (2 * step)
    np.testing.assert_allclose(spectra.curve_of_growth_slope(teff, logg, feh, a_li), numeric, rtol=1e-5)
    # weak-line theory: log EW grows one for one with A(Li) (Gray ch. 16); 3% for the fit's c1
    assert spectra.curve_of_growth_slope(6000.0, 4.0, 0.0, -0.5) == pytest.approx(1.0, abs=0.03)


def test_abundance_error_matches_breidablik_finite_difference(rew):
    """sigma_A from 0.434 sigma_EW/(EW s) against A(EW +- sigma) inverted by breidablik."""
    for teff, logg, a_li in [(5777, 4.44, 2.0), (4500, 2.5, 1.0), (4500, 2.5, 2.5), (6000, 4.0, 2.5)]:
        ew = float(spectra.ew_li6708_mA(teff, logg, 0.0, a_li))
        sigma = 0.05 * ew
        slope = spectra.curve_of_growth_slope(teff, logg, 0.0, a_li)
        ours = spectra.a_li_error_from_ew_error(sigma, ew, slope)
        upper = _find_abund(rew, teff, logg, 0.0, ew + sigma, LI6708_VACUUM_A)
        lower = _find_abund(rew, teff, logg, 0.0, ew - sigma, LI6708_VACUUM_A)
        assert ours == pytest.approx((upper - lower) / 2.0, rel=A_ERROR_REL_TOL)


def test_line_fwhm_components():
    # instrument only: FWHM = lambda / R
    only_instrument = spectra.line_fwhm_angstrom(50000, 1e-6, 0.0, intrinsic_fwhm=0.0,
                                                 microturbulence_kms=0.0)
    assert float(only_instrument) == pytest.approx(6707.8 / 50000, rel=1e-6)
    # thermal only, textbook Doppler FWHM = (lambda/c) sqrt(8 ln2 k T / m) (Gray ch. 11, from memory)
    teff = 5000.0
    thermal = spectra.line_fwhm_angstrom(1e12, teff, 0.0, intrinsic_fwhm=0.0, microturbulence_kms=0.0)
    k_b, m_li7, c_cgs = 1.380649e-16, 7.016003 * 1.66053906660e-24, 2.99792458e10
    expected = 6707.8 * math.sqrt(8 * math.log(2) * k_b * teff / m_li7) / c_cgs
    assert float(thermal) == pytest.approx(expected, rel=1e-6)
    # rotation dominates a rapid rotator: width grows with v sin i
    widths = spectra.line_fwhm_angstrom(50000, 4500.0, [0.0, 10.0, 30.0])
    assert np.all(np.diff(widths) > 0)
    assert float(widths[2]) == pytest.approx(1.5588 * 6707.8 * 30.0 / 299792.458, rel=0.1)


def test_doublet_width_is_second_moment_of_the_blend():
    """Two Gaussians 0.151 A apart with weights 2:1: numerical second moment of the blend."""
    x = np.linspace(6706.5, 6709.0, 200001)
    sigma = 0.001
    (l1, l2), (w1, w2) = spectra.LI6708_COMPONENTS_A, spectra.LI6708_COMPONENT_F
    profile = w1 * np.exp(-0.5 * ((x - l1) / sigma) ** 2) + w2 * np.exp(-0.5 * ((x - l2) / sigma) ** 2)
    mean = np.sum(x * profile) / np.sum(profile)
    std = math.sqrt(np.sum((x - mean) ** 2 * profile) / np.sum(profile) - sigma**2)
    assert spectra.LI6708_DOUBLET_FWHM_A == pytest.approx(2.0 * math.sqrt(2.0 * math.log(2.0)) * std, rel=1e-3)


def test_li_doublet_atomic_data():
    """log gf = -0.002 and -0.303 for the 2P3/2 and 2P1/2 components (NIST ASD; Yan,
    Tambasco & Drake 1998), total f(2s-2p) = 0.747, components 2:1 (LS coupling), air
    wavelengths 6707.76 and 6707.91 A, 0.151 A apart (values from memory)."""
    (l1, l2), (f1, f2) = spectra.LI6708_COMPONENTS_A, spectra.LI6708_COMPONENT_F
    g_lower = 2                                   # 2s 2S1/2
    assert math.log10(g_lower * f1) == pytest.approx(-0.002, abs=0.002)
    assert math.log10(g_lower * f2) == pytest.approx(-0.303, abs=0.002)
    assert f1 + f2 == pytest.approx(0.747, abs=0.001) and f1 / f2 == pytest.approx(2.0, rel=1e-3)
    assert (l1, l2) == (pytest.approx(6707.76, abs=0.01), pytest.approx(6707.91, abs=0.01))


# Cayrel (1988): R, FWHM (A), dx (A), sigma_EW x S/N (mA), S/N for 3 sigma on 10 and 20 mA
CAYREL_TABLE = [
    (25000, 0.268, 0.107, 255, 76, 38),
    (50000, 0.134, 0.054, 127, 38, 19),
    (80000, 0.084, 0.034, 80, 24, 12),
]


@pytest.mark.parametrize("row", CAYREL_TABLE, ids=lambda r: f"R{r[0]}")
def test_cayrel_table(row):
    _, fwhm, pixel, sigma_times_snr, snr10, snr20 = row
    assert float(spectra.sigma_ew_mA(1.0, fwhm, pixel)) == pytest.approx(sigma_times_snr, rel=CAYREL_REL_TOL)
    needed = spectra.snr_needed([10.0, 20.0], fwhm, pixel, k_sigma=3)
    # table S/N values are rounded to integers: allow 1% or half a unit
    np.testing.assert_allclose(needed, [snr10, snr20], rtol=CAYREL_REL_TOL, atol=0.5)


def test_cayrel_giant_example_and_differencing():
    # Cayrel (1988), a giant's wider blend: FWHM 0.30 A, dx 0.045 A -> sigma_EW x S/N = 174 mA
    assert float(spectra.sigma_ew_mA(1.0, 0.30, 0.045)) == pytest.approx(174.0, rel=CAYREL_REL_TOL)
    single = spectra.snr_needed(15.0, 0.30, 0.045)
    paired = spectra.snr_needed(15.0, 0.30, 0.045, n_obs_difference=True)
    assert float(paired / single) == pytest.approx(math.sqrt(2.0), rel=1e-12)   # differenced pair (Cayrel 1988)


def test_bad_inputs_raise_package_errors():
    with pytest.raises(PrioritizeError, match="vsini_kms"):
        spectra.line_fwhm_angstrom(50000, 5000.0, -1.0)
    with pytest.raises(PrioritizeError, match="snr"):
        spectra.sigma_ew_mA(0.0, 0.2, 0.05)
    with pytest.raises(PrioritizeError, match="limb_darkening"):
        spectra.line_fwhm_angstrom(50000, 5000.0, 10.0, limb_darkening=1.5)
    with pytest.raises(PrioritizeError, match="ew_mA"):
        spectra.a_li_error_from_ew_error(1.0, 0.0)
    # missing values propagate as NaN instead of raising
    assert np.isnan(spectra.line_fwhm_angstrom(50000, 5000.0, np.nan))


def test_model_domain():
    inside = spectra.ew_model_valid([5777, 4500, 4250, 6500], [4.44, 2.5, 2.0, 4.5], [0.0, 0.0, -0.5, 0.0])
    outside = spectra.ew_model_valid([7500, 6500, 4000, 5000], [4.5, 2.5, 4.5, 3.0], [0.0, 0.0, 0.0, -2.0])
    assert inside.all() and not outside.any()


# --- lines_to_measure -------------------------------------------------------------

GIANT = dict(teff=4500.0, logg=2.5, a_li=3.0)       # Li-rich K giant
DWARF = dict(teff=5800.0, logg=4.4, a_li=1.5)       # solar-type dwarf, modest Li


def _plan(instrument, snr):
    return spectra.lines_to_measure([GIANT["teff"], DWARF["teff"]], [GIANT["logg"], DWARF["logg"]],
                                    [GIANT["a_li"], DWARF["a_li"]], [snr, snr], instrument)


def test_lines_blue_limited_versus_uv_capable_instrument():
    blue_limited = load_instrument("echelle-4m")    # coverage starts at 3800 A
    uv_capable = load_instrument("echelle-8m")      # coverage starts at 3000 A
    assert not blue_limited.covers(3130.42) and uv_capable.covers(3130.42)
    lines, missing = _plan(blue_limited, 400.0)
    assert "Be II 3130.4" in missing[0] and "Be II 3130.4" in missing[1]
    lines, missing = _plan(uv_capable, 400.0)
    assert "Be II 3130.4" in lines[0] and not missing[0]


def test_lines_depend_on_the_star():
    lines, missing = _plan(load_instrument("echelle-8m"), 200.0)
    giant, dwarf = lines
    assert giant[0] == dwarf[0] == "Li I 6707.8"
    for label in ("13CN 8004.7", "CN 7995-8010", "C2 5135", "C2 5635", "[O I] 6300.3"):
        assert label in giant and not any(entry.startswith(label) for entry in dwarf)
    # Li 6104 is detectable in the Li-rich giant (~60 mA in the breidablik 3D NLTE grid) but not in the dwarf
    assert "Li I 6103.6" in giant and not any(entry.startswith("Li I 6103.6") for entry in dwarf)
    assert "Ni I 6767.8" in dwarf


def test_lines_reach_and_red_limit():
    instrument = load_instrument("echelle-4m")
    short = dataclasses.replace(instrument, wavelength_max_angstrom=7500.0)
    lines, missing = _plan(short, 60.0)
    assert "13CN 8004.7" in missing[0] and "CN 7995-8010" in missing[0]
    assert "13CN 8004.7" not in missing[1]                      # does not apply to the dwarf
    assert "Fe I 6703.6 (S/N short)" in lines[1]                # 60 < 150 for differential abundances
    assert "6Li/7Li (6708 profile) (R short)" in lines[0]       # R = 60,000 < 100,000
    # a Li-poor hot dwarf at low S/N: Li 6708 is not reached
    lines, _ = spectra.lines_to_measure([6200.0], [4.3], [0.0], [20.0], instrument)
    assert lines[0][0] == "Li I 6707.8 (S/N short)"


def test_line_table_is_complete():
    keys = [line.key for line in spectra.DIAGNOSTIC_LINES]
    assert len(keys) == len(set(keys))
    for line in spectra.DIAGNOSTIC_LINES:
        assert line.source and line.tells and 3000.0 < line.wavelength_angstrom < 9000.0
