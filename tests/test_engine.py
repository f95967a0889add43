"""The whole chain on small tables: every row out, statuses, determinism, physics sense."""

import numpy as np
import pandas as pd
import pytest

from prioritize.catalog import columns, status as st
from prioritize.catalog.validate import validate_catalog
from prioritize.config import Config, with_overrides
from prioritize.engine import OUTPUT_COLUMNS, planet_composition, rank_table, run_batch
from prioritize.constants import M_JUP_MSUN
from prioritize.lithium.enrichment import enriched_abundance
from prioritize.lithium.lifetime import ALL_ENDS


@pytest.fixture(scope="module")
def table():
    rows = [
        # an early red giant with an asteroseismic-like mass and stage
        {"star_id": "giant", "mass_msun": 1.3, "mass_msun_err": 0.05, "stage": "lower_giant_branch",
         "feh": 0.0},
        # a subgiant with spectroscopic Teff, log L
        {"star_id": "subgiant", "teff_k": 5600, "teff_k_err": 70, "logl_lsun": 0.6,
         "logl_lsun_err": 0.03, "feh": 0.0, "feh_err": 0.08},
        # a turnoff F star from Gaia-like photometry and parallax
        {"star_id": "photometric", "g_mag": 9.8, "bp_rp": 0.75, "parallax_mas": 5.0,
         "parallax_mas_err": 0.03, "ebv": 0.02, "feh": -0.1},
        {"star_id": "nothing", "ra_deg": 10.0},
        {"star_id": "giant", "mass_msun": 1.0, "stage": "subgiant"},      # duplicate id
        {"star_id": "badteff", "teff_k": 3.76, "logl_lsun": 0.5},        # log Teff given
    ]
    return validate_catalog(pd.DataFrame(rows))


def test_every_row_out_once_with_a_status(table):
    out = rank_table(table, Config())
    assert len(out) == len(table)
    assert sorted(out["star_id"]) == sorted(table["star_id"])
    assert list(out.columns[:len(OUTPUT_COLUMNS)]) == OUTPUT_COLUMNS
    by_id = out.groupby("star_id")["status"].apply(list).to_dict()
    assert by_id["nothing"] == [st.MISSING_INPUTS]
    assert sorted(by_id["giant"]) == [st.DUPLICATE_ID, st.OK]
    assert by_id["badteff"] == [st.INVALID_VALUE]
    assert by_id["subgiant"] == [st.OK] and by_id["photometric"] == [st.OK]
    ok = out[out["status"] == st.OK]
    # only stars with photometry get an exposure and hence a rank in detections per hour;
    # the others stay "ok" and say why they are not ranked
    ranked = ok[ok["rank"].notna()]
    assert ranked["star_id"].tolist() == ["photometric"] and ranked["rank"].tolist() == [1.0]
    unranked = ok[ok["rank"].isna()]
    assert unranked["note"].str.contains("no magnitude for an exposure estimate").all()
    assert out.loc[out["status"] != st.OK, "rank"].isna().all()


def test_output_columns_are_documented():
    documented = set(columns.OUTPUT_COLUMNS)
    assert set(OUTPUT_COLUMNS) <= documented, set(OUTPUT_COLUMNS) - documented


def test_same_seed_same_result_and_batches_do_not_matter(table):
    a = rank_table(table, Config())
    b = rank_table(table, Config())
    pd.testing.assert_frame_equal(a, b)


def test_physics_consistency(table):
    """The reported numbers obey the atom-counting formula (Asplund et al. 2009 abundances;
    planet Li scaled by its bulk metals) and z = (A_new - max(A_base, A_limit)) / sigma."""
    out = run_batch(table, Config())
    ok = out[out["status"] == st.OK]
    comp = planet_composition(Config())
    again = enriched_abundance(ok["a_li_base"], ok["m_cz_msun"], ok["m_planet_msun"], comp)
    np.testing.assert_allclose(again, ok["a_li_enriched"], atol=1e-9)
    # z is the median over the samples; the row's ΔA comes from the sample nearest that median
    compared = np.fmax(ok["a_li_base"], ok["a_li_detection_limit"])
    np.testing.assert_allclose((ok["a_li_enriched"] - compared) / ok["a_li_scatter"], ok["z_enrich"], atol=0.05)
    assert ((ok["p_detect"] >= 0) & (ok["p_detect"] <= 1)).all()
    # the minimum planet, mixed back in, gives exactly the threshold significance
    thr = Config().thresholds.z_signature
    # (infinite where the baseline + threshold lies above the planet's own A(Li): unreachable)
    m_min = ok["m_planet_min_mjup"].to_numpy() * M_JUP_MSUN
    reach = np.isfinite(m_min)
    assert reach.any()
    base, cz, sig = (ok[c].to_numpy()[reach] for c in ("a_li_base", "m_cz_msun", "a_li_scatter"))
    lim = ok["a_li_detection_limit"].to_numpy()[reach]
    z_back = (enriched_abundance(base, cz, m_min[reach], comp) - np.fmax(base, lim)) / sig
    np.testing.assert_allclose(z_back, thr, rtol=1e-9)
    cmp_all = np.fmax(ok["a_li_base"], ok["a_li_detection_limit"]).to_numpy()
    unreachable = cmp_all + thr * ok["a_li_scatter"].to_numpy() >= comp.a_li
    assert np.isinf(m_min[unreachable]).all()
    # the rest of the infinite ones would need more than a brown dwarf (80 M_J) and say so
    too_big = ~reach & ~unreachable
    assert all("no body of the configured kind up to 80 M_J" in n for n in ok["note"].to_numpy()[too_big])
    assert (ok["lifetime_p16_myr"] >= 0).all() and (ok["lifetime_p84_myr"] >= 0).all()
    by_id = ok.set_index("star_id")
    assert by_id.loc["subgiant", "teff_source"] == "catalog"
    assert by_id.loc["photometric", "teff_source"].startswith("bp_rp")
    assert by_id.loc["giant", "placement_method"] == "mass+stage"
    # a deep giant envelope swallows far more hydrogen than a subgiant's: M_cz ordering
    assert by_id.loc["giant", "m_cz_msun"] > by_id.loc["subgiant", "m_cz_msun"]


def test_bigger_planet_bigger_signature(table):
    small = run_batch(table, Config()).set_index("star_id")
    big = run_batch(table, with_overrides(Config(), {"planet.mass_mjup": 10.0})).set_index("star_id")
    assert big.loc["subgiant", "z_enrich"] > small.loc["subgiant", "z_enrich"]
    assert big.loc["subgiant", "lifetime_myr"] >= small.loc["subgiant", "lifetime_myr"]


def test_rotation_and_observing_cost_enter_the_priority():
    """A fast-rotating giant is flagged (v sin i >= 10 km/s is rare in single giants,
    Carlberg et al. 2011) and its odds rise, by at most the bound of the rotation
    evidence; the priority is the documented product over the hours on target."""
    rows = pd.DataFrame([
        {"star_id": "slow", "teff_k": 4800, "teff_k_err": 70, "logg": 2.9, "logg_err": 0.1,
         "feh": 0.0, "g_mag": 9.0, "bp_rp": 1.15, "vsini_kms": 2.0},
        {"star_id": "fast", "teff_k": 4800, "teff_k_err": 70, "logg": 2.9, "logg_err": 0.1,
         "feh": 0.0, "g_mag": 9.0, "bp_rp": 1.15, "vsini_kms": 20.0},
    ])
    out = run_batch(validate_catalog(rows), Config()).set_index("star_id")
    assert bool(out.loc["fast", "rapid_rotator"]) and not bool(out.loc["slow", "rapid_rotator"])
    assert out.loc["fast", "rot_anomaly_sigma"] > 3
    assert out.loc["fast", "rotation_likelihood_ratio"] > out.loc["slow", "rotation_likelihood_ratio"]
    assert out.loc["fast", "rotation_likelihood_ratio"] <= 1.0 / Config().rotation.other_cause_fraction
    assert out.loc["fast", "m_planet_spin_mjup"] > 0
    # a rotationally broadened line needs more S/N (Cayrel 1988: sigma_EW ∝ sqrt(FWHM))
    assert out.loc["fast", "line_fwhm_A"] > out.loc["slow", "line_fwhm_A"]
    # ... unless both sit at the S/N floor for a usable A(Li) (observing.min_snr_per_pixel)
    assert out.loc["fast", "snr_needed"] >= out.loc["slow", "snr_needed"] >= Config().observing.min_snr_per_pixel
    for star in ("slow", "fast"):
        r = out.loc[star]
        np.testing.assert_allclose(r["time_on_target_s"], r["exposure_s"] + r["overhead_s"])
        p, lr = r["p_engulfed_history"], r["rotation_likelihood_ratio"]
        np.testing.assert_allclose(r["p_engulfed"], p * lr / (1 - p + p * lr))
        expected = r["p_engulfed"] * r["p_detect"] * r["p_measured"] / (r["time_on_target_s"] / 3600.0)
        np.testing.assert_allclose(r["priority"], expected)
        assert "Li I 6707.8" in r["lines_to_measure"]


def test_extra_planet_masses_measured_lithium_and_rapid_filter():
    rows = pd.DataFrame([
        {"star_id": "sg", "teff_k": 5300, "teff_k_err": 60, "logl_lsun": 0.75, "logl_lsun_err": 0.03,
         "feh": 0.0, "feh_err": 0.05, "g_mag": 9.5, "bp_rp": 0.95, "a_li": 2.2, "a_li_err": 0.1,
         "vsini_kms": 1.0},
        {"star_id": "rg", "teff_k": 4700, "teff_k_err": 60, "logg": 2.6, "logg_err": 0.1,
         "feh": 0.0, "feh_err": 0.05, "g_mag": 8.0, "bp_rp": 1.2, "a_li": 0.5, "a_li_is_limit": True,
         "vsini_kms": 15.0},
    ])
    cfg = with_overrides(Config(), {"planet.extra_masses_mjup": [5.0, 10.0], "rotation.rapid_only": True})
    out = run_batch(validate_catalog(rows), cfg).set_index("star_id")
    # more planet, more lithium: z grows with the planet's mass (:mod:`prioritize.lithium.enrichment`)
    for star in ("sg", "rg"):
        z1, z5, z10 = (out.loc[star, c] for c in ("z_enrich", "z_enrich_5mj", "z_enrich_10mj"))
        assert z1 < z5 < z10
        assert out.loc[star, "p_detect"] <= out.loc[star, "p_detect_5mj"] <= out.loc[star, "p_detect_10mj"]
    # measured lithium: z_observed = (A_obs - A_base) / sqrt(scatter^2 + err^2)
    sg = out.loc["sg"]
    np.testing.assert_allclose(sg["z_observed"], (2.2 - sg["a_li_base"]) / np.hypot(sg["a_li_scatter"], 0.1))
    needed = sg["m_planet_needed_mjup"] * M_JUP_MSUN
    if needed > 0:
        np.testing.assert_allclose(enriched_abundance(sg["a_li_base"], sg["m_cz_msun"], needed,
                                                      planet_composition(cfg)), 2.2, atol=1e-9)
    assert bool(out.loc["rg", "z_observed_is_limit"]) and not bool(sg["z_observed_is_limit"])
    # the rapid-rotator filter keeps the 15 km/s giant, leaves the slow subgiant out with a status
    assert out.loc["rg", "status"] == st.OK
    assert out.loc["sg", "status"] == st.NOT_ANOMALOUS_ROTATOR


def test_zero_input_errors_give_a_certain_answer():
    """With exact inputs P(z >= threshold) is 0 or 1 and agrees with z itself."""
    rows = pd.DataFrame([{"star_id": f"s{i}", "mass_msun": m, "mass_msun_err": 0.0, "stage": "subgiant",
                          "teff_k": t, "teff_k_err": 0.0, "feh": 0.0, "feh_err": 0.0}
                         for i, (m, t) in enumerate([(1.0, 5500), (1.2, 5600), (1.6, 6000), (1.1, 5200)])])
    out = run_batch(validate_catalog(rows), Config())
    assert set(out["p_detect"].unique()) <= {0.0, 1.0}
    np.testing.assert_array_equal(out["p_detect"] == 1.0, out["z_enrich"] >= Config().thresholds.z_signature)
    again = run_batch(validate_catalog(rows), Config())
    pd.testing.assert_frame_equal(out, again)


def test_reference_population_sets_the_baseline(tmp_path):
    """A reference with a known median in the star's bin gives that baseline; a star the
    reference does not cover falls back to the prior and says so."""
    rng = np.random.default_rng(3)
    ref = pd.DataFrame({"teff_k": rng.uniform(4700, 4800, 400), "logg": rng.uniform(2.5, 2.75, 400),
                        "a_li": rng.normal(1.3, 0.2, 400), "a_li_is_limit": False})
    path = tmp_path / "ref.csv"
    ref.to_csv(path, index=False)
    rows = pd.DataFrame([
        {"star_id": "in", "mass_msun": 1.2, "mass_msun_err": 0.0, "stage": "lower_giant_branch",
         "teff_k": 4750, "teff_k_err": 0.0, "logg": 2.6, "logg_err": 0.0, "feh": 0.0},
        {"star_id": "out", "mass_msun": 1.0, "stage": "main_sequence", "feh": 0.0},
    ])
    cfg = with_overrides(Config(), {"baseline.source": "reference", "baseline.reference": str(path)})
    out = rank_table(validate_catalog(rows), cfg).set_index("star_id")
    assert out.loc["in", "baseline_source"].startswith("reference")
    assert abs(out.loc["in", "a_li_base"] - 1.3) < 0.05
    assert out.loc["out", "baseline_source"] == "prior (no reference coverage)"


def test_envelope_burning_and_deposition_enter_the_chain():
    """The grid's envelope reaches the output; a planet that survives to the envelope base
    under ram pressure (Jia & Spruit 2018) adds less lithium than full mixing."""
    rows = pd.DataFrame([
        {"star_id": "giant", "mass_msun": 1.2, "mass_msun_err": 0.0, "stage": "lower_giant_branch",
         "teff_k": 4800, "teff_k_err": 0.0, "feh": 0.0, "g_mag": 9.0, "bp_rp": 1.1},
        {"star_id": "dwarf", "mass_msun": 1.0, "mass_msun_err": 0.0, "stage": "main_sequence",
         "feh": 0.0, "g_mag": 9.0, "bp_rp": 0.8},
    ])
    table = validate_catalog(rows)
    full = run_batch(table, Config()).set_index("star_id")
    ram = run_batch(table, with_overrides(Config(), {"planet.deposition": "ram-pressure"})).set_index("star_id")
    g = full.loc["giant"]
    # lower giant branch: base of the envelope at 2.5-4.5 MK (envelope model, tests/test_envelope.py)
    assert 2.5e6 < g["t_bcz_k"] < 4.5e6 and 0 < g["r_bcz_rsun"] < g["radius_rsun"]
    assert g["li_burning_timescale_myr"] > 0
    assert (full["deposited_fraction_full"] == 1.0).all()
    for star in ("giant", "dwarf"):
        f = ram.loc[star, "deposited_fraction_ram_pressure"]
        assert 0.0 <= f <= 1.0
        assert ram.loc[star, "z_enrich"] <= full.loc[star, "z_enrich"] + 1e-9
        assert ram.loc[star, "deposition_scenario"] == "ram-pressure"
    assert set(full["lifetime_end"]) <= set(ALL_ENDS)


def test_giants_past_the_bump_and_clump_stars_keep_a_finite_priority():
    """No stage is excluded by construction: an upper-branch giant and a red-clump star
    (placed by mass + stage) with a 30 M_J companion clear the threshold, get a
    lifetime > 0 that a named process ends, and a priority > 0.  (A 1 M_J planet in the
    clump does not clear it: the clump's Li-rich tail, lithium.baseline.)"""
    rows = pd.DataFrame([{"star_id": s, "mass_msun": m, "mass_msun_err": 0.0, "stage": s,
                          "teff_k": t, "teff_k_err": 0.0, "feh": 0.0, "feh_err": 0.0, "g_mag": 9.0,
                          "bp_rp": 1.25}
                         for s, m, t in [("upper_giant_branch", 1.0, 4300), ("red_clump", 1.0, 4700)]])
    from prioritize.lithium.lifetime import END_BELOW as END_BELOW_THRESHOLD
    big = run_batch(validate_catalog(rows), with_overrides(Config(), {"planet.mass_mjup": 30.0}))
    big = big.set_index("star_id")
    for star in ("upper_giant_branch", "red_clump"):
        r = big.loc[star]
        assert r["stage"] == star
        assert r["z_enrich"] >= Config().thresholds.z_signature, star
        assert r["lifetime_myr"] > 0 and r["lifetime_end"] not in ("", END_BELOW_THRESHOLD), star
        assert r["priority"] > 0, star
    small = run_batch(validate_catalog(rows), Config()).set_index("star_id")
    assert small.loc["red_clump", "z_enrich"] < Config().thresholds.z_signature
    assert small.loc["red_clump", "li_rich_tail_fraction"] > 0
    assert small.loc["upper_giant_branch", "li_rich_tail_fraction"] == 0


def test_too_cool_for_a_clean_6708_line_is_penalised_not_dropped():
    """Below ~4000 K TiO bands blanket 6708 A and the line-strength fit (made to
    4000-7000 K; spectra.ew_model_valid) is extrapolated (common practice): P(measured)
    is multiplied by observing.cool_measured_factor, with a note; the star keeps a
    finite priority."""
    rows = pd.DataFrame([{"star_id": "m_giant", "mass_msun": 1.1, "mass_msun_err": 0.0,
                          "stage": "upper_giant_branch", "teff_k": 3750, "teff_k_err": 0.0, "feh": 0.0,
                          "feh_err": 0.0, "g_mag": 8.0, "bp_rp": 2.3}])
    cool = run_batch(validate_catalog(rows), Config()).iloc[0]
    lifted = run_batch(validate_catalog(rows), with_overrides(Config(), {"observing.cool_limit_k": 3000.0})).iloc[0]
    factor = Config().observing.cool_measured_factor
    assert lifted["p_measured"] > 0
    np.testing.assert_allclose(cool["p_measured"], factor * lifted["p_measured"])
    assert "TiO" in cool["note"] and "TiO" not in lifted["note"]


def test_a_stage_the_luminosity_contradicts_is_not_kept():
    """A 'main_sequence' K star with log L = 1.6 cannot be a dwarf (a 1.2 M_sun dwarf
    has log L < 0.6; Hurley, Pols & Tout 2000 tracks): it is placed from Teff and L,
    and the note says the given stage was not used.  A consistent subgiant keeps its
    mass and stage."""
    rows = pd.DataFrame([
        {"star_id": "lum", "mass_msun": 1.2, "mass_msun_err": 0.1, "stage": "main_sequence", "teff_k": 4800,
         "teff_k_err": 80, "logl_lsun": 1.6, "logl_lsun_err": 0.05, "feh": 0.0, "g_mag": 9.0, "bp_rp": 1.2},
        {"star_id": "fine", "mass_msun": 1.2, "mass_msun_err": 0.05, "stage": "main_sequence", "teff_k": 6000,
         "teff_k_err": 80, "feh": 0.0, "g_mag": 9.0, "bp_rp": 0.65}])
    out = run_batch(validate_catalog(rows), Config()).set_index("star_id")
    assert out.loc["lum", "placement_method"] == "Teff+L"
    assert out.loc["lum", "stage"] != "main_sequence"
    assert "contradicted by log L" in out.loc["lum", "note"]
    assert out.loc["fine", "placement_method"] == "mass+stage" and out.loc["fine", "stage"] == "main_sequence"


def test_a_given_logg_that_clashes_with_the_placement_gets_a_note():
    rows = pd.DataFrame([{"star_id": "g", "teff_k": 5000, "logl_lsun": 1.5, "logl_lsun_err": 0.05,
                          "logg": 4.5, "logg_err": 0.1, "feh": 0.0, "g_mag": 9.0, "bp_rp": 1.0}])
    out = run_batch(validate_catalog(rows), Config()).iloc[0]
    assert out["placement_method"] == "Teff+L"
    assert "logg = 4.50 given" in out["note"]
