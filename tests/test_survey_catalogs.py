"""Catalogs as surveys and archives deliver them rank as the canonical spelling does.

The column names are those of the Gaia DR3 ``gaia_source`` table (Gaia Collaboration,
Vallenari et al. 2023, A&A 674, A1; astrophysical parameters: Andrae et al. 2023, A&A
674, A27) and of spectroscopic survey tables (APOGEE allStar: TEFF, TEFF_ERR, LOGG,
FE_H, M_H; Majewski et al. 2017, AJ 154, 94; GALAH-style A_Li with flag_A_Li; Buder
et al. 2021, MNRAS 506, 150 -- flag convention 0 = detection, 1 = upper limit, from
memory).  All values are invented for the test ("Valtra" stars).
"""

import numpy as np
import pandas as pd
import pytest

from prioritize.catalog import status as st
from prioritize.catalog.io import read_catalog
from prioritize.catalog.validate import validate_catalog
from prioritize.config import Config
from prioritize.engine import rank_table
from prioritize.sky.commands import _canonical_positions
from prioritize.stars.photometry import ebv_from_a_g, ebv_from_gaia_excess, gaia_extinction

# invented stars: (ra, dec, parallax, e_parallax, G, BP, RP, E(BP-RP), A_G, Teff, logg, [Fe/H],
#                  A(Li), limit, evstate, mass)
STARS = [
    (10.1, -20.2, 2.10, 0.03, 10.90, 11.45, 10.21, 0.06, 0.10, 4850, 2.70, -0.05, 1.10, False, 1, 1.25),
    (11.3, -21.0, 1.40, 0.02, 10.20, 10.80, 9.48, 0.10, 0.17, 4700, 2.45, 0.10, 0.80, True, 2, 1.60),
    (12.7, -19.4, 4.80, 0.04, 9.60, 9.98, 9.05, 0.03, 0.05, 5600, 3.70, 0.00, 2.10, False, 0, 1.15),
    (13.2, -18.1, 3.20, 0.05, 11.40, 11.82, 10.83, 0.04, 0.07, 5300, 3.40, -0.20, 1.40, False, 1, 1.05),
]
CANONICAL = ["star_id", "ra_deg", "dec_deg", "parallax_mas", "parallax_mas_err", "g_mag", "bp_mag",
             "rp_mag", "ebp_rp", "a_g_ext", "teff_k", "logg", "feh", "a_li", "a_li_is_limit", "stage",
             "mass_msun"]
COMPARED = ["priority", "rank", "mass_msun", "age_gyr", "stage", "teff_k", "logl_lsun", "feh",
            "z_enrich", "p_detect", "lifetime_myr", "z_observed", "exposure_s", "placement_method"]


def _canonical_frame():
    rows = []
    for i, (ra, dec, plx, eplx, g, bp, rp, ebprp, ag, teff, logg, feh, ali, lim, evs, mass) in enumerate(STARS):
        rows.append([f"Valtra {i + 1}", ra, dec, plx, eplx, g, bp, rp, ebprp, ag, teff, logg, feh, ali, lim,
                     {1: "rgb", 2: "rc", 0: ""}[evs], mass])
    return pd.DataFrame(rows, columns=CANONICAL)


def _rank(path):
    table, messages = read_catalog(path)
    return rank_table(validate_catalog(table, path=str(path)), Config()), messages


def _same(a, b):
    a = a.set_index("star_id").sort_index()
    b = b.set_index("star_id").sort_index()
    for column in COMPARED:
        x, y = a[column].to_numpy(), b[column].to_numpy()
        if x.dtype.kind == "f" or y.dtype.kind == "f":
            np.testing.assert_allclose(x.astype(float), y.astype(float), rtol=1e-12, equal_nan=True,
                                       err_msg=column)
        else:
            assert list(x) == list(y), column


@pytest.fixture(scope="module")
def canonical(tmp_path_factory):
    path = tmp_path_factory.mktemp("canonical") / "canonical.csv"
    _canonical_frame().to_csv(path, index=False)
    return _rank(path)[0]


def test_gaia_dr3_archive_spelling_ranks_like_the_canonical_one(tmp_path, canonical):
    frame = _canonical_frame()
    gaia = pd.DataFrame({
        "designation": frame["star_id"], "source_id": np.arange(1, len(frame) + 1) * 1000003,
        "ra": frame["ra_deg"], "dec": frame["dec_deg"], "parallax": frame["parallax_mas"],
        "parallax_error": frame["parallax_mas_err"], "phot_g_mean_mag": frame["g_mag"],
        "phot_bp_mean_mag": frame["bp_mag"], "phot_rp_mean_mag": frame["rp_mag"],
        "ebpminrp_gspphot": frame["ebp_rp"], "ag_gspphot": frame["a_g_ext"],
        "teff_gspphot": frame["teff_k"], "logg_gspphot": frame["logg"], "mh_gspphot": frame["feh"],
        "distance_gspphot": 1000.0 / frame["parallax_mas"] * 1.1,
        "A_Li": frame["a_li"], "Li_lim": frame["a_li_is_limit"].astype(int),
        "evstate": [1, 2, 0, 1], "mass": frame["mass_msun"],
    })
    path = tmp_path / "gaia_dr3.csv"
    gaia.to_csv(path, index=False)
    ranked, messages = _rank(path)
    _same(ranked, canonical)
    assert "column 'source_id' not used: 'designation' is read as star_id" in messages
    assert any("'distance_gspphot' not used: the parallax gives the distance" in m for m in messages)


def test_spectroscopic_survey_spelling_ranks_like_the_canonical_one(tmp_path, canonical):
    frame = _canonical_frame()
    limit_text = np.where(frame["a_li_is_limit"], "<" + frame["a_li"].astype(str), frame["a_li"].astype(str))
    survey = pd.DataFrame({
        "APOGEE_ID": frame["star_id"], "RA": frame["ra_deg"], "DEC": frame["dec_deg"],
        "parallax": frame["parallax_mas"], "parallax_error": frame["parallax_mas_err"],
        "phot_g_mean_mag": frame["g_mag"], "phot_bp_mean_mag": frame["bp_mag"],
        "phot_rp_mean_mag": frame["rp_mag"], "ebpminrp_gspphot": frame["ebp_rp"],
        "ag_gspphot": frame["a_g_ext"],
        "TEFF": frame["teff_k"], "teff_gspphot": frame["teff_k"] + 150.0,   # the spectroscopic one wins
        "LOGG": frame["logg"], "FE_H": frame["feh"], "M_H": frame["feh"] + 0.3,
        "A_Li": limit_text, "EvolState": ["RGB", "RC", "", "RGB"], "MASS": frame["mass_msun"],
    })
    path = tmp_path / "survey.csv"
    survey.to_csv(path, index=False)
    ranked, messages = _rank(path)
    _same(ranked, canonical)
    assert "column 'M_H' not used: 'FE_H' is read as feh" in messages
    assert "column 'teff_gspphot' not used: 'TEFF' is read as teff_k" in messages
    assert any("'<x' read as upper limits" in m for m in messages)


def test_a_survey_lithium_flag_column(tmp_path):
    path = tmp_path / "flags.csv"
    path.write_text("sobject_id,teff,logg,fe_h,A_Li,flag_A_Li,evstate\n"
                    "1,4800,2.6,0.0,1.2,0,1\n2,4800,2.6,0.0,0.9,1,2\n3,4800,2.6,0.0,2.9,32,-1\n")
    table, messages = read_catalog(path)
    assert table["a_li_is_limit"].tolist() == [False, True, False]
    assert np.isnan(table["a_li"].iloc[2])                    # an unusable measurement is not used
    assert table["stage"].tolist()[:2] == ["rgb", "rc"] and pd.isna(table["stage"].iloc[2])
    assert any("1 rows with another flag value have their A(Li) not used" in m for m in messages)
    checked = validate_catalog(table)
    assert (checked["status"] == st.OK).all()
    assert checked["stage"].tolist()[:2] == ["lower_giant_branch", "red_clump"]


def test_a_mass_without_stage_is_said_to_be_unused():
    checked = validate_catalog(pd.DataFrame({"star_id": ["a"], "teff_k": [5600.0], "logl_lsun": [0.5],
                                             "mass_msun": [1.2]}))
    assert "mass_msun given without a stage: not used (placed by Teff+L)" in checked["note"].iloc[0]


def test_colour_excess_and_a_g_give_back_the_reddening():
    """ebv_from_gaia_excess and ebv_from_a_g invert the Babusiaux et al. (2018) extinction
    law that gaia_extinction applies (so a Gaia E(BP-RP) or A_G means the same E(B-V))."""
    ebv = np.array([0.0, 0.05, 0.3, 1.0])
    observed = np.array([0.9, 1.1, 1.6, 2.4])
    law = gaia_extinction(ebv, observed)
    np.testing.assert_allclose(ebv_from_gaia_excess(law.a_bp - law.a_rp, observed).value, ebv, atol=1e-6)
    np.testing.assert_allclose(ebv_from_a_g(law.a_g, observed).value, ebv, atol=1e-6)


def test_night_and_season_read_the_spellings_rank_reads():
    table = pd.DataFrame({"source_id": [1], "ra": [10.0], "dec": [-5.0], "priority": [1.0]})
    assert list(_canonical_positions(table).columns) == ["star_id", "ra_deg", "dec_deg", "priority"]


def test_a_v_only_star_gets_an_exposure_and_says_how():
    table = validate_catalog(pd.DataFrame({"star_id": ["v only"], "v_mag": [10.5], "teff_k": [5600.0],
                                           "logl_lsun": [0.6], "feh": [0.0]}))
    out = rank_table(table, Config())
    assert np.isfinite(out["exposure_s"].iloc[0]) and out["rank"].iloc[0] == 1
    assert out["r_c_source"].iloc[0] == "V+B-V from Teff (Casagrande et al. 2010)"
    assert "R_C for the exposure from V+B-V from Teff (Casagrande et al. 2010)" in out["note"].iloc[0]


def test_gaia_percentiles_give_the_error_of_a_gspphot_value(tmp_path):
    """Gaia DR3 gives teff_gspphot with its 16th and 84th percentiles
    (teff_gspphot_lower / _upper); half their span is the 1-sigma error."""
    path = tmp_path / "gaia.csv"
    path.write_text("source_id,teff_gspphot,teff_gspphot_lower,teff_gspphot_upper\n7,5000,4900,5160\n")
    table, messages = read_catalog(path)
    assert table["teff_k"].iloc[0] == 5000 and table["teff_k_err"].iloc[0] == 130.0
    assert any("teff_k_err = half the span" in m for m in messages)
