"""Stellar parameters from photometry, checked against published values and references.

Sources of the check values:
- Teff of the Casagrande+2021 (MNRAS 507, 2684), Casagrande+2010 (A&A 512, A54) and
  Alonso+1999 (A&AS 140, 261) relations, computed from the published coefficients.
- BC_V (Torres 2010, AJ 140, 1158) and BC_G (Andrae+2018, A&A 616, A8), computed from the
  published coefficients.
- Gaia extinction ratios at X = 1, A0 = 0.3 (Babusiaux+2018, A&A 616, A10).
- The `extinction` library (PyPI), function `extinction.ccm89`: CCM89 A(lambda)/A_V.
- astropy.constants (IAU 2015 nominal values: L_bol0, L_sun, R_sun, M_sun, sigma_sb, G).
- Worked examples computed by hand in the docstrings below.
"""

import astropy.constants as const
import astropy.units as u
import extinction
import numpy as np
import pandas as pd
import pytest

from prioritize.errors import CatalogError, PrioritizeError
from prioritize.stars import photometry as ph

TEFF_TOL_K = 5.0            # the colour-Teff check values are rounded to 1 K; 5 K allowed
BC_TOL_MAG = 0.005          # the BC check table is rounded to 0.001 mag
RATIO_TOL = 0.005           # the Babusiaux et al. 2018 ratios are rounded to 0.01
EXCESS_RATIO_TOL = 0.05     # E(BP-RP)/E(B-V) ~ 1.4 is quoted to 0.1
CCM_TOL = 0.001             # CCM89 A(6708)/A_V = 0.795 (the `extinction` library) to 3 decimals
ROUND_TRIP_TOL_MAG = 1e-8   # bisection to ~1e-14 mag; margin for rounding
ITERATION_TOL_MAG = 1e-8    # Newton on the intrinsic colour
HAND_TOL_DEX = 1e-6         # hand-worked arithmetic, exact to the digits shown
HAND_TOL_K = 0.01           # hand-worked Teff, rounded to 0.01 K
IAU_REL_TOL = 1e-4          # IAU 2015 nominal values agree to their quoted digits
LOGG_TOL_DEX = 1e-3         # LOGG_SUN = 4.438 is quoted to 3 decimals


# ---------------------------------------------------------------- colour -> Teff

@pytest.mark.parametrize("bp_rp0, logg, feh, expected", [
    (0.82, 4.44, 0.0, 5762.0),
    (1.20, 2.5, 0.0, 4716.0),
    (1.20, 2.5, -0.5, 4696.0),
    (1.40, 2.5, 0.0, 4378.0),
])
def test_casagrande2021_check_values(bp_rp0, logg, feh, expected):
    """Check values of Casagrande et al. 2021 (Gaia DR3 BP-RP)."""
    result = ph.teff_from_bp_rp(bp_rp0, logg, feh)
    assert result.valid
    assert abs(result.value - expected) <= TEFF_TOL_K


def test_casagrande2010_check_values():
    """Casagrande et al. 2010: C10 at B-V = 0.653 gives 5741 K ([Fe/H] = 0) and 5498 K (-1)."""
    result = ph.teff_from_b_v_dwarf([0.653, 0.653], [0.0, -1.0])
    np.testing.assert_allclose(result.value, [5741.0, 5498.0], atol=TEFF_TOL_K)
    assert result.valid.all()


def test_alonso1999_check_values():
    """Alonso et al. 1999: A99 giants at B-V = 1.00 and 1.20 give 4804 K and 4443 K."""
    result = ph.teff_from_b_v_giant([1.00, 1.20], 0.0)
    np.testing.assert_allclose(result.value, [4804.0, 4443.0], atol=TEFF_TOL_K)


def test_colour_teff_validity_ranges():
    """Published ranges of the relations: C21 X <= 2.00 for logg > 3.2 but <= 2.55 for logg <= 3.2,
    logg 0-5, [Fe/H] -4 to 0.6; C10 0.18-1.29; A99 0.20-1.70.  NaN in -> NaN out."""
    c21 = ph.teff_from_bp_rp([2.2, 2.2, 0.1, 1.0, 1.0, np.nan], [4.4, 2.5, 4.4, 4.4, 5.5, 4.4],
                             [0.0, 0.0, 0.0, 0.7, 0.0, 0.0])
    assert c21.valid.tolist() == [False, True, False, False, False, False]
    assert np.isnan(c21.value[~c21.valid]).all()
    c10 = ph.teff_from_b_v_dwarf([0.17, 0.18, 1.29, 1.30, 0.6], [0, 0, 0, 0, 0.5])
    assert c10.valid.tolist() == [False, True, True, False, False]
    a99 = ph.teff_from_b_v_giant([0.19, 1.70, 1.71, 1.0], [0, 0, 0, -3.1])
    assert a99.valid.tolist() == [False, True, False, False]


def test_casagrande2010_metal_poor_floor():
    """C10 Table 4 note: stars below [Fe/H] = -3.5 are evaluated at -3.5."""
    result = ph.teff_from_b_v_dwarf(0.5, [-3.5, -4.5])
    assert result.value[0] == result.value[1]


def test_alonso1999_blend_is_continuous_and_matches_each_relation_at_the_overlap_edges():
    """A99 coefficients (Alonso et al. 1999) at [Fe/H] = 0, by hand:
    X = 0.70, blue: theta = 0.5716 + 0.5404*0.70 - 0.06126*0.49 = 0.9198626 -> 5479.08 K;
    X = 0.80, red:  theta = 0.6177 + 0.4354*0.80 - 0.004025*0.64 = 0.963444 -> 5231.23 K.
    In between the blend falls monotonically without steps."""
    result = ph.teff_from_b_v_giant([0.70, 0.80], 0.0).value
    np.testing.assert_allclose(result, [5479.08, 5231.23], atol=HAND_TOL_K)
    fine = ph.teff_from_b_v_giant(np.linspace(0.69, 0.81, 121), 0.0).value
    assert np.all(np.diff(fine) < 0.0)
    assert np.max(np.abs(np.diff(fine))) < 5.0   # 1e-3 mag steps; a jump would show here


@pytest.mark.parametrize("logg, feh", [(4.44, 0.0), (2.5, 0.0), (2.5, -0.5), (1.0, 0.6), (4.0, -2.0)])
def test_bp_rp_from_teff_round_trip(logg, feh):
    """teff_from_bp_rp(bp_rp_from_teff(T)) == T over the monotonic part of the C21 range."""
    colours = np.linspace(0.2, 2.0, 37)
    teff = ph.teff_from_bp_rp(colours, logg, feh).value
    back = ph.bp_rp_from_teff(teff, logg, feh)
    assert back.valid.all()
    np.testing.assert_allclose(back.value, colours, atol=ROUND_TRIP_TOL_MAG)


def test_bp_rp_from_teff_outside_range_is_nan():
    """Teff hotter than C21 at X = 0.20 or cooler than its reddest colour has no colour."""
    hottest = ph.teff_from_bp_rp(0.2, 4.44, 0.0).value
    coolest = ph.teff_from_bp_rp(2.0, 4.44, 0.0).value
    result = ph.bp_rp_from_teff([hottest + 50.0, coolest - 50.0, np.nan], 4.44, 0.0)
    assert not result.valid.any()
    assert np.isnan(result.value).all()


def test_bp_rp_from_teff_single_valued_where_the_fit_turns_over():
    """For logg 2.5, [Fe/H] 0 the cubic C21 fit has a Teff minimum inside X <= 2.55; the
    inverse must return the blue branch, i.e. colours that map back to the same Teff."""
    colours = np.linspace(2.0, 2.55, 56)
    teff = ph.teff_from_bp_rp(colours, 2.5, 0.0).value
    back = ph.bp_rp_from_teff(teff, 2.5, 0.0)
    np.testing.assert_allclose(ph.teff_from_bp_rp(back.value, 2.5, 0.0).value[back.valid],
                               teff[back.valid], atol=1e-6)
    assert np.all(back.value[back.valid] <= colours[back.valid] + ROUND_TRIP_TOL_MAG)


# ---------------------------------------------------------------- extinction

def test_gaia_extinction_ratios_at_reference_point():
    """Babusiaux et al. 2018: at X = 1, A0 = 0.3, A_G/A_V = 0.81,
    A_BP/A_V = 1.04, A_RP/A_V = 0.59 and E(BP-RP) ~ 1.4 E(B-V)."""
    ebv = 0.3 / 3.1
    result = ph.gaia_extinction_from_intrinsic(ebv, 1.0)
    a_v = ph.a_v_from_ebv(ebv)
    assert abs(result.a_g / a_v - 0.81) <= RATIO_TOL
    assert abs(result.a_bp / a_v - 1.04) <= RATIO_TOL
    assert abs(result.a_rp / a_v - 0.59) <= RATIO_TOL
    assert abs((result.a_bp - result.a_rp) / ebv - 1.4) <= EXCESS_RATIO_TOL


def test_gaia_extinction_recovers_intrinsic_colour():
    """Redden known intrinsic colours, then recover them from the observed colour."""
    intrinsic = np.linspace(-0.2, 3.0, 33)[:, None]
    ebv = np.linspace(0.0, 3.0, 31)[None, :]
    forward = ph.gaia_extinction_from_intrinsic(ebv, intrinsic)
    observed = intrinsic + forward.a_bp - forward.a_rp
    back = ph.gaia_extinction(ebv, observed)
    np.testing.assert_allclose(back.bp_rp0, np.broadcast_to(intrinsic, back.bp_rp0.shape),
                               atol=ITERATION_TOL_MAG)
    np.testing.assert_allclose(back.a_g, forward.a_g, atol=ITERATION_TOL_MAG)


def test_gaia_extinction_zero_reddening_and_invalid_input():
    """E(B-V) = 0 means no extinction even without a colour; negative E(B-V) is invalid."""
    result = ph.gaia_extinction([0.0, -0.1, np.nan], [np.nan, 1.0, 1.0])
    assert result.valid.tolist() == [True, False, False]
    assert result.a_g[0] == 0.0 and result.a_bp[0] == 0.0 and result.a_rp[0] == 0.0
    assert np.isnan(result.a_g[1:]).all()


def test_ccm89_v_band_from_extinction_library():
    """extinction.ccm89 is normalised so A(5494.5 A) = A_V; a_v_from_ebv gives that A_V."""
    ebv = np.array([0.1, 0.5])
    a_v = ph.a_v_from_ebv(ebv)
    for value in a_v:
        assert extinction.ccm89(np.array([5494.5]), value, 3.1)[0] == pytest.approx(value, rel=1e-3)
    np.testing.assert_allclose(a_v, 3.1 * ebv, rtol=1e-12)


def test_a_6708_over_a_v_from_extinction_library():
    """A(6708 A)/A_V of CCM89 at R_V = 3.1 from extinction.ccm89 equals our constant."""
    ratio = extinction.ccm89(np.array([6708.0]), 1.0, 3.1)[0]
    assert abs(ratio - ph.A_6708_OVER_A_V) <= CCM_TOL


def test_a_v_from_ebv_rejects_bad_r_v_and_flags_negative_ebv():
    with pytest.raises(PrioritizeError, match="r_v"):
        ph.a_v_from_ebv(0.1, r_v=0.0)
    assert np.isnan(ph.a_v_from_ebv(-0.05))


# ---------------------------------------------------------------- bolometric corrections

BC_TABLE_TEFF = [4000.0, 4500.0, 5000.0, 5772.0, 6500.0]


def test_bc_v_torres_table():
    """BC_V (Torres 2010) = -1.124, -0.602, -0.286, -0.081, +0.007."""
    result = ph.bc_v(BC_TABLE_TEFF)
    np.testing.assert_allclose(result.value, [-1.124, -0.602, -0.286, -0.081, 0.007], atol=BC_TOL_MAG)


def test_bc_g_andrae_table():
    """BC_G (Andrae+2018) = -0.498, -0.211, -0.047, +0.060, +0.083."""
    result = ph.bc_g(BC_TABLE_TEFF)
    np.testing.assert_allclose(result.value, [-0.498, -0.211, -0.047, 0.060, 0.083], atol=BC_TOL_MAG)


def test_bc_validity():
    """BC_G valid 3300-8000 K (Andrae+2018); outside -> NaN and invalid."""
    result = ph.bc_g([3299.0, 3300.0, 8000.0, 8001.0, np.nan])
    assert result.valid.tolist() == [False, True, True, False, False]
    assert np.isnan(result.value[~result.valid]).all()


def test_bc_g_error_matches_table_slope():
    """Mean-value check on the BC_G table (Andrae+2018): between 5000 K and 5772 K BC_G rises by
    0.060 - (-0.047) = 0.107 mag, i.e. 1.386e-4 mag/K on average; the derivative at the
    midpoint 5386 K times a 100 K error must match 0.01386 mag to within the table's
    rounding (2 x 0.0005 mag over 772 K -> 1.3e-4 mag for 100 K) plus the cubic term by
    which a midpoint derivative differs from a secant (~6e-4 mag here)."""
    error = ph.bolometric_correction_error(5386.0, 100.0, "G")
    assert abs(error - 0.01386) <= 0.001


def test_bc_v_error_matches_table_slope():
    """As above for BC_V (Torres 2010), inside one polynomial piece:
    from 5772 K to 6500 K BC_V rises by 0.007 - (-0.081) = 0.088 mag, 1.209e-4 mag/K;
    at the midpoint 6136 K x 100 K -> 0.01209 mag, within the rounding (1.4e-4 mag) and
    the secant-versus-derivative term (~4e-4 mag)."""
    error = ph.bolometric_correction_error(6136.0, 100.0, "V")
    assert abs(error - 0.01209) <= 0.001
    with pytest.raises(PrioritizeError, match="band"):
        ph.bolometric_correction_error(5000.0, 100.0, "K")


# ---------------------------------------------------------------- luminosity, radius, gravity

def test_sun_mbol_gives_one_solar_luminosity():
    """The Sun seen from 10 pc (parallax 100 mas): G = M_bol,sun - BC_G(5772 K) gives L = 1.
    Independently, IAU 2015 B2: L = L_bol0 10^(-0.4 M_bol) with L_bol0 = 3.0128e28 W
    (astropy.constants.L_bol0) gives L_sun (3.828e26 W) at M_bol = 4.74."""
    bc = ph.bc_g(5772.0).value
    result = ph.log_luminosity_from_parallax(4.74 - bc, 100.0, 0.0, bc)
    assert abs(result.logl_lsun) <= HAND_TOL_DEX
    iau = (const.L_bol0 * 10 ** (-0.4 * 4.74) / const.L_sun).decompose().value
    assert abs(iau - 1.0) <= IAU_REL_TOL
    assert 10.0 ** result.logl_lsun == pytest.approx(iau, rel=IAU_REL_TOL)


def test_worked_example_luminosity_from_parallax():
    """G = 10 at 100 pc (parallax 10 mas), Teff = 5772 K, no extinction.
    BC_G(5772) = +0.060 (Andrae+2018, a0); M_G = 10 - 5 log10(100/10) = 5.000;
    M_bol = 5.060; log L = -0.4 (5.060 - 4.74) = -0.128.
    Errors: parallax 0.5 mas (5 %) and G 0.01 mag: sigma = sqrt((2/ln10 * 0.05)^2 +
    (0.4 * 0.01)^2) = sqrt(0.0434294^2 + 0.004^2) = 0.0436133 dex."""
    bc = ph.bc_g(5772.0).value
    by_parallax = ph.log_luminosity_from_parallax(10.0, 10.0, 0.0, bc, parallax_mas_err=0.5)
    by_distance = ph.log_luminosity_from_distance(10.0, 100.0, 0.0, bc)
    assert abs(by_parallax.logl_lsun - (-0.128)) <= HAND_TOL_DEX
    assert abs(by_distance.logl_lsun - (-0.128)) <= HAND_TOL_DEX
    error = ph.log_luminosity_error(10.0, 0.5, 0.01, 0.0, 0.0)
    assert abs(error - 0.0436133) <= HAND_TOL_DEX


def test_bad_parallax_gives_nan_and_reason():
    """Parallax <= 0, > 20 % error or missing: NaN luminosity with a reason, no exception."""
    result = ph.log_luminosity_from_parallax(10.0, [10.0, 0.0, -1.0, 10.0, 10.0, np.nan], 0.0, 0.0,
                                             parallax_mas_err=[1.5, 0.1, 0.1, 2.5, np.nan, 0.1])
    assert result.valid.tolist() == [True, False, False, False, True, False]
    assert result.reason.tolist() == ["", "parallax ≤ 0", "parallax ≤ 0", "parallax error > 20%", "",
                                      "no parallax"]
    assert np.isnan(result.logl_lsun[~result.valid]).all()


def test_radius_against_astropy_stefan_boltzmann():
    """R = sqrt(L / (4 pi sigma T^4)) with astropy's constants.  Hand value for
    L = 100 L_sun, Teff = 4800 K: R = 10 (5772/4800)^2 = 10 x 1.44601 = 14.460 R_sun."""
    radius = ph.radius_from_l_teff([0.0, 2.0], [5772.0, 4800.0])
    luminosity = np.array([1.0, 100.0]) * const.L_sun
    temperature = np.array([5772.0, 4800.0]) * u.K
    reference = np.sqrt(luminosity / (4 * np.pi * const.sigma_sb * temperature**4)) / const.R_sun
    np.testing.assert_allclose(radius, reference.decompose().value, rtol=IAU_REL_TOL)
    assert abs(radius[1] - 14.460) <= 1e-3


def test_logg_against_astropy():
    """log g = log10(G M / R^2) in cgs with astropy's G, M_sun, R_sun; the Sun gives 4.438."""
    mass, radius = np.array([1.0, 1.2]), np.array([1.0, 5.0])
    reference = np.log10((const.G * mass * const.M_sun / (radius * const.R_sun) ** 2).cgs.value)
    np.testing.assert_allclose(ph.logg_from_mass_radius(mass, radius), reference, atol=LOGG_TOL_DEX)
    assert np.isnan(ph.logg_from_mass_radius(-1.0, 1.0))


def test_bad_input_raises_package_errors():
    with pytest.raises(PrioritizeError, match="bp_rp0"):
        ph.teff_from_bp_rp("red", 4.4, 0.0)
    with pytest.raises(PrioritizeError, match="shapes"):
        ph.teff_from_bp_rp([1.0, 1.1], [4.4, 4.4, 4.4], 0.0)
    with pytest.raises(PrioritizeError, match="n_iter"):
        ph.gaia_extinction(0.1, 1.0, n_iter=0)


# ---------------------------------------------------------------- derive_stellar_parameters

OUTPUT_COLUMNS = ["teff_k", "teff_k_err", "teff_source", "logl_lsun", "logl_lsun_err", "logl_source",
                  "radius_rsun", "radius_source", "feh", "feh_err", "feh_source", "ebv_used",
                  "ebv_source", "a_g_mag", "a_v_mag", "deriv_note"]


def test_derive_catalog_values_win():
    """Given Teff, L and [Fe/H] are kept even when colours and a parallax are present."""
    df = pd.DataFrame({"teff_k": [4700.0], "teff_k_err": [80.0], "logl_lsun": [1.5],
                       "logl_lsun_err": [0.05], "feh": [-0.3], "feh_err": [0.1], "bp_rp": [0.82],
                       "g_mag": [10.0], "parallax_mas": [10.0], "parallax_mas_err": [0.1],
                       "ebv": [0.0]}, index=["star-a"])
    out = ph.derive_stellar_parameters(df)
    assert list(out.columns) == OUTPUT_COLUMNS
    assert list(out.index) == ["star-a"]
    row = out.loc["star-a"]
    assert (row.teff_k, row.teff_k_err, row.teff_source) == (4700.0, 80.0, "catalog")
    assert (row.logl_lsun, row.logl_lsun_err, row.logl_source) == (1.5, 0.05, "catalog")
    assert (row.feh, row.feh_err, row.feh_source) == (-0.3, 0.1, "catalog")
    assert row.radius_source == "L+Teff"
    assert row.radius_rsun == pytest.approx(ph.radius_from_l_teff(1.5, 4700.0))


def test_derive_teff_relations_and_sources():
    """Rows reproduce the colour-Teff check values through the table entry point:
    C21 at X = 0.82, logg 4.44 (catalog logg) -> 5762 K, also after reddening the colour;
    C10 (dwarf stage) at B-V = 0.653 -> 5741 K; A99 (giant stage) at B-V = 1.00 -> 4804 K."""
    ebv_red = 0.2
    reddening = ph.gaia_extinction_from_intrinsic(ebv_red, 0.82)
    df = pd.DataFrame({
        "bp_rp": [0.82, 0.82 + reddening.a_bp - reddening.a_rp, np.nan, np.nan],
        "logg": [4.44, 4.44, np.nan, np.nan],
        "b_v": [np.nan, np.nan, 0.653, 1.00],
        "ebv": [0.0, ebv_red, 0.0, 0.0],
        "stage": ["main_sequence", "main_sequence", "subgiant", "red_clump"],
    })
    out = ph.derive_stellar_parameters(df)
    np.testing.assert_allclose(out.teff_k, [5762.0, 5762.0, 5741.0, 4804.0], atol=TEFF_TOL_K)
    assert out.teff_source.tolist() == ["bp_rp_c21(logg=catalog)", "bp_rp_c21(logg=catalog)",
                                        "b_v_c10", "b_v_a99"]
    assert out.feh_source.eq("assumed solar").all() and out.feh_err.eq(ph.ASSUMED_FEH_ERR).all()


def test_derive_teff_errors_are_the_published_scatter_when_inputs_are_exact():
    """With exact colour, E(B-V), logg and [Fe/H] the Teff error is the relation's scatter:
    C10 73 K (Casagrande+2010 Table 4); C21 sqrt(70^2 + 20^2) K (scatter from memory,
    20 K zero point of Casagrande+2021)."""
    df = pd.DataFrame({"bp_rp": [0.82, np.nan], "b_v": [np.nan, 0.653], "logg": [4.44, 4.3],
                       "logg_err": [0.0, 0.0], "feh": [0.0, 0.0], "feh_err": [0.0, 0.0],
                       "ebv": [0.0, 0.0], "ebv_err": [0.0, 0.0]})
    out = ph.derive_stellar_parameters(df)
    np.testing.assert_allclose(out.teff_k_err, [np.hypot(70.0, 20.0), 73.0], rtol=1e-9)


def test_derive_logg_choice_is_recorded():
    """Catalog logg, then the caller's guess, then 4.0 / 2.5 by stage, then 4.0."""
    df = pd.DataFrame({"bp_rp": [1.2] * 5, "logg": [2.0, np.nan, np.nan, np.nan, np.nan],
                       "stage": ["red_clump", "red_clump", "main_sequence", "lower_giant_branch", None]})
    out = ph.derive_stellar_parameters(df, logg_guess=[np.nan, 3.0, np.nan, np.nan, np.nan])
    assert out.teff_source.tolist() == ["bp_rp_c21(logg=catalog)", "bp_rp_c21(logg=guess)",
                                        "bp_rp_c21(logg=stage 4.0)", "bp_rp_c21(logg=stage 2.5)",
                                        "bp_rp_c21(logg=assumed 4.0)"]
    expected = ph.teff_from_bp_rp(1.2, [2.0, 3.0, 4.0, 2.5, 4.0], 0.0).value
    np.testing.assert_allclose(out.teff_k, expected, rtol=1e-12)
    assert out.ebv_source.eq("assumed 0").all() and out.ebv_used.eq(0.0).all()


def test_derive_worked_luminosity_and_distance():
    """The worked example above through the table: G = 10, parallax 10 mas (or a cluster
    distance of 100 pc), Teff 5772 K from the catalog, E(B-V) = 0 -> log L = -0.128,
    R = sqrt(10^-0.128) = 0.8630 R_sun.  V = 10 with BC_V(5772) = -0.081 (Torres 2010):
    log L = -0.4 (10 - 5 - 0.081 - 4.74) = -0.0716."""
    df = pd.DataFrame({"teff_k": [5772.0] * 3, "g_mag": [10.0, 10.0, np.nan],
                       "v_mag": [np.nan, np.nan, 10.0], "parallax_mas": [10.0, np.nan, 10.0],
                       "parallax_mas_err": [0.1, np.nan, 0.1], "distance_pc": [np.nan, 100.0, np.nan],
                       "ebv": [0.0, 0.0, 0.0]})
    out = ph.derive_stellar_parameters(df)
    assert out.logl_source.tolist() == ["G+parallax", "G+distance", "V+parallax"]
    np.testing.assert_allclose(out.logl_lsun[:2], -0.128, atol=HAND_TOL_DEX)
    assert abs(out.logl_lsun[2] - (-0.0716)) <= 0.4 * BC_TOL_MAG
    assert abs(out.radius_rsun[0] - 0.8630) <= 1e-4
    assert out.deriv_note.eq("").all()


def test_derive_nan_and_invalid_rows_get_notes():
    """Nothing raises for bad rows: NaN values, 'none' sources and a note saying why."""
    df = pd.DataFrame({"bp_rp": [3.5, 0.82, np.nan, 0.82], "g_mag": [10.0, 10.0, 10.0, np.nan],
                       "parallax_mas": [5.0, -1.0, 5.0, 5.0], "logg": [4.4, 4.4, 4.4, 4.4],
                       "ebv": [0.0, 0.0, 0.0, -0.1]})
    out = ph.derive_stellar_parameters(df)
    assert np.isnan(out.teff_k[[0, 2, 3]]).all() and np.isfinite(out.teff_k[1])
    assert out.teff_source[[0, 2, 3]].eq("none").all()
    assert np.isnan(out.logl_lsun).all() and out.logl_source.eq("none").all()
    # the relation, its range (Casagrande et al. 2021, logg > 3.2: 0.20-2.00) and the colour used
    assert "(BP-RP)0 = 3.50" in out.deriv_note[0] and "Casagrande et al. 2021" in out.deriv_note[0]
    assert "0.20 to 2.00 mag" in out.deriv_note[0]
    assert "parallax ≤ 0" in out.deriv_note[1]
    assert "no colour given" in out.deriv_note[2]
    assert "ebv < 0" in out.deriv_note[3] and np.isnan(out.ebv_used[3])
    assert out.radius_source.eq("none").all()


def test_hot_and_reddened_stars_are_told_which_relation_they_leave():
    """A Teff above the G-band BC's range (Andrae et al. 2018: 3300-8000 K) and a colour
    an E(B-V) of 10 dereddens below the Casagrande et al. 2021 range (0.20 mag) are
    named with the relation and its range, not "give a Teff/colour"."""
    df = pd.DataFrame({"teff_k": [20000.0, np.nan], "g_mag": [9.0, 12.0], "bp_rp": [0.0, 3.5],
                       "parallax_mas": [5.0, 2.0], "ebv": [0.0, 10.0]})
    out = ph.derive_stellar_parameters(df)
    assert "Teff = 20000 K" in out.deriv_note[0] and "Andrae et al. 2018" in out.deriv_note[0]
    assert "3300 to 8000 K" in out.deriv_note[0] and "logl_lsun" in out.deriv_note[0]
    assert "E(B-V) = 10.00" in out.deriv_note[1] and "very large" in out.deriv_note[1]
    assert "Casagrande et al. 2021" in out.deriv_note[1]


def test_derive_empty_and_bad_tables():
    empty = ph.derive_stellar_parameters(pd.DataFrame())
    assert list(empty.columns) == OUTPUT_COLUMNS and len(empty) == 0
    with pytest.raises(PrioritizeError, match="DataFrame"):
        ph.derive_stellar_parameters({"teff_k": [5000.0]})
    with pytest.raises(CatalogError, match="parallax_mas"):
        ph.derive_stellar_parameters(pd.DataFrame({"parallax_mas": [1.0, "n/a"]}))
    with pytest.raises(PrioritizeError, match="logg_guess"):
        ph.derive_stellar_parameters(pd.DataFrame({"bp_rp": [1.0, 1.1]}), logg_guess=[4.0, 4.0, 4.0])
