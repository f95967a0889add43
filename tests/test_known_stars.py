"""Stars of well-known types through the whole chain, judged as a specialist would.

Parameters are those published for the named stars (values from memory, rounded; the
photometry and parallaxes of the field stars are set so that L matches them), or of a
typical member of the named type.  The checks are the judgements a referee applies to
a ranked list, not the tool's own numbers:

- a star whose median significance clears the threshold has a signature that lasts
  (lifetime > 0, a named ending process) and a finite, non-zero priority, also when the
  catalog's Teff differs from the placed model's;
- a K dwarf rotating as fast as a Hyades member (P ~ 11 d at (B-V)_0 ~ 0.95; Radick et
  al. 1987, ApJ 321, 459 [from memory]) is first of all young: not a >= 3 sigma anomaly,
  and rotation does not multiply its odds by more than 2;
- an F dwarf near the Kraft break at P = 4 d (v_eq ~ 15 km/s; typical there, Kraft
  1967, ApJ 150, 551) is not anomalous, whichever mass the tracks give it;
- of two similar upper-giant-branch stars the rapidly rotating, Li-rich one (a
  HD 233517-like giant: Teff 4475 K, logg 2.25, [Fe/H] -0.37, v sin i 17.6 km/s,
  A(Li) 4.2; Balachandran et al. 2000, AJ 119, 859 [from memory]) ranks above the slow
  one (Arcturus: 4286 K, logg 1.66, [Fe/H] -0.52, 1.08 Msun, v sin i ~2 km/s;
  Ramírez & Allende Prieto 2011, ApJ 743, 135 [from memory]).
"""

import numpy as np
import pandas as pd
import pytest

from prioritize import rotation as rot
from prioritize.catalog import status as st
from prioritize.catalog.validate import validate_catalog
from prioritize.config import Config
from prioritize.engine import rank_table

STARS = [
    dict(star_id="arcturus", ra_deg=213.9, dec_deg=19.2, v_mag=-0.05, b_v=1.23, parallax_mas=88.8,
         ebv=0.0, teff_k=4286, teff_k_err=30, logg=1.66, logg_err=0.05, feh=-0.52, feh_err=0.04,
         mass_msun=1.08, mass_msun_err=0.06, stage="upper_giant_branch", vsini_kms=2.0),
    dict(star_id="li_rich_fast_giant", ra_deg=150.0, dec_deg=50.0, v_mag=9.7, b_v=1.22,
         parallax_mas=1.7, ebv=0.0, teff_k=4475, teff_k_err=100, logg=2.25, logg_err=0.1,
         feh=-0.37, feh_err=0.1, vsini_kms=17.6, a_li=4.2),
    dict(star_id="hyades_like_k_dwarf", ra_deg=66.0, dec_deg=16.0, v_mag=9.5, b_v=0.95,
         parallax_mas=21.0, ebv=0.0, teff_k=4800, teff_k_err=60, logg=4.6, logg_err=0.1,
         feh=0.15, feh_err=0.05, prot_d=11.0),
    dict(star_id="kraft_break_f_dwarf", ra_deg=110.0, dec_deg=12.0, v_mag=7.5, b_v=0.45,
         parallax_mas=20.0, ebv=0.0, teff_k=6250, teff_k_err=60, logg=4.3, logg_err=0.1,
         feh=0.0, feh_err=0.05, prot_d=4.0),
    dict(star_id="solar_twin", ra_deg=100.0, dec_deg=10.0, v_mag=6.33, b_v=0.65, parallax_mas=50.0,
         ebv=0.0, teff_k=5772, teff_k_err=50, logg=4.44, logg_err=0.05, feh=0.0, feh_err=0.05,
         prot_d=25.4),
]


@pytest.fixture(scope="module")
def ranked():
    cfg = Config()
    out = rank_table(validate_catalog(pd.DataFrame(STARS)), cfg)
    return out.set_index("star_id"), cfg


def test_known_stars_are_placed(ranked):
    out, _ = ranked
    assert (out["status"] == st.OK).all(), out[["status", "note"]]


def test_a_significant_signature_lasts_and_has_a_priority(ranked):
    out, cfg = ranked
    clears = out["z_enrich"] >= cfg.thresholds.z_signature
    assert clears.sum() >= 2                       # Arcturus and the Li-rich giant at least
    assert (out.loc[clears, "lifetime_myr"] > 0).all(), out.loc[clears, ["z_enrich", "lifetime_myr"]]
    assert (out.loc[clears, "lifetime_end"] != "below_threshold").all()
    assert (out.loc[clears, "priority"] > 0).all()
    # past the bump the signature is ended by thermohaline mixing
    assert out.loc["arcturus", "lifetime_end"] == "thermohaline"


def test_a_fast_k_dwarf_is_first_of_all_young(ranked):
    out, _ = ranked
    k = out.loc["hyades_like_k_dwarf"]
    assert k["rot_anomaly_sigma"] < 3.0 and k["rotation_likelihood_ratio"] < 2.0, k[
        ["rot_anomaly_sigma", "rotation_likelihood_ratio", "age_gyr"]]


def test_f_dwarf_at_the_kraft_break_is_a_normal_rotator(ranked):
    out, _ = ranked
    f = out.loc["kraft_break_f_dwarf"]
    assert abs(f["rot_anomaly_sigma"]) < 2.0
    sun = out.loc["solar_twin"]
    assert abs(sun["rot_anomaly_sigma"]) < 2.0


def test_the_fast_li_rich_giant_ranks_above_the_slow_one(ranked):
    out, _ = ranked
    fast, slow = out.loc["li_rich_fast_giant"], out.loc["arcturus"]
    assert fast["rapid_rotator"] and not slow["rapid_rotator"]
    assert fast["rank"] < slow["rank"]
    # its measured A(Li) stands far above the giants' baseline
    assert fast["z_observed"] > 5.0


# -------------------------------------------------- the gyrochronology age distribution

def test_age_prior_weight_follows_the_main_sequence_lifetime():
    u = rot.age_prior_weight([2000.0, 6900.0, 9758.0, 13800.0, 30000.0, np.nan])
    assert u[0] == 0.0 and u[1] == 0.0 and u[3] == pytest.approx(1.0) and u[4] == 1.0 and u[5] == 0.0
    assert u[2] == pytest.approx(0.5, abs=1e-3)


def test_mixture_age_quantiles_against_sampling():
    """u = 0: the samples' own quantiles; u = 1: the constant-star-formation prior
    (quantile q at lo + q (hi - lo)); u = 0.5: a Monte-Carlo draw of the mixture."""
    rng = np.random.default_rng(3)
    post = rng.normal(10500.0, 800.0, size=(1, 64))
    q = np.array([0.005, 0.02, 0.15, 0.5, 0.93])
    lo, hi = rot.AGE_CLIP_MYR
    assert np.allclose(rot.mixture_age_quantiles(post, [0.0], q)[0],
                       np.quantile(np.clip(post, lo, hi), q, axis=1)[:, 0])
    flat = rot.mixture_age_quantiles(post, [1.0], q)[0]
    step = np.max(np.diff(np.log(rot._MIX_AGE_GRID_MYR)))
    assert np.allclose(np.log(flat), np.log(lo + q * (hi - lo)), atol=1.01 * step)
    half = rot.mixture_age_quantiles(post, [0.5], q)[0]
    draws = np.concatenate([rng.choice(post[0], 200_000), rng.uniform(lo, hi, 200_000)])
    assert np.allclose(np.log(half), np.log(np.quantile(draws, q)), atol=0.05)


def test_stars_outside_the_grid_say_where_and_carry_no_planet_numbers():
    """An M dwarf (3700 K, log g 4.8; below the grid's 0.70 Msun) and a metal-poor halo
    giant ([Fe/H] -1.5; below the grid's metallicities) are out_of_model_range, the note
    says which edge, and no planet number is given for a star that was not placed."""
    rows = [dict(star_id="m_dwarf", v_mag=11.0, b_v=1.5, parallax_mas=100.0, ebv=0.0, teff_k=3700,
                 teff_k_err=80, logg=4.8, logg_err=0.1, feh=0.0, feh_err=0.1, prot_d=30.0),
            dict(star_id="halo_giant", v_mag=10.0, b_v=1.1, parallax_mas=0.5, ebv=0.02, teff_k=4600,
                 teff_k_err=80, logg=1.8, logg_err=0.15, feh=-1.5, feh_err=0.1, vsini_kms=5.0)]
    out = rank_table(validate_catalog(pd.DataFrame(rows)), Config()).set_index("star_id")
    assert (out["status"] == st.OUT_OF_MODEL_RANGE).all()
    assert "lowest mass" in out.loc["m_dwarf", "note"]
    assert "outside the track grid" in out.loc["halo_giant", "note"]
    assert out["m_planet_min_mjup"].isna().all()
    assert not out["note"].str.contains("no body of the configured kind").any()
