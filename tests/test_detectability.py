"""Detectability map and cluster window: the favourable rule, consistency with the
ranking's physics, synthetic Gaia photometry against published values, and the
``map`` command end to end.

Maps here are coarse (a few masses x a few EEPs) so the file runs in seconds.
"""

import numpy as np
import pandas as pd
import pytest
import typer
from astropy import units as u
from astropy.coordinates import Distance
from typer.testing import CliRunner

from prioritize.catalog.io import read_table
from prioritize.config import Config, with_overrides
from prioritize.detectability import (MAP_COLUMNS, NOTE_TOO_OLD, PHOTOMETRY_COLUMNS, cluster_window,
                                      default_map_eeps, detectability_map, favourable_by_stage,
                                      gaia_photometry, grid_metallicity)
from prioritize.engine import signature_at
from prioritize.errors import ModelRangeError
from prioritize.map_command import map_command
from prioritize.stars.photometry import teff_from_bp_rp
from prioritize.stars.tracks import load_grid

MASSES = [0.8, 0.9, 1.0, 1.2, 1.4, 2.0]
EEPS = [0.0, 60.0, 120.0, 170.0, 200.0, 240.0, 280.0, 350.0, 479.0]

CONSISTENCY_RTOL = 1e-10     # the map calls the same code as signature_at: round-off only
DISTMOD_TOL_MAG = 1e-9       # G - M_G - A_G against astropy's distance modulus (a definition)
TEFF_INVERSION_TOL_K = 0.01  # (BP-RP)_0 is solved by bisection to ~1e-14 mag; C21 slope ~ 4000 K/mag
M_G_SUN = 4.67               # solar absolute G: Casagrande & VandenBerg 2018, MNRAS 479, L102
                             # (from memory)
M_G_SUN_TOL_MAG = 0.03       # BC_G fit (Andrae et al. 2018) vs synthetic solar photometry
BP_RP_SUN = 0.82             # solar (BP-RP)_0, Casagrande & VandenBerg 2018 (from memory)
BP_RP_SUN_TOL_MAG = 0.03     # C21 at the solar point gives 5762 K for 0.82 (Casagrande et al. 2021)
A_G_OVER_A_V = 0.81          # Babusiaux et al. 2018 at X = 1, A_0 = 0.3
E_BP_RP_OVER_EBV = 1.40      # Babusiaux et al. 2018: (A_BP - A_RP)/E(B-V) at X = 1, A_0 = 0.3
EXTINCTION_RATIO_TOL = 0.01  # both are two-digit values of the published coefficients
Z_SUN_FITS = 0.02            # Hurley, Pols & Tout 2000, Sect. 2


@pytest.fixture(scope="module")
def grid():
    return load_grid()


@pytest.fixture(scope="module")
def cfg():
    return Config()


@pytest.fixture(scope="module")
def coarse(grid, cfg):
    return detectability_map(grid, cfg, 0.0, MASSES, EEPS)


@pytest.fixture(scope="module")
def window(grid, cfg):
    return cluster_window(grid, cfg, 4.0, 0.0, 800.0, 0.1)


def _rule(table, cfg):
    young = table["age_gyr"] <= 13.8
    return ((table["z_enrich"] >= cfg.thresholds.z_signature)
            & (table["lifetime_myr"] >= cfg.thresholds.min_lifetime_myr) & young)


def test_map_is_long_format_over_every_pair(coarse):
    assert list(coarse.columns) == MAP_COLUMNS
    assert len(coarse) == len(MASSES) * len(EEPS)
    assert sorted(set(coarse["initial_mass_msun"])) == MASSES


@pytest.mark.parametrize("overrides", [{}, {"thresholds.z_signature": 2.0,
                                            "thresholds.min_lifetime_myr": 100.0}])
def test_favourable_means_z_and_lifetime_above_the_thresholds(grid, cfg, coarse, overrides):
    config = with_overrides(cfg, overrides)
    table = coarse if not overrides else detectability_map(grid, config, 0.0, MASSES, EEPS)
    expected = _rule(table, config)
    assert table["favourable"].tolist() == expected.tolist()
    assert 0 < expected.sum() < len(table)      # the rule is not trivially all or nothing


def test_points_older_than_the_universe_are_marked_not_favourable(grid, cfg):
    # 0.8 M_sun at the turn-off is ~24 Gyr old in the fits (main-sequence life ~20-25 Gyr, from memory)
    table = detectability_map(grid, cfg, 0.0, [0.8], [170.0, 200.0])
    assert (table["age_gyr"] > 13.8).all()
    assert (table["note"] == NOTE_TOO_OLD).all()
    assert not table["favourable"].any()
    signature = ((table["z_enrich"] >= cfg.thresholds.z_signature)
                 & (table["lifetime_myr"] >= cfg.thresholds.min_lifetime_myr))
    assert signature.any()      # the age alone removes them


def test_a_bigger_planet_covers_a_superset(grid, cfg, coarse):
    bigger = detectability_map(grid, with_overrides(cfg, {"planet.mass_mjup": 5.0}), 0.0, MASSES, EEPS)
    small, large = coarse["favourable"].to_numpy(), bigger["favourable"].to_numpy()
    assert np.all(large[small])
    assert large.sum() > small.sum()


def test_map_equals_signature_at_at_the_same_points(grid, cfg, coarse):
    rows = coarse.iloc[[3, 13, 22, 31, 40, 49]]
    z = np.full(len(rows), grid_metallicity(grid, 0.0))
    direct = signature_at(grid, rows["initial_mass_msun"], z, rows["eep"], cfg)
    for column, key in (("z_enrich", "z_enrich"), ("lifetime_myr", "lifetime_myr"),
                        ("a_li_base", "a_li_base"), ("m_cz_msun", "m_cz_msun"), ("logl_lsun", "logl")):
        np.testing.assert_allclose(rows[column], direct[key], rtol=CONSISTENCY_RTOL, equal_nan=True)
    np.testing.assert_allclose(rows["age_gyr"], direct["age_myr"] / 1e3, rtol=CONSISTENCY_RTOL)
    assert rows["lifetime_end"].tolist() == list(direct["lifetime_end"])


def test_default_eeps_keep_the_phase_boundaries():
    eeps = default_map_eeps()
    # tracks.PHASE_EEPS: ZAMS 0, subgiant 200, giant branch 280, tip 479; turn-off at 85% of the MS
    assert {0.0, 170.0, 200.0, 280.0, 479.0} <= set(eeps)
    assert 145 <= eeps.size <= 155 and np.all(np.diff(eeps) > 0)


def test_metallicity_scale_and_range(grid):
    assert grid_metallicity(grid, 0.0) == pytest.approx(Z_SUN_FITS, rel=1e-12)
    assert grid_metallicity(grid, 0.18) == pytest.approx(grid.z.max())   # quoted limit accepted
    for feh in (0.3, -1.0, float("nan")):
        with pytest.raises(ModelRangeError, match=r"-0\.82 to \+0\.18"):
            grid_metallicity(grid, feh)


def test_isochrone_magnitudes_obey_the_distance_modulus(window):
    assert set(PHOTOMETRY_COLUMNS) <= set(window.columns)
    ok = window.dropna(subset=["g_mag"])
    assert len(ok) > 0.8 * len(window)
    distmod = Distance(800.0 * u.pc).distmod.to_value(u.mag)
    np.testing.assert_allclose(ok["g_mag"] - ok["abs_g_mag"], distmod + ok["a_g_mag"],
                               atol=DISTMOD_TOL_MAG)
    assert (ok["a_g_mag"] > 0).all() and (ok["bp_rp"] > ok["bp_rp0"]).all()


def test_isochrone_colours_invert_to_the_model_teff(window):
    ok = window.dropna(subset=["bp_rp0"])
    assert len(ok) > 0.8 * len(window)
    back = teff_from_bp_rp(ok["bp_rp0"], ok["logg"], 0.0).value
    np.testing.assert_allclose(back, ok["teff_k"], atol=TEFF_INVERSION_TOL_K)


def test_solar_photometry_matches_published_values():
    sun = gaia_photometry(5772.0, 0.0, 4.438, 0.0, 10.0, 0.0)
    assert sun["g_mag"] == pytest.approx(M_G_SUN, abs=M_G_SUN_TOL_MAG)
    assert sun["bp_rp0"] == pytest.approx(BP_RP_SUN, abs=BP_RP_SUN_TOL_MAG)


def test_reddening_follows_the_gaia_extinction_law():
    teff_x1 = teff_from_bp_rp(1.0, 4.4, 0.0).value          # a star with (BP-RP)_0 = 1
    ebv = 0.3 / 3.1                                            # A_0 = 0.3
    star = gaia_photometry(teff_x1, 0.0, 4.4, 0.0, 100.0, ebv)
    assert star["a_g_mag"] / (3.1 * ebv) == pytest.approx(A_G_OVER_A_V, abs=EXTINCTION_RATIO_TOL)
    assert (star["bp_rp"] - star["bp_rp0"]) / ebv == pytest.approx(E_BP_RP_OVER_EBV,
                                                                  abs=5 * EXTINCTION_RATIO_TOL)


def test_window_follows_the_rule_and_summarises_favourable_magnitudes(window, cfg):
    assert window["favourable"].tolist() == _rule(window, cfg).tolist()
    fav = window[window["favourable"]]
    assert len(fav) > 0
    summary = window.attrs["summary"]
    assert f"{fav['g_mag'].min():.1f}" in summary and f"{fav['g_mag'].max():.1f}" in summary
    per_stage = favourable_by_stage(window)
    assert per_stage["favourable"].sum() == len(fav)


def test_stage_summary_lists_runs_of_neighbouring_masses():
    # hand-worked: masses 0.8-1.3 on the main sequence, favourable at 0.8, 0.9 and 1.2
    table = pd.DataFrame({"initial_mass_msun": [0.8, 0.9, 1.0, 1.1, 1.2, 1.3, 1.0],
                          "stage": ["main_sequence"] * 6 + ["subgiant"],
                          "favourable": [True, True, False, False, True, False, False],
                          "lifetime_myr": [50.0, 20.0, 0.0, 0.0, 5.0, 0.0, 0.0]})
    per_stage = favourable_by_stage(table)
    assert list(per_stage.index) == ["main_sequence", "subgiant"]
    assert per_stage.loc["main_sequence", "mass_ranges"] == "0.80-0.90, 1.20"
    assert per_stage.loc["main_sequence", "lifetime_max_myr"] == 50.0
    assert per_stage.loc["subgiant", "favourable"] == 0 and per_stage.loc["subgiant", "mass_ranges"] == ""


def test_window_refuses_an_age_beyond_the_universe(grid, cfg):
    with pytest.raises(ModelRangeError, match="13.8 Gyr"):
        cluster_window(grid, cfg, 14.5, 0.0, 800.0, 0.0)


# ----------------------------------------------------------------------------- command

def _app():
    app = typer.Typer(add_completion=False, rich_markup_mode=None)

    @app.callback()
    def main():
        """Test application."""

    app.command("map")(map_command)
    return app


COARSE_OPTIONS = ["--mass-min", "0.9", "--mass-max", "1.4", "--mass-step", "0.25", "--eep-points", "12"]


def test_map_command_writes_table_figure_and_summary(tmp_path):
    out = tmp_path / "map.csv"
    result = CliRunner().invoke(_app(), ["map", *COARSE_OPTIONS, "-o", str(out),
                                         "--cluster-age", "4", "--distance", "800", "--ebv", "0.05"])
    assert result.exit_code == 0, result.output
    table, metadata = read_table(out)
    assert list(table.columns) == MAP_COLUMNS and len(table) == 3 * 12
    assert metadata["command"] == "map" and metadata["config"]["planet"]["mass_mjup"] == 1.0
    assert (tmp_path / "map.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert (tmp_path / "map_isochrone.csv").exists()
    assert f"{int(table['favourable'].sum())} of 36 favourable" in result.output
    assert "Cluster 4 Gyr at 800 pc" in result.output and "Caution" in result.output


def test_map_command_bad_metallicity_is_one_line(tmp_path):
    out = tmp_path / "map.csv"
    result = CliRunner().invoke(_app(), ["map", "--feh", "0.5", *COARSE_OPTIONS, "-o", str(out)])
    assert result.exit_code == 1
    lines = result.output.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("error:") and "-0.82 to +0.18" in lines[0]
    assert not out.exists()
    result = CliRunner().invoke(_app(), ["map", "--cluster-age", "2", *COARSE_OPTIONS, "-o", str(out)])
    assert result.exit_code == 1 and "--distance" in result.output
    assert len(result.output.strip().splitlines()) == 1


def test_subgiants_of_one_and_a_half_solar_masses_are_favourable(grid):
    """The stated result of the published detectability method this map follows: at
    solar metallicity, for 1 M_J fully deposited and a
    reference population whose subgiant bins scatter by ~0.15 dex, some 1.4-1.6 M_sun
    subgiants below the RGB bump show z >= 5 with a signature lasting more than 1 Myr
    (the envelope is still thin where it starts: below 0.01 M_sun)."""
    cfg = with_overrides(Config(), {"baseline.prior_scatter_dex": 0.15, "planet.mass_mjup": 1.0,
                                    "planet.deposition": "full"})
    eeps = np.linspace(200.0, 279.0, 30)
    table = detectability_map(grid, cfg, 0.0, [1.4, 1.5, 1.6], eeps)
    sub = table[table["stage"] == "subgiant"]
    strong = sub[(sub["z_enrich"] >= 5.0) & (sub["lifetime_myr"] > 1.0)]
    assert len(strong) > 0
    assert strong["m_cz_msun"].min() < 0.01


def test_progress_steps_do_not_change_the_map(grid, cfg, monkeypatch):
    """With a progress callback the map is computed in smaller steps; every point is its
    own computation, so the table is identical, and the callback reaches the total."""
    import prioritize.detectability as det
    plain = detectability_map(grid, cfg, 0.0, MASSES, EEPS)
    monkeypatch.setattr(det, "PROGRESS_CHUNK", 7)
    seen = []
    stepped = detectability_map(grid, cfg, 0.0, MASSES, EEPS, progress=lambda d, t: seen.append((d, t)))
    pd.testing.assert_frame_equal(plain, stepped)
    total = len(MASSES) * len(EEPS)
    assert len(seen) == -(-total // 7) and seen[-1] == (total, total)
    assert [d for d, _ in seen] == sorted(d for d, _ in seen)
