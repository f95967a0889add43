"""Asteroseismic scaling relations and the asteroseismic placement route."""

import numpy as np
import pandas as pd

from prioritize.catalog.io import read_catalog
from prioritize.catalog.validate import computable_from, validate_catalog
from prioritize.config import Config, with_overrides
from prioritize.engine import rank_table
from prioritize.stars.seismology import DNU_SUN_UHZ, NUMAX_SUN_UHZ, scaling_relations

SOLAR_TOLERANCE = 1e-12   # the Sun is the reference point: exact up to rounding


def test_the_sun_is_one_solar_mass_and_radius():
    """nu_max 3090 uHz, Delta nu 135.1 uHz (Huber et al. 2011), Teff 5772 K (IAU 2015 B3)."""
    sun = scaling_relations(NUMAX_SUN_UHZ, DNU_SUN_UHZ, 5772.0)
    assert abs(sun.mass_msun - 1.0) < SOLAR_TOLERANCE and abs(sun.radius_rsun - 1.0) < SOLAR_TOLERANCE
    assert abs(sun.logl_lsun) < SOLAR_TOLERANCE and abs(sun.logg - 4.438) < SOLAR_TOLERANCE


def test_kepler_91_red_giant():
    """Kepler-91 (Lillo-Box et al. 2014, A&A 562, A109; values from memory): nu_max =
    109.4 uHz, Delta nu = 9.48 uHz, Teff = 4550 K give, by the scaling relations,
    M = 1.31 +- 0.10 Msun and R = 6.30 +- 0.16 Rsun; reproduced within those errors."""
    giant = scaling_relations(109.4, 9.48, 4550.0)
    assert abs(giant.mass_msun - 1.31) < 0.10
    assert abs(giant.radius_rsun - 6.30) < 0.16


def test_errors_and_the_correction_factor():
    base = scaling_relations(100.0, 8.0, 4800.0, numax_err=2.0, dnu_err=0.08, teff_err=80.0)
    # fractional errors 2%, 1%, 1.67%: sigma_M/M = sqrt(6^2 + 4^2 + 2.5^2) %
    assert np.isclose(base.mass_err_msun / base.mass_msun, np.sqrt(0.06**2 + 0.04**2 + 0.025**2))
    corrected = scaling_relations(100.0, 8.0, 4800.0, f_dnu=0.98)
    assert np.isclose(corrected.mass_msun / base.mass_msun, 0.98**4)
    assert np.isclose(corrected.radius_rsun / base.radius_rsun, 0.98**2)
    assert not scaling_relations(-1.0, 8.0, 4800.0).valid


def test_asteroseismic_route_has_its_place_and_says_so(tmp_path):
    path = tmp_path / "seismic.csv"
    # invented giants: one with an evolutionary state, one without, one with a given mass too
    path.write_text("KIC,Teff,e_Teff,FE_H,numax,numax_err,dnu,dnu_err,evstate,mass,phot_g_mean_mag,bp_rp\n"
                    "1,4700,80,0.0,45.0,0.9,4.9,0.05,1,,11.2,1.25\n"
                    "2,4750,80,0.0,45.0,0.9,4.9,0.05,,,11.2,1.25\n"
                    "3,4700,80,0.0,45.0,0.9,4.9,0.05,2,1.4,11.2,1.25\n")
    table, messages = read_catalog(path)
    assert "column 'numax' read as numax_uhz (uHz)" in messages
    checked = validate_catalog(table)
    assert computable_from(checked).tolist() == ["asteroseismic+stage", "asteroseismic", "mass+stage"]
    out = rank_table(checked, Config()).set_index("star_id")
    assert out.loc["1", "placement_method"] == "asteroseismic+stage"
    assert out.loc["2", "placement_method"] == "asteroseismic"
    assert out.loc["3", "placement_method"] == "mass+stage"
    expected = scaling_relations(45.0, 4.9, 4700.0)
    assert out.loc["1", "logl_source"] == "asteroseismic R + Teff"
    assert np.isclose(out.loc["1", "radius_rsun"], expected.radius_rsun)
    # the placed mass follows the seismic one (within its spread)
    assert abs(out.loc["1", "mass_msun"] - expected.mass_msun) < 3 * max(out.loc["1", "mass_err_msun"], 0.05)
    # Delta nu / f is scaled to the Sun: f < 1 gives a denser star, M ~ f^4
    lighter = rank_table(checked, with_overrides(Config(), {"seismology.f_dnu_rgb": 0.95})).set_index("star_id")
    assert lighter.loc["1", "mass_msun"] < out.loc["1", "mass_msun"]
