"""Column contract, per-row validation, placement routes and the check report.

Physical anchors (values real stars have, which the allowed ranges must accept):
the Sun (IAU 2015 nominal values in ``prioritize.constants``), Proxima Centauri's
parallax, Sirius' V magnitude and the meteoritic lithium abundance (Asplund et al. 2009, ARA&A 47, 481).
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest

from prioritize import constants
from prioritize.catalog import status
from prioritize.catalog.columns import (ALIASES, INPUT_COLUMNS, OUTPUT_COLUMNS, check_column_map,
                                        format_column_table, recognise)
from prioritize.catalog.validate import (MAX_LISTED_ROWS, ROUTE_CLUSTER, ROUTE_MASS_STAGE, ROUTE_NONE,
                                         ROUTE_TEFF_L, ROUTE_TEFF_LOGG, check_report, computable_from,
                                         normalise_stage, validate_catalog)
from prioritize.errors import CatalogError, ConfigError

PROXIMA_PARALLAX_MAS = 768.0665      # Gaia DR3, the largest stellar parallax (from memory)
SIRIUS_V_MAG = -1.46                 # brightest star in V (from memory)
ZETA_PUP_TEFF_K = 40000.0            # an O4 supergiant, among the hottest bright stars (from memory)
# Coerced numbers must equal the text they came from to float64 precision.
COERCION_RTOL = 0.0                  # exact: float(text) is what pandas.to_numeric computes

BRIEF_COLUMNS = (
    "star_id ra_deg dec_deg g_mag g_mag_err bp_mag rp_mag bp_rp bp_rp_err v_mag v_mag_err b_v b_v_err "
    "r_mag parallax_mas parallax_mas_err distance_pc ebv ebv_err ebp_rp a_g_ext teff_k teff_k_err logg logg_err "
    "logl_lsun logl_lsun_err feh feh_err mass_msun mass_msun_err numax_uhz numax_uhz_err dnu_uhz dnu_uhz_err "
    "stage prot_d prot_d_err vsini_kms "
    "vsini_kms_err a_li a_li_err a_li_is_limit cluster cluster_age_gyr cluster_feh cluster_distance_pc "
    "cluster_ebv member_prob").split()


# ------------------------------------------------------------------ column contract

def test_canonical_columns_are_the_contract_in_order():
    assert list(INPUT_COLUMNS) == BRIEF_COLUMNS
    for spec in INPUT_COLUMNS.values():
        assert spec.dtype in ("float64", "str", "bool") and spec.description
        if spec.name.endswith("_err"):
            assert spec.lo == 0.0 and spec.unit == INPUT_COLUMNS[spec.name[:-4]].unit


@pytest.mark.parametrize("spelling, canonical", [
    ("source_id", "star_id"), ("id", "star_id"), ("Name", "star_id"),
    ("ra", "ra_deg"), ("RAdeg", "ra_deg"), ("DEdeg", "dec_deg"),
    ("Teff", "teff_k"), ("teff", "teff_k"), ("TEFF_K", "teff_k"),
    ("e_Teff", "teff_k_err"), ("teff_err", "teff_k_err"),
    ("plx", "parallax_mas"), ("parallax", "parallax_mas"),
    ("parallax_error", "parallax_mas_err"), ("e_plx", "parallax_mas_err"),
    ("phot_g_mean_mag", "g_mag"), ("Gmag", "g_mag"), ("G", "g_mag"),
    ("bp_rp", "bp_rp"), ("BP-RP", "bp_rp"),
    ("[Fe/H]", "feh"), ("feh", "feh"), ("fe_h", "feh"), ("mh", "feh"), ("e_[Fe/H]", "feh_err"),
    ("E(B-V)", "ebv"), ("ebv", "ebv"), ("B-V", "b_v"), ("e_B-V", "b_v_err"),
    ("logL", "logl_lsun"), ("log_l", "logl_lsun"),
    ("mass", "mass_msun"), ("M", "mass_msun"),
    ("Prot", "prot_d"), ("period", "prot_d"), ("vsini", "vsini_kms"),
    ("ALi", "a_li"), ("A_Li", "a_li"), ("a(li)", "a_li"), ("e_ALi", "a_li_err"),
    ("l_ali", "a_li_is_limit"), ("ali_limit", "a_li_is_limit"),
    (" Teff ", "teff_k"),
])
def test_common_spellings_are_recognised(spelling, canonical):
    assert recognise(spelling) == canonical


def test_spellings_are_unambiguous_and_unknown_names_are_not_guessed():
    # Every spelling points to exactly one column (the index is built with a collision check).
    assert all(name in INPUT_COLUMNS for name in ALIASES.values())
    assert recognise("Rmag") is None        # Sloan r in many catalogs: not taken for Cousins R
    assert recognise("my_flag") is None


def test_column_map_targets_must_be_canonical():
    assert check_column_map({" Teff ": "teff_k"}) == {"Teff": "teff_k"}
    with pytest.raises(ConfigError, match="did you mean 'parallax_mas'"):
        check_column_map({"plx": "parallax"})


def test_output_columns_have_units_and_descriptions():
    for name in ("star_id", "rank", "priority", "status", "note", "mass_msun", "mass_err_msun", "age_gyr",
                 "stage", "teff_k", "logl_lsun", "radius_rsun", "feh", "m_cz_msun", "a_li_base",
                 "a_li_scatter", "a_li_enriched", "delta_a_li", "z_enrich", "lifetime_myr", "lifetime_end",
                 "p_detect", "p_engulfed_history", "placement_method", "teff_source", "logl_source",
                 "feh_source", "baseline_source", "eep", "age_err_gyr"):
        assert OUTPUT_COLUMNS[name].description
    assert OUTPUT_COLUMNS["lifetime_myr"].unit == "Myr" and OUTPUT_COLUMNS["m_cz_msun"].unit == "Msun"
    text = format_column_table(OUTPUT_COLUMNS)
    assert all(name in text for name in OUTPUT_COLUMNS) and "Myr" in text


# ------------------------------------------------------------------ validation

def _validate(**columns) -> pd.DataFrame:
    n = len(next(iter(columns.values())))
    table = pd.DataFrame({"star_id": [f"s{i}" for i in range(n)], **columns})
    return validate_catalog(table)


def test_real_stars_pass():
    """The Sun, Proxima Cen, Sirius and a hot O star are inside the allowed ranges."""
    out = _validate(
        teff_k=[constants.TEFF_SUN_K, 3042.0, 9940.0, ZETA_PUP_TEFF_K],
        logg=[constants.LOGG_SUN, 5.2, 4.3, 3.6],
        parallax_mas=[np.nan, PROXIMA_PARALLAX_MAS, 379.21, 3.0],
        v_mag=[np.nan, 11.13, SIRIUS_V_MAG, 2.25],
        feh=[0.0, 0.21, 0.5, 0.0],
        mass_msun=[1.0, 0.12, 2.06, 56.0], stage=["ms", "ms", "ms", "ms"],
        a_li=[constants.A_LI_SUN, np.nan, np.nan, constants.A_LI_METEORITIC])
    assert out["status"].tolist() == [status.OK] * 4
    assert out["note"].tolist() == [""] * 4


@pytest.mark.parametrize("column, value, words", [
    ("teff_k", 1500.0, "teff_k = 1500 is outside the allowed range 2000 to 50000 K"),
    ("teff_k", 60000.0, "teff_k = 60000 is outside the allowed range 2000 to 50000 K"),
    ("teff_k", math.log10(constants.TEFF_SUN_K), "looks like log Teff; give Teff in K"),
    ("logg", 6.5, "logg = 6.5 is outside the allowed range -1 to 6"),
    ("logg", -1.5, "logg = -1.5 is outside"),
    ("mass_msun", 0.0, "mass_msun = 0 is outside the allowed range 0 (exclusive) to 100 Msun"),
    ("mass_msun", 150.0, "mass_msun = 150 is outside"),
    ("mass_msun", -1.0, "mass_msun = -1 is outside"),
    ("dec_deg", 91.0, "dec_deg = 91 is outside the allowed range -90 to 90 deg"),
    ("dec_deg", -90.5, "dec_deg = -90.5 is outside"),
    ("ra_deg", -10.0, "looks like RA in -180..180 deg"),
    ("g_mag", 31.0, "g_mag = 31 is outside the allowed range -5 to 30 mag"),
    ("v_mag", -6.0, "v_mag = -6 is outside"),
    ("ebv", -0.1, "ebv = -0.1 is outside"),
    ("prot_d", 0.0, "prot_d = 0 is outside the allowed range > 0 d"),
    ("vsini_kms", -2.0, "vsini_kms = -2 is outside the allowed range >= 0 km/s"),
    ("a_li", 5.5, "a_li = 5.5 is outside the allowed range -1 to 5 dex"),
    ("a_li", -1.5, "a_li = -1.5 is outside"),
    ("feh", 2.0, "feh = 2 is outside the allowed range -5 to 1.5 dex"),
    ("feh", -6.0, "feh = -6 is outside"),
    ("teff_k_err", -50.0, "teff_k_err = -50 is outside the allowed range >= 0 K"),
    ("member_prob", 85.0, "looks like a percentage"),
    ("parallax_mas", 2000.0, "parallax_mas = 2000 is outside the allowed range 0 to 1000 mas"),
    ("parallax_mas", np.inf, "parallax_mas = inf is outside"),
    ("distance_pc", 0.0, "distance_pc = 0 is outside"),
])
def test_impossible_values_are_invalid_with_column_value_and_range(column, value, words):
    base = {"teff_k": [5000.0], "logg": [2.5]}
    out = _validate(**{**base, column: [value]})
    assert out["status"].iloc[0] == status.INVALID_VALUE
    assert words in out["note"].iloc[0]


def test_text_in_numeric_columns_is_coerced_and_named():
    out = _validate(teff_k=["4800", "hot", " 4500 ", "N/A", "--"], logg=[2.5, 2.5, 2.5, 2.5, 2.5])
    np.testing.assert_allclose(out["teff_k"].to_numpy(), [4800.0, np.nan, 4500.0, np.nan, np.nan],
                               rtol=COERCION_RTOL, equal_nan=True)
    assert out["teff_k"].dtype == np.float64
    assert out["status"].tolist()[:2] == [status.OK, status.INVALID_VALUE]
    assert "teff_k: 'hot' is not a number" in out["note"].iloc[1]
    assert "not a number" not in out["note"].iloc[3] + out["note"].iloc[4]   # missing markers


def test_negative_parallax_is_legal_with_an_error_and_invalid_without():
    out = _validate(parallax_mas=[-0.3, -0.3, -0.3], parallax_mas_err=[0.2, np.nan, 0.0],
                    g_mag=[12.0, 12.0, 12.0], bp_rp=[1.0, 1.0, 1.0], logg=[2.5, 2.5, 2.5])
    assert out["status"].tolist() == [status.OK, status.INVALID_VALUE, status.INVALID_VALUE]
    assert "legal for a noisy measurement" in out["note"].iloc[0]
    assert "has no parallax_mas_err" in out["note"].iloc[1]


def test_duplicate_ids_flag_later_copies_and_point_to_the_first():
    table = pd.DataFrame({"star_id": ["A", "B", "A", "A"], "mass_msun": 1.0, "stage": "rgb"})
    out = validate_catalog(table)
    assert out["status"].tolist() == [status.OK, status.OK, status.DUPLICATE_ID, status.DUPLICATE_ID]
    assert out["note"].iloc[3] == "star_id 'A' repeats row 1 (only the first copy is computed)"


def test_stage_text_is_normalised_and_unknown_stage_is_invalid():
    stages = ["RGB", "red clump", "Main-Sequence", "sgb", "upper_giant_branch", "AGB", None]
    assert [normalise_stage(s) for s in stages[:5]] == [
        "lower_giant_branch", "red_clump", "main_sequence", "subgiant", "upper_giant_branch"]
    out = _validate(mass_msun=[1.2] * 7, stage=stages)
    assert out["stage"].tolist()[:5] == ["lower_giant_branch", "red_clump", "main_sequence",
                                         "subgiant", "upper_giant_branch"]
    assert out["status"].iloc[5] == status.INVALID_VALUE
    assert "stage 'AGB' is not a known stage (use one of main_sequence" in out["note"].iloc[5]
    assert out["status"].iloc[6] == status.MISSING_INPUTS


def test_upper_limit_flags_are_parsed():
    out = _validate(a_li=[1.0] * 7, a_li_is_limit=["<", "", None, "yes", "0", "False", "maybe"],
                    mass_msun=[1.0] * 7, stage=["rgb"] * 7)
    assert out["a_li_is_limit"].tolist() == [True, False, False, True, False, False, False]
    assert out["a_li_is_limit"].dtype == bool
    assert out["status"].tolist() == [status.OK] * 6 + [status.INVALID_VALUE]
    assert "a_li_is_limit: 'maybe' is not understood" in out["note"].iloc[6]


def test_several_problems_are_all_listed_and_the_first_sets_the_status():
    table = pd.DataFrame({"star_id": ["A", "A"], "teff_k": [5000.0, 1000.0],
                          "logg": [2.5, 9.0], "stage": ["rgb", "dragon"]})
    note = validate_catalog(table)["note"].iloc[1].split("; ")
    assert validate_catalog(table)["status"].iloc[1] == status.DUPLICATE_ID
    assert note[0].startswith("star_id 'A' repeats row 1")
    assert note[1].startswith("teff_k = 1000") and note[2].startswith("logg = 9")
    assert note[3].startswith("stage 'dragon'") and len(note) == 4


def test_every_row_is_kept_in_order_and_the_input_is_untouched():
    table = pd.DataFrame({"star_id": ["c", "a", "b"], "teff_k": ["x", "5000", "6000"], "extra": [1, 2, 3]},
                         index=[10, 20, 30])
    before = table.copy()
    out = validate_catalog(table)
    assert out.index.tolist() == [10, 20, 30] and out["star_id"].tolist() == ["c", "a", "b"]
    assert out["extra"].tolist() == [1, 2, 3] and list(out.columns)[-2:] == ["status", "note"]
    pd.testing.assert_frame_equal(table, before)


def test_missing_star_id_column_is_an_error_naming_the_file():
    with pytest.raises(CatalogError, match=r"file cat\.csv, column 'star_id'"):
        validate_catalog(pd.DataFrame({"teff_k": [5000.0]}), path="cat.csv")


# ------------------------------------------------------------------ placement routes

def test_routes_follow_the_engine_precedence():
    table = pd.DataFrame({
        "star_id": list("abcdefgh"),
        "mass_msun": [1.2, 1.2, np.nan, np.nan, np.nan, np.nan, 1.2, np.nan],
        "stage": ["rgb", None, None, None, None, None, "rgb", None],
        "cluster_age_gyr": [np.nan, 2.0, np.nan, np.nan, np.nan, np.nan, 2.0, np.nan],
        "g_mag": [12.0, 12.0, 12.0, np.nan, 12.0, np.nan, 12.0, 12.0],
        "parallax_mas": [1.0, 1.0, 1.0, np.nan, -0.5, np.nan, 1.0, np.nan],
        "bp_rp": [np.nan, 1.0, 1.1, np.nan, 1.1, np.nan, np.nan, np.nan],
        "teff_k": [np.nan, np.nan, np.nan, 4800.0, np.nan, np.nan, np.nan, np.nan],
        "logg": [np.nan, np.nan, np.nan, 2.5, np.nan, 2.5, np.nan, np.nan],
    })
    assert computable_from(table).tolist() == [
        ROUTE_MASS_STAGE, ROUTE_CLUSTER, ROUTE_TEFF_L, ROUTE_TEFF_LOGG, ROUTE_NONE, ROUTE_NONE,
        ROUTE_MASS_STAGE, ROUTE_NONE]
    notes = validate_catalog(table)["note"].tolist()
    assert "needs mass+stage, or a colour/Teff with parallax/logL/logg" in notes[4]
    assert "Teff or a colour given, but no luminosity or logg" in notes[4]     # parallax < 0
    assert "logg given, but no Teff" in notes[5]
    assert "a magnitude without parallax or distance" in notes[7]


def test_a_colour_outside_its_relation_is_missing_inputs_as_in_the_chain():
    """BP-RP = 4.5 is outside the Casagrande et al. (2021) relation: the photometry gives
    no Teff, so no route, and the note says why (the engine decides the same)."""
    table = pd.DataFrame({"star_id": ["a", "b"], "bp_rp": [4.5, 1.0], "g_mag": [12.0, 12.0],
                          "parallax_mas": [2.0, 2.0]})
    assert computable_from(table).tolist() == [ROUTE_NONE, ROUTE_TEFF_L]
    out = validate_catalog(table)
    assert out["status"].tolist() == [status.MISSING_INPUTS, status.OK]
    assert "photometry: no Teff" in out["note"][0]


def test_colour_from_two_magnitudes_and_v_band_route():
    table = pd.DataFrame({"star_id": ["a", "b"], "bp_mag": [12.5, np.nan], "rp_mag": [11.4, np.nan],
                          "g_mag": [12.0, np.nan], "distance_pc": [800.0, 500.0],
                          "b_v": [np.nan, 1.0], "v_mag": [np.nan, 9.5]})
    assert computable_from(table).tolist() == [ROUTE_TEFF_L, ROUTE_TEFF_L]


def test_cluster_context_from_the_config_enables_the_isochrone_route():
    table = pd.DataFrame({"star_id": ["a", "b"], "g_mag": [12.0, 13.0], "bp_rp": [0.9, 1.1]})
    assert computable_from(table).tolist() == [ROUTE_NONE, ROUTE_NONE]
    context = {"age_gyr": 1.5, "feh": 0.0, "distance_pc": 850.0, "ebv": float("nan")}
    assert computable_from(table, cluster_context=context).tolist() == [ROUTE_CLUSTER] * 2
    out = validate_catalog(table, cluster_context=context)
    assert out["status"].tolist() == [status.OK, status.OK]
    with pytest.raises(ConfigError, match="unknown cluster context key"):
        computable_from(table, cluster_context={"age": 1.0})


# ------------------------------------------------------------------ report and scale

def test_check_report_lists_every_problem_row_with_its_row_number():
    table = pd.DataFrame({"star_id": ["A", "B", "A", "D"], "mass_msun": [1.0, -1.0, 1.0, np.nan],
                          "stage": "rgb", "parallax_mas": [np.nan, np.nan, np.nan, -0.4],
                          "parallax_mas_err": 0.3, "teff_k": [np.nan, np.nan, np.nan, 4700.0],
                          "g_mag": 12.0, "logg": [np.nan, np.nan, np.nan, 2.4]})
    report = check_report(validate_catalog(table))
    assert "4 rows checked" in report
    assert "row 2  B  [invalid_value] mass_msun = -1 is outside" in report
    assert "row 3  A  [duplicate_id] star_id 'A' repeats row 1" in report
    assert "row 4  D  [ok] parallax_mas = -0.4 is negative" in report        # note on a computed row
    lines = report.splitlines()
    assert any(line.split()[:2] == ["ok", "2"] for line in lines)
    assert any(line.split()[:2] == ["mass+stage", "1"] for line in lines)     # rows computed only
    assert any(line.split()[:2] == ["Teff+logg", "1"] for line in lines)


def test_check_report_truncates_only_above_the_limit():
    n_bad = MAX_LISTED_ROWS + 200
    table = pd.DataFrame({"star_id": [f"s{i}" for i in range(n_bad)], "teff_k": 100.0})
    report = check_report(validate_catalog(table))
    assert sum(line.startswith("  row ") for line in report.splitlines()) == MAX_LISTED_ROWS
    assert f"... and 200 more (the first {MAX_LISTED_ROWS} are listed)" in report


def test_validation_of_a_hundred_thousand_rows():
    """A 10^5-row catalog with planted problems at known rows (no timing assert)."""
    n = 100_000
    rng = np.random.default_rng(20261201)
    table = pd.DataFrame({
        "star_id": np.arange(n).astype(str),
        "teff_k": rng.uniform(4000.0, 6500.0, n),
        "logg": rng.uniform(2.0, 4.5, n),
        "bp_rp": rng.uniform(0.6, 1.6, n),
        "g_mag": rng.uniform(8.0, 16.0, n),
        "parallax_mas": rng.uniform(0.2, 5.0, n),
        "parallax_mas_err": rng.uniform(0.01, 0.1, n),
        "stage": rng.choice(["ms", "sgb", "rgb", "rc", None], n),
    })
    bad_teff = rng.choice(n, 500, replace=False)
    table.loc[bad_teff, "teff_k"] = 1000.0
    table.loc[7, "star_id"] = "3"
    out = validate_catalog(table)
    assert len(out) == n
    assert (out["status"].to_numpy()[bad_teff] == status.INVALID_VALUE).all()
    assert out["status"].iloc[7] == status.DUPLICATE_ID
    assert (out["status"] == status.INVALID_VALUE).sum() == len(bad_teff) - (7 in bad_teff)
    assert (out["status"] == status.OK).sum() == n - len(bad_teff) - (7 not in bad_teff)


def test_blank_stage_text_is_missing_not_invalid():
    """An empty or blank stage string (as written by pandas or spreadsheets) means no stage."""
    table = validate_catalog(pd.DataFrame({"star_id": ["a", "b"], "teff_k": [5000.0, 5000.0],
                                           "logl_lsun": [0.5, 0.5], "stage": ["", "  "]}))
    assert list(table["status"]) == ["ok", "ok"]
    assert table["stage"].isna().all()
