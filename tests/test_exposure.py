"""Checks of prioritize.exposure and prioritize.instruments.

References used below:
- Bessell, Castelli & Plez (1998, A&A 333, 231, Table A2) zero point (735 photons s^-1 cm^-2 A^-1
  at 6708 A for R_C = 0) and the worked, photon-limited example (S/N ~ 158).
- The ``extinction`` library (PyPI) for the CCM89 A(6708)/A_V.
- A solar twin has BP-RP = 0.82 (5762 K, Casagrande et al. 2021)
  and B-V = 0.653 (5741 K, Casagrande et al. 2010); V from G by Riello et al. (2021).
"""

from __future__ import annotations

import dataclasses
import math
import tomllib

import astropy.units as u
import numpy as np
import pytest

from prioritize import exposure
from prioritize.errors import ConfigError, PrioritizeError, PrioritizeWarning
from prioritize.instruments import (PRESET_DIRECTORY, Instrument, instrument_from_dict,
                                    list_instruments, load_instrument)

WORKED_EXAMPLE_REL_TOL = 0.02   # the worked example is quoted to 2-3 digits
ZERO_POINT_REL_TOL = 0.005      # Bessell, Castelli & Plez (1998) zero point: 735 to three digits
CCM89_ABS_TOL = 0.002           # CCM89 A(6708)/A_V = 0.795 to the third decimal
COLOUR_TOL_MAG = 0.03           # scatter of the Riello et al. 2021 relations (~0.03 mag)
INVERSE_REL_TOL = 1e-10         # exact quadratic root: round-off only

WORKED = dict(r_c_mag=9.2, telescope_area=1e5, throughput=0.05, pixel_width=0.054)


def test_photon_zero_point_matches_science_table():
    assert exposure.PHOTONS_RC_ZERO_6708 == pytest.approx(735.0, rel=ZERO_POINT_REL_TOL)


def test_extinction_ratio_matches_ccm89_library():
    extinction = pytest.importorskip("extinction")
    a_6708 = float(extinction.ccm89(np.array([6707.8]), 1.0, 3.1)[0])
    dimming = exposure.photon_flux_6708(0.0, a_v=1.0, extinction_coeff=0.0) / exposure.PHOTONS_RC_ZERO_6708
    assert -2.5 * math.log10(float(dimming)) == pytest.approx(a_6708, abs=CCM89_ABS_TOL)


def test_worked_example_science_section_7():
    """R_C 9.2, 10^5 cm^2, eta 0.05, 0.054 A pixels, 600 s: 2.5e4 e-, S/N ~ 158."""
    signal = exposure.signal_rate_per_pixel(**WORKED, extinction_coeff=0.0) * 600.0
    assert float(signal) == pytest.approx(2.5e4, rel=WORKED_EXAMPLE_REL_TOL)
    snr = exposure.snr_for_exposure(600.0, **WORKED, extinction_coeff=0.0)
    assert float(snr) == pytest.approx(158.0, rel=WORKED_EXAMPLE_REL_TOL)
    # "~150 with 0.08 mag extinction"
    dimmed = exposure.snr_for_exposure(600.0, **WORKED, extinction_coeff=0.08, airmass=1.0)
    assert float(dimmed) == pytest.approx(150.0, rel=WORKED_EXAMPLE_REL_TOL)


def test_snr_scales_as_sqrt_t_when_photon_limited():
    snr = exposure.snr_for_exposure([100.0, 400.0], **WORKED)
    assert snr[1] / snr[0] == pytest.approx(2.0, rel=1e-12)


def test_snr_scales_as_t_when_read_noise_limited():
    faint = dict(WORKED, r_c_mag=20.0)
    snr = exposure.snr_for_exposure([100.0, 200.0], **faint, read_noise=50.0, n_pix_spatial=10)
    assert snr[1] / snr[0] == pytest.approx(2.0, rel=1e-3)


def test_exposure_for_snr_inverts_snr_for_exposure():
    rng = np.random.default_rng(20261201)
    n = 200
    params = dict(r_c_mag=rng.uniform(5, 16, n), telescope_area=rng.uniform(1e4, 5e5, n),
                  throughput=rng.uniform(0.02, 0.1, n), pixel_width=rng.uniform(0.02, 0.1, n),
                  read_noise=rng.uniform(0, 10, n), dark_rate=rng.uniform(0, 0.01, n),
                  sky_rate=rng.uniform(0, 0.5, n), n_pix_spatial=rng.integers(1, 8, n),
                  airmass=rng.uniform(1, 2.5, n), a_v=rng.uniform(0, 2, n))
    target = rng.uniform(10, 500, n)
    t = exposure.exposure_for_snr(target, **params)
    np.testing.assert_allclose(exposure.snr_for_exposure(t, **params), target, rtol=INVERSE_REL_TOL)


def test_units_do_not_change_the_answer():
    plain = exposure.exposure_for_snr(100.0, **WORKED)
    with_units = exposure.exposure_for_snr(100.0, 9.2, telescope_area=10.0 * u.m**2,
                                           throughput=5.0 * u.percent, pixel_width=0.0054 * u.nm)
    assert float(with_units) == pytest.approx(float(plain), rel=1e-12)
    snr_s = exposure.snr_for_exposure(600.0, **WORKED, read_noise=3.0, dark_rate=0.001)
    snr_min = exposure.snr_for_exposure(10.0 * u.min, 9.2, 1e5 * u.cm**2, 0.05, 0.054 * u.AA,
                                        read_noise=3.0 * u.electron, dark_rate=3.6 * u.electron / u.hour)
    assert float(snr_min) == pytest.approx(float(snr_s), rel=1e-12)
    area_m = exposure.collecting_area_cm2(3.5 * u.m, 0.2)
    assert float(exposure.collecting_area_cm2(350.0 * u.cm, 0.2)) == pytest.approx(float(area_m), rel=1e-12)
    assert float(exposure.collecting_area_cm2(3.5, 0.2)) == pytest.approx(float(area_m), rel=1e-12)
    assert float(area_m) == pytest.approx(math.pi * 175.0**2 * (1 - 0.04), rel=1e-12)


def test_wrong_units_and_values_raise_package_errors():
    with pytest.raises(PrioritizeError, match="telescope_area"):
        exposure.snr_for_exposure(600.0, 9.2, 10.0 * u.s, 0.05, 0.054)
    with pytest.raises(PrioritizeError, match="throughput"):
        exposure.snr_for_exposure(600.0, 9.2, 1e5, 5.0, 0.054)
    with pytest.raises(PrioritizeError, match="airmass"):
        exposure.photon_flux_6708(9.2, airmass=0.5)
    with pytest.raises(PrioritizeError, match="snr"):
        exposure.exposure_for_snr(-1.0, **WORKED)


def test_r_c_from_v_and_from_gaia_agree_for_a_solar_twin():
    g = 10.0
    bp_rp = 0.82
    v = g + 0.02704 - 0.01424 * bp_rp + 0.2156 * bp_rp**2 - 0.01426 * bp_rp**3   # Riello et al. 2021
    from_gaia = exposure.r_c_from_gaia(g, bp_rp)
    from_v = exposure.r_c_from_v(v, 0.653)
    assert float(from_v) == pytest.approx(float(from_gaia), abs=COLOUR_TOL_MAG)
    assert 0.3 < v - float(from_gaia) < 0.45     # solar V - R_C ~ 0.36 (Bessell 1990, from memory)


def test_colour_outside_calibration_warns():
    with pytest.warns(PrioritizeWarning, match="b_v"):
        exposure.r_c_from_v(10.0, 1.5)
    with pytest.warns(PrioritizeWarning, match="bp_rp"):
        exposure.r_c_from_gaia(10.0, 4.5)


def test_clip_exposure_flags():
    clipped, flag = exposure.clip_exposure([5.0, 100.0, 1e5, np.nan], 30.0, 3600.0)
    np.testing.assert_array_equal(clipped[:3], [30.0, 100.0, 3600.0])
    assert np.isnan(clipped[3])
    assert list(flag[:3]) == [exposure.EXPOSURE_AT_FLOOR, exposure.EXPOSURE_OK, exposure.EXPOSURE_AT_CEILING]


def test_plan_exposure_on_a_preset():
    instrument = load_instrument("echelle-4m")
    plan = exposure.plan_exposure(instrument, [100.0, 100.0, 100.0], [4.0, 10.0, 16.0], airmass=1.2)
    assert list(plan.flag) == [exposure.EXPOSURE_AT_FLOOR, exposure.EXPOSURE_OK, exposure.EXPOSURE_AT_CEILING]
    assert plan.snr_reached[0] > 100.0 and plan.snr_reached[2] < 100.0
    assert plan.snr_reached[1] == pytest.approx(100.0, rel=1e-10)
    np.testing.assert_allclose(plan.total_s, plan.exposure_s + instrument.readout_overhead_s
                               + instrument.acquisition_overhead_s)
    # a larger telescope of the same kind needs less time (area ratio, photon-limited bright star)
    bigger = dataclasses.replace(instrument, aperture_diameter_m=8.0)
    assert exposure.plan_exposure(bigger, 100.0, 10.0, airmass=1.2).exposure_s < plan.exposure_s[1]


def test_sky_rate_equals_a_star_of_the_sky_magnitude():
    """One arcsec^2 of sky at mu mag/arcsec^2 gives the counts of a star of magnitude mu above the air."""
    sky = exposure.sky_rate_per_pixel(20.8, 1.0 * u.arcsec**2, 1e5, 0.05, 0.054, n_pix_spatial=1)
    star = exposure.signal_rate_per_pixel(20.8, 1e5, 0.05, 0.054, extinction_coeff=0.0)
    assert float(sky) == pytest.approx(float(star), rel=1e-12)


# --- instrument presets --------------------------------------------------------------

def _raw(name="echelle-2m"):
    with open(PRESET_DIRECTORY / f"{name}.toml", "rb") as fh:
        return tomllib.load(fh)


def test_presets_load_and_are_generic():
    assert list_instruments() == ["echelle-2m", "echelle-4m", "echelle-8m"]
    for name in list_instruments():
        instrument = load_instrument(name)
        assert isinstance(instrument, Instrument) and instrument.name == name
        header = (PRESET_DIRECTORY / f"{name}.toml").read_text()
        assert "NOT any real instrument" in header and "exposure-time calculator" in header
    four = load_instrument("echelle-4m")
    assert four.collecting_area_cm2 == pytest.approx(math.pi / 4 * 400.0**2 * (1 - 0.35**2), rel=1e-12)
    assert four.pixel_width_angstrom() == pytest.approx(6707.8 / 60000 / 3.0, rel=1e-12)


def test_user_file_loads(tmp_path):
    path = tmp_path / "mine.toml"
    path.write_text((PRESET_DIRECTORY / "echelle-2m.toml").read_text().replace(
        'name = "echelle-2m"', 'name = "mine"'))
    assert load_instrument(path).name == "mine"
    assert load_instrument(str(path)).name == "mine"


@pytest.mark.parametrize("change, message", [
    ({"mirror_colour": "silver"}, "unknown key 'mirror_colour'"),
    ({"throughput_6708": 1.5}, "throughput_6708 = 1.5 is outside the allowed range 0.0001 to 1.0"),
    ({"resolving_power": "high"}, "resolving_power must be a number"),
    ({"spatial_pixels": 2.5}, "spatial_pixels must be a whole number"),
    ({"wavelength_min_angstrom": 9500.0}, "wavelength_min_angstrom must be below"),
    ({"exposure_min_s": 3000.0, "exposure_max_s": 2000.0}, "exposure_min_s must not exceed"),
])
def test_bad_values_name_the_key_and_range(change, message):
    raw = _raw()
    raw.update(change)
    with pytest.raises(ConfigError, match=message.replace("(", r"\(").replace(")", r"\)")):
        instrument_from_dict(raw)


def test_missing_key_and_bad_files(tmp_path):
    raw = _raw()
    del raw["read_noise_e"]
    with pytest.raises(ConfigError, match="missing key 'read_noise_e'.*0.0 to 50.0"):
        instrument_from_dict(raw)
    with pytest.raises(ConfigError, match="unknown instrument 'echelle-99m'.*echelle-2m"):
        load_instrument("echelle-99m")
    broken = tmp_path / "broken.toml"
    broken.write_text("name = [")
    with pytest.raises(ConfigError, match="not valid TOML"):
        load_instrument(broken)
    with pytest.raises(ConfigError, match="does not exist"):
        load_instrument(tmp_path / "absent.toml")


# Stars with a measured B-V and a spectroscopic Teff (values from memory): the Sun
# (B-V 0.653, Ramirez et al. 2012, ApJ 752, 5; Teff 5772 K, IAU 2015 B3), 18 Sco (0.65,
# 5810 K), alpha Cen A (0.71, 5790 K, [Fe/H] +0.2), tau Cet (0.72, 5344 K, -0.50),
# epsilon Eri (0.88, 5084 K, -0.09), Procyon (0.42, 6530 K, logg 4.0), Pollux (1.00,
# 4860 K, logg 2.9, +0.1) and Arcturus (1.23, 4286 K, logg 1.66, -0.52).
V_ONLY_STARS = [  # B-V, Teff, logg, [Fe/H]
    (0.653, 5772.0, 4.44, 0.00), (0.65, 5810.0, 4.45, 0.03), (0.71, 5790.0, 4.30, 0.20),
    (0.72, 5344.0, 4.50, -0.50), (0.88, 5084.0, 4.60, -0.09), (0.42, 6530.0, 4.00, -0.02),
    (1.00, 4860.0, 2.90, 0.10), (1.23, 4286.0, 1.66, -0.52),
]
V_ONLY_EXPOSURE_TOLERANCE = 0.05   # fractional; the required agreement for V-only catalogs


def test_v_only_exposures_agree_with_v_and_b_v():
    """V + Teff (B-V from the colour-Teff relations) against V + the measured B-V: the
    unclipped exposure for S/N 100 at V = 12 on the 4-m preset agrees within 5%."""
    from prioritize.instruments import load_instrument

    b_v, teff, logg, feh = (np.array(c) for c in zip(*V_ONLY_STARS))
    v = np.full(b_v.size, 12.0)
    nan = np.full(b_v.size, np.nan)
    common = dict(r_mag=nan, g_mag=nan, bp_rp=nan, v_mag=v, teff=teff, logg=logg, feh=feh,
                  ebv=np.zeros(b_v.size), giant=logg < 3.5)
    r_measured, source_measured = exposure.r_c_from_catalog(b_v=b_v, **common)
    r_from_teff, source_teff = exposure.r_c_from_catalog(b_v=nan, **common)
    assert set(source_measured) == {"V+B-V"}
    assert set(source_teff) == {"V+B-V from Teff (Casagrande et al. 2010)",
                                "V+B-V from Teff (Alonso et al. 1999)"}
    inst = load_instrument("echelle-4m")
    area = inst.collecting_area_cm2
    kwargs = dict(read_noise=inst.read_noise_e, dark_rate=inst.dark_current_e_per_s,
                  n_pix_spatial=inst.spatial_pixels)
    t_measured = exposure.exposure_for_snr(100.0, r_measured, area, inst.throughput_6708,
                                           inst.pixel_width_angstrom(), **kwargs)
    t_teff = exposure.exposure_for_snr(100.0, r_from_teff, area, inst.throughput_6708,
                                       inst.pixel_width_angstrom(), **kwargs)
    ratio = t_teff / t_measured
    print("exposure ratio V+Teff / V+(B-V):", np.round(ratio, 4))
    assert np.all(np.abs(ratio - 1.0) < V_ONLY_EXPOSURE_TOLERANCE), ratio


def test_a_g_only_star_gets_its_colour_from_teff():
    """G + Teff: BP-RP from Casagrande et al. (2021), reddened; it reproduces the R_C
    of the observed colour when that colour is the one the relation gives."""
    from prioritize.stars.photometry import bp_rp_from_teff, gaia_extinction_from_intrinsic

    teff, logg, feh, ebv = np.array([5000.0, 6000.0]), np.array([3.0, 4.3]), np.zeros(2), np.array([0.1, 0.0])
    x0 = bp_rp_from_teff(teff, logg, feh).value
    law = gaia_extinction_from_intrinsic(ebv, x0)
    nan = np.full(2, np.nan)
    observed, _ = exposure.r_c_from_catalog(r_mag=nan, g_mag=np.array([11.0, 12.0]), bp_rp=x0 + law.a_bp - law.a_rp,
                                            v_mag=nan, b_v=nan, teff=teff, logg=logg, feh=feh, ebv=ebv,
                                            giant=logg < 3.5)
    derived, source = exposure.r_c_from_catalog(r_mag=nan, g_mag=np.array([11.0, 12.0]), bp_rp=nan, v_mag=nan,
                                                b_v=nan, teff=teff, logg=logg, feh=feh, ebv=ebv, giant=logg < 3.5)
    np.testing.assert_allclose(derived, observed, atol=1e-9)
    assert set(source) == {"G+BP-RP from Teff (Casagrande et al. 2021)"}
