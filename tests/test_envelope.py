"""Envelope integration, equation of state and mixing length against outside references.

Needs the ``grid`` extra (``rm-tables`` opacity tables); CI installs it.  Two
microphysics tables are built (~1.5 s each) and cached for the module.
"""

from __future__ import annotations

import sys

import numpy as np
import pytest

from prioritize.constants import (AMU_CGS, EV_ERG, H_PLANCK_CGS, K_B_CGS, M_ELECTRON_CGS,
                                  Z_SUN_TRACKS)
from prioritize.errors import ModelRangeError
from prioritize.stars import envelope, eos, opacity

# Helioseismic base of the solar convection zone: r = 0.713 R_sun (Christensen-Dalsgaard,
# Gough & Thompson 1991, ApJ 378, 413); T ~ 2.2 MK and rho ~ 0.19 g cm^-3
# (Christensen-Dalsgaard et al. 1996, Science 272, 1286, model S; Basu & Antia 2008, Phys.
# Rep. 457, 217) -- the T and rho values are from memory.
SUN_R_BCZ_RSUN = 0.713
SUN_T_BCZ_K = 2.2e6
SUN_RHO_BCZ_GCC = 0.19
R_BCZ_TOL_RSUN = 0.002          # calibration target, met by construction (root-finding tolerance)
T_BCZ_REL_TOL = 0.05            # 5 %: simplified EOS (Saha, no pressure ionisation) and grey atmosphere
RHO_BCZ_REL_TOL = 0.15          # 15 %: rho_bcz follows the adiabat's entropy, set by alpha and the surface
SUN_M_CZ_RANGE_MSUN = (0.02, 0.03)  # from memory, and solar models' 0.024-0.027
THIN_ENVELOPE_REL_TOL = 0.05    # adiabatic thin-envelope formula (KWW 2012, §10.3) vs integrator
SCIENCE_THIN_T_BCZ_K = 2.23e6   # computed from the formula with mu = 0.6 at r = 0.713 R_sun
SCIENCE_THIN_REL_TOL = 0.005    # rounding of the quoted 2.23 MK
HOT_STAR_M_CZ_MAX_MSUN = 1e-5   # F/A main-sequence envelopes are tiny (from memory)
GIANT_M_CZ_FRACTION = (0.65, 0.90)  # M_cz/M 0.70-0.84 on the lower giant branch (this model, OPAL)
GIANT_M_CZ_REL_TOL = 0.10       # within a few % of M - M_core (same computation); 10 % allowed here
GIANT_T_BCZ_RANGE_K = (2.5e6, 4.5e6)  # "below ~4 MK" (from memory), +~10 % for the round number
NABLA_AD_IDEAL = 0.4            # monatomic ideal gas, KWW §14 (textbook)
NABLA_AD_IDEAL_TOL = 0.005      # residual ionisation and radiation pressure at the chosen points
NABLA_AD_DIP_RANGE = (0.1, 0.2)  # ~0.2 in the H ionisation zone (computed from the Saha EOS); KWW fig. 14.x
PURE_HYDROGEN_NABLA_TOL = 2e-4  # finite-difference step 1e-4 of the numerical derivative
TABLE_NABLA_TOL = 0.005         # bilinear table (0.01 dex in T) vs direct derivative
SAHA_REL_TOL = 1e-8             # Newton iteration converged to 1e-13


@pytest.fixture(scope="module")
def solar_alpha():
    return envelope.calibrate_solar_alpha()


@pytest.mark.parametrize("x, z", [(None, Z_SUN_TRACKS), (0.735, 0.018)])
def test_sun_matches_helioseismology(x, z):
    """Calibrated Sun at the grid composition (X = 0.70, Z = 0.02) and at the present
    surface mixture (X = 0.735, Z = 0.018)."""
    alpha = envelope.calibrate_solar_alpha(z=z, x=x)
    sun = envelope.integrate_envelope(1.0, 1.0, 0.0, z, alpha, x=x)
    assert sun.quality == envelope.QUALITY_OK
    assert abs(sun.r_bcz_rsun - SUN_R_BCZ_RSUN) < R_BCZ_TOL_RSUN
    assert abs(sun.t_bcz_k / SUN_T_BCZ_K - 1.0) < T_BCZ_REL_TOL
    assert abs(sun.rho_bcz_gcc / SUN_RHO_BCZ_GCC - 1.0) < RHO_BCZ_REL_TOL
    assert SUN_M_CZ_RANGE_MSUN[0] < sun.m_cz_msun < SUN_M_CZ_RANGE_MSUN[1]
    # Li-burning isotherm (2.5 MK) lies below the solar convective base.
    assert sun.m_above_2p5mk_msun > sun.m_cz_msun


def test_thin_envelope_formula(solar_alpha):
    """Kippenhahn, Weigert & Weiss 2012, §10.3: T(r) = (2/5)(mu m_H G M/k)(1/r - 1/R) with mu = 0.6."""
    at_science_radius = envelope.thin_envelope_temperature(SUN_R_BCZ_RSUN, 1.0, 1.0, mu=0.6)
    assert abs(at_science_radius / SCIENCE_THIN_T_BCZ_K - 1.0) < SCIENCE_THIN_REL_TOL
    sun = envelope.integrate_envelope(1.0, 1.0, 0.0, Z_SUN_TRACKS, solar_alpha)
    formula = envelope.thin_envelope_temperature(sun.r_bcz_rsun, 1.0, 1.0, mu=0.6)
    assert abs(sun.t_bcz_k / formula - 1.0) < THIN_ENVELOPE_REL_TOL
    # The profile follows the same formula inside the envelope (below the
    # superadiabatic layer: deeper than 30 % of the envelope's depth in ln r).
    deep = envelope.PROFILE_DEPTH_FRACTIONS > 0.3
    expected = envelope.thin_envelope_temperature(sun.profile_r_rsun[deep], 1.0, 1.0, mu=0.6)
    assert np.all(np.abs(sun.profile_t_k[deep] / expected - 1.0) < THIN_ENVELOPE_REL_TOL)


def test_hot_main_sequence_star_has_a_tiny_envelope(solar_alpha):
    """1.8 M_sun near the ZAMS (R = 1.55 R_sun, L = 9 L_sun, T_eff ~ 8000 K; from memory)."""
    star = envelope.integrate_envelope(1.8, 1.55, np.log10(9.0), Z_SUN_TRACKS, solar_alpha)
    assert star.teff_k > 7000.0
    assert star.m_cz_msun < HOT_STAR_M_CZ_MAX_MSUN
    assert len(star.zones) >= 1       # the thin H/He I zone below the photosphere


def test_late_main_sequence_sun_is_deeper(solar_alpha):
    """1 M_sun near the end of the main sequence: L = 1.78 L_sun, T_eff = 5750 K (solar-
    metallicity tracks, from memory): cooler and larger than the Sun, so deeper."""
    radius = np.sqrt(1.78) * (5772.0 / 5750.0) ** 2
    old = envelope.integrate_envelope(1.0, radius, np.log10(1.78), Z_SUN_TRACKS, solar_alpha)
    sun = envelope.integrate_envelope(1.0, 1.0, 0.0, Z_SUN_TRACKS, solar_alpha)
    assert old.m_cz_msun > sun.m_cz_msun
    assert old.r_bcz_rsun / radius < sun.r_bcz_rsun


def test_lower_giant_branch_envelope_meets_the_core():
    """1.2 M_sun, R = 6 R_sun, L = 16 L_sun, M_core = 0.2 M_sun (a lower-giant-branch point)."""
    mass, core = 1.2, 0.2
    giant = envelope.solve_alpha_to_core(mass, 6.0, np.log10(16.0), Z_SUN_TRACKS, core)
    assert giant.quality == envelope.QUALITY_ALPHA_SOLVED
    assert GIANT_M_CZ_FRACTION[0] < giant.m_cz_msun / mass < GIANT_M_CZ_FRACTION[1]
    assert abs(giant.m_cz_msun / (mass - core) - 1.0) < GIANT_M_CZ_REL_TOL
    assert GIANT_T_BCZ_RANGE_K[0] < giant.t_bcz_k < GIANT_T_BCZ_RANGE_K[1]
    assert abs(giant.core_mismatch) < 0.1
    # The profile runs from the photosphere down to the base, getting denser and hotter.
    assert giant.profile_r_rsun[0] == pytest.approx(6.0)
    assert giant.profile_r_rsun[-1] == pytest.approx(giant.r_bcz_rsun)
    assert np.all(np.diff(giant.profile_rho_gcc) > 0) and np.all(np.diff(giant.profile_t_k) > 0)


def test_solar_alpha_runs_out_of_mass_above_a_giant_core(solar_alpha):
    """Computed with this envelope model: with the solar alpha the giant's envelope cannot meet the core."""
    giant = envelope.integrate_envelope(1.2, 6.0, np.log10(16.0), Z_SUN_TRACKS, solar_alpha, core_mass_msun=0.2)
    assert giant.quality in (envelope.QUALITY_HIT_CORE, envelope.QUALITY_CORE_MISMATCH)
    assert np.exp(giant.core_mismatch) * envelope.DEFAULT_CORE_RADIUS_RSUN > envelope.CORE_RADIUS_WINDOW_RSUN[1]


def test_nabla_ad_of_pure_hydrogen_matches_the_analytic_formula():
    """KWW (2012) §14.3, pure ionising hydrogen without radiation (from memory):
    nabla_ad = [2 + y(1-y)(5/2 + chi/kT)] / [5 + y(1-y)(5/2 + chi/kT)^2]."""
    t_k = np.array([8e3, 1.2e4, 1.6e4, 2e4, 3e4])
    p = np.full(t_k.shape, 1e9)          # radiation pressure < 1e-5 of the total here
    state = eos.gas_state(t_k, p, 1.0, 0.0)
    y = state.hydrogen_ionised
    phi = eos.HYDROGEN_IONISATION_EV * EV_ERG / (K_B_CGS * t_k)
    expected = (2 + y * (1 - y) * (2.5 + phi)) / (5 + y * (1 - y) * (2.5 + phi) ** 2)
    assert np.allclose(eos.adiabatic_gradient(t_k, p, 1.0, 0.0), expected, atol=PURE_HYDROGEN_NABLA_TOL, rtol=0)


def test_saha_ionisation_of_pure_hydrogen():
    """KWW eq. 14.13: y^2/(1 - y) = (2 pi m_e k T/h^2)^(3/2) exp(-chi/kT) / n_H."""
    t_k = np.array([9e3, 1.3e4, 2e4])
    state = eos.gas_state(t_k, np.full(3, 1e6), 1.0, 0.0)
    n_h = state.rho_gcc / (eos.HYDROGEN_AMU * AMU_CGS)
    rhs = ((2 * np.pi * M_ELECTRON_CGS * K_B_CGS * t_k / H_PLANCK_CGS**2) ** 1.5
           * np.exp(-eos.HYDROGEN_IONISATION_EV * EV_ERG / (K_B_CGS * t_k)) / n_h)
    y_expected = 0.5 * (-rhs + np.sqrt(rhs**2 + 4 * rhs))
    assert np.allclose(state.hydrogen_ionised, y_expected, rtol=SAHA_REL_TOL, atol=0)


def test_nabla_ad_of_solar_gas():
    """Textbook (KWW 2012, ch. 14): ~0.40 neutral and fully ionised; dips to ~0.1-0.2 where H ionises."""
    neutral = eos.adiabatic_gradient(5000.0, 1e5, 0.70, 0.02)
    ionised = eos.adiabatic_gradient(2.0e6, 6e13, 0.70, 0.02)   # solar convective base
    assert abs(neutral - NABLA_AD_IDEAL) < NABLA_AD_IDEAL_TOL
    assert abs(ionised - NABLA_AD_IDEAL) < 3 * NABLA_AD_IDEAL_TOL
    t_k = np.logspace(3.9, 4.6, 120)
    dip = eos.adiabatic_gradient(t_k, np.full(t_k.shape, 1e7), 0.70, 0.02).min()
    assert NABLA_AD_DIP_RANGE[0] <= dip <= NABLA_AD_DIP_RANGE[1]


def test_tabulated_eos_matches_the_direct_derivative():
    log_t = np.arange(3.7, 4.8, 0.01)
    log_p = np.arange(6.0, 8.0, 0.025)
    table = eos.tabulate_eos(0.70, 0.02, log_t, log_p)
    tt, pp = np.meshgrid(10**log_t[1:-1], 10**log_p[1:-1], indexing="ij")
    direct = eos.adiabatic_gradient(tt, pp, 0.70, 0.02)
    assert np.max(np.abs(table.nabla_ad[1:-1, 1:-1] - direct)) < TABLE_NABLA_TOL


@pytest.mark.parametrize("u, w", [(1e-3, 0.5), (0.1, 1.0), (3.0, 2.0), (50.0, 10.0)])
def test_mixing_length_cubic_against_numpy_roots(u, w):
    """KWW eq. 7.18 solved here vs the real root xi > U from numpy.roots."""
    nabla_ad = 0.3
    coeffs = [1.0, 8 * u / 9 - 3 * u, 3 * u**2, -u**3 - 8 * u * (u**2 + w) / 9]
    roots = np.roots(coeffs)
    xi = max(r.real for r in roots if abs(r.imag) < 1e-9 and r.real > u)
    expected = nabla_ad + xi**2 - u**2
    got = envelope.mixing_length_gradient(nabla_ad + w, nabla_ad, u)
    assert got == pytest.approx(expected, rel=1e-8)
    assert nabla_ad < got < nabla_ad + w


def test_mixing_length_limits():
    """Efficient convection (U -> 0) gives nabla_ad; inefficient (U -> inf) nabla_rad."""
    got = envelope.mixing_length_gradient([1.0, 1.0, 0.2], [0.4, 0.4, 0.4], [1e-9, 1e9, 1.0])
    assert got[0] == pytest.approx(0.4, abs=1e-5)
    assert got[1] == pytest.approx(1.0, abs=1e-5)
    assert got[2] == 0.2                    # radiative layer: nabla_rad untouched


def _illustrative_track():
    """Nine points of an illustrative 1.2 M_sun track (not a published track): main
    sequence, subgiant, lower giant branch; core masses on the giant branch from the
    core mass-luminosity relation L ~ 2.3e5 M_c^6 (Refsdal & Weigert 1970, from memory)."""
    kstar = np.array([1, 1, 1, 2, 2, 3, 3, 3, 3])
    radius = np.array([1.15, 1.4, 1.7, 2.0, 2.6, 3.5, 5.0, 7.0, 10.0])
    lum = np.array([1.8, 2.5, 3.2, 3.4, 3.6, 5.0, 10.0, 20.0, 38.0])
    core = np.where(kstar >= 2, np.maximum((lum / 2.3e5) ** (1 / 6), 0.10), 0.0)
    teff = 5772.0 * lum**0.25 / np.sqrt(radius)
    return dict(mass_msun=np.full(9, 1.2), logr=np.log10(radius), logl=np.log10(lum),
                logteff=np.log10(teff), core_mass_msun=core, kstar=kstar)


def test_envelope_along_track(solar_alpha):
    track = _illustrative_track()
    out = envelope.envelope_along_track(track, Z_SUN_TRACKS, solar_alpha)
    n = track["kstar"].size
    for name in envelope.TRACK_COLUMNS + ("envelope_quality",):
        assert out[name].shape == (n,)
    for name in envelope.PROFILE_COLUMNS:
        assert out[name].shape == (n, envelope.PROFILE_POINTS)
    quality = out["envelope_quality"]
    assert np.all(quality[:3] == envelope.TRACK_QUALITY_OK)
    assert np.all(quality[5:] == envelope.TRACK_QUALITY_ALPHA_SOLVED)
    assert np.all(out["alpha_mlt"][:3] == solar_alpha)
    m_cz = out["m_cz_msun"]
    assert np.all(np.isfinite(m_cz))
    assert m_cz[0] < 0.01 < 0.5 < m_cz[-1]            # F dwarf -> giant after first dredge-up
    # Bump: first giant point whose core reaches the deepest envelope penetration.
    bump = int(out["rgb_bump_eep"])
    deepest = np.min(track["mass_msun"][3:] - m_cz[3:])
    assert bump >= 0 and track["core_mass_msun"][bump] >= deepest > track["core_mass_msun"][bump - 1]


def test_bad_inputs_raise_package_errors():
    with pytest.raises(ModelRangeError, match="mass_msun"):
        envelope.integrate_envelope(-1.0, 1.0, 0.0, 0.02, 2.0)
    with pytest.raises(ModelRangeError, match="core_mass_msun"):
        envelope.integrate_envelope(1.0, 5.0, 1.0, 0.02, 2.0, core_mass_msun=1.5)
    with pytest.raises(ModelRangeError, match="one star"):
        envelope.integrate_envelope([1.0, 1.1], 1.0, 0.0, 0.02, 2.0)
    with pytest.raises(ModelRangeError, match="kstar"):
        envelope.envelope_along_track({"mass_msun": [1.0]}, 0.02, 2.0)
    with pytest.raises(ModelRangeError):
        opacity.rosseland_mean_opacity(1e4, 1e-8, 0.5, 0.6)


def test_missing_opacity_package_names_the_grid_extra(monkeypatch):
    monkeypatch.setitem(sys.modules, "rm_tables", None)
    with pytest.raises(ImportError, match=r"prioritize\[grid\]"):
        opacity.opacity_function(0.6123, 0.0123)
