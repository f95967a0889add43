"""One bad row never costs the run: rows validation rejects are written with their
status and note while the rest is ranked; NaN never passes a range check; physically
impossible rotation is not used.  (Bad-input behaviour is common practice for a
command-line tool: name the file, row and column, keep every row.)"""

from pathlib import Path

import astropy.constants as const
import astropy.units as u
import numpy as np
import pandas as pd
import pytest
from typer.testing import CliRunner

from prioritize.cli import app
from prioritize.engine import BREAKUP_KMS_SOLAR

runner = CliRunner()
HEADER = "star_id,teff_k,logg,feh,g_mag,bp_rp,prot_d,vsini_kms\n"
GOOD = "5700,4.4,0.0,10,0.8,25,2\n"


def _rank(tmp_path, body, *options):
    src = tmp_path / "cands.csv"
    src.write_text(HEADER + body)
    out = tmp_path / "out.csv"
    result = runner.invoke(app, ["rank", str(src), "-o", str(out), *options])
    return result, (pd.read_csv(out).set_index("star_id") if out.exists() else None)


@pytest.mark.parametrize("bad, column", [
    ("5700,4.4,0.0,10,0.8,0,2", "prot_d"), ("5700,4.4,0.0,10,0.8,-3,2", "prot_d"),
    ("5700,4.4,0.0,10,0.8,20,-1", "vsini_kms"), ("-5,4.4,0.0,10,0.8,20,2", "teff_k"),
    ("0,4.4,0.0,10,0.8,20,2", "teff_k"),
])
def test_one_bad_row_is_reported_and_the_rest_is_ranked(tmp_path, bad, column):
    result, out = _rank(tmp_path, f"bad,{bad}\ngood,{GOOD}")
    assert result.exit_code == 0, result.output
    assert len(out) == 2 and set(out.index) == {"good", "bad"}
    assert out.loc["bad", "status"] == "invalid_value"
    assert column in out.loc["bad", "note"]
    assert out.loc["good", "status"] == "ok" and np.isfinite(out.loc["good", "z_enrich"])


def test_explain_of_a_rejected_row_shows_why(tmp_path):
    src = tmp_path / "cands.csv"
    src.write_text(HEADER + "bad,5700,4.4,0.0,10,0.8,0,2\ngood," + GOOD)
    result = runner.invoke(app, ["explain", str(src), "bad"])
    assert result.exit_code == 0, result.output
    assert "invalid_value" in result.output and "prot_d" in result.output


@pytest.mark.parametrize("options", [["--planet-mass", "nan"], ["--planet-mass", "1,nan"]])
def test_nan_planet_mass_is_one_line(tmp_path, options):
    result, _ = _rank(tmp_path, "good," + GOOD, *options)
    assert result.exit_code == 1
    assert "Traceback" not in result.output and "nan" in result.output


def test_nan_in_the_config_is_one_line(tmp_path):
    cfg = tmp_path / "c.toml"
    cfg.write_text("[planet]\nmass_mjup = nan\n")
    result, _ = _rank(tmp_path, "good," + GOOD, "--config", str(cfg))
    assert result.exit_code == 1
    assert "planet.mass_mjup" in result.output


def test_break_up_constant_matches_astropy():
    """sqrt(G M_sun / R_sun) from astropy's IAU 2015 nominal constants."""
    v = np.sqrt(const.GM_sun / const.R_sun).to(u.km / u.s).value
    assert BREAKUP_KMS_SOLAR == pytest.approx(v, rel=1e-4)


def test_rotation_faster_than_break_up_is_not_used(tmp_path):
    result, out = _rank(tmp_path, "fast,5700,4.4,0.0,10,0.8,1e-9,2\nwild,5700,4.4,0.0,10,0.8,25,5000\n"
                                  "good," + GOOD)
    assert result.exit_code == 0, result.output
    assert "break-up" in out.loc["fast", "note"] and np.isnan(out.loc["fast", "veq_kms"])
    assert "break-up" in out.loc["wild", "note"]
    assert not out.loc["wild", "rapid_rotator"]
    assert "break-up" not in str(out.loc["good", "note"])


def test_a_semicolon_separated_catalog_is_read_by_its_columns(tmp_path):
    src = tmp_path / "semi.csv"
    src.write_text(HEADER.replace(",", ";") + "good;" + GOOD.replace(",", ";"))
    out = tmp_path / "out.csv"
    result = runner.invoke(app, ["rank", str(src), "-o", str(out)])
    assert result.exit_code == 0, result.output
    got = pd.read_csv(out)
    assert got.loc[0, "star_id"] == "good" and got.loc[0, "status"] == "ok"


def test_output_onto_the_input_is_refused_before_any_work(tmp_path):
    src = tmp_path / "cands.csv"
    src.write_text(HEADER + "good," + GOOD)
    before = src.read_text()
    result = runner.invoke(app, ["rank", str(src), "-o", str(src)])
    assert result.exit_code == 1 and "input catalog" in result.output
    assert src.read_text() == before
    missing = runner.invoke(app, ["rank", str(src), "-o", str(tmp_path / "no" / "out.csv")])
    assert missing.exit_code == 1 and "does not exist" in missing.output


def test_default_output_names_keep_dotted_stems_apart(tmp_path, monkeypatch):
    from prioritize.catalog.io import catalog_stem
    assert catalog_stem("a.b.csv") == "a.b" and catalog_stem("a.c.csv") == "a.c"
    assert catalog_stem("stars.csv.gz") == "stars" and catalog_stem("x.parquet") == "x"
    monkeypatch.chdir(tmp_path)
    for name in ("a.b.csv", "a.c.csv"):
        (tmp_path / name).write_text(HEADER + "good," + GOOD)
        assert runner.invoke(app, ["rank", name]).exit_code == 0
    assert (tmp_path / "a.b_ranked.csv").exists() and (tmp_path / "a.c_ranked.csv").exists()


def test_stale_temporaries_and_old_provenance_are_cleaned(tmp_path):
    import os
    import time
    from prioritize.catalog.io import SIDECAR_SUFFIX, STALE_TEMPORARY_S, write_table
    target = tmp_path / "out.csv"
    stale = tmp_path / ".out.csv.abc123.part"
    fresh = tmp_path / ".out.csv.def456.part"
    stale.write_text("half a table")
    fresh.write_text("a concurrent writer")
    old = time.time() - 2 * STALE_TEMPORARY_S
    os.utime(stale, (old, old))
    sidecar = tmp_path / ("out.csv" + SIDECAR_SUFFIX)
    sidecar.write_text('{"seed": "from another run"}')
    write_table(pd.DataFrame({"star_id": ["a"], "x": [1.0]}), target)   # no metadata this time
    assert not stale.exists() and fresh.exists()
    assert not sidecar.exists()     # the old provenance would describe another table


def test_an_unwritable_home_does_not_stop_the_tool(tmp_path):
    import os
    import subprocess
    import sys
    if os.geteuid() == 0:
        home = "/proc/1/fdinfo"       # not even root can create folders here
    else:
        home = tmp_path / "home"
        home.mkdir()
        home.chmod(0o500)
    env = {**os.environ, "HOME": str(home)}
    env.pop("XDG_CONFIG_HOME", None)
    env.pop("XDG_CACHE_HOME", None)
    src = tmp_path / "cands.csv"
    src.write_text(HEADER + "good," + GOOD)
    code = "import sys; from prioritize.cli import app; sys.argv = ['prioritize', 'check', sys.argv[1]]; app()"
    done = subprocess.run([sys.executable, "-c", code, str(src)], env=env,
                          capture_output=True, text=True, timeout=300)
    assert done.returncode == 0, done.stderr
    assert "Traceback" not in done.stderr


def test_metallicity_far_outside_the_tracks_is_not_ranked(tmp_path):
    """[Fe/H] = -3 against tracks that cover about -0.8 to +0.2 is out_of_model_range
    with a note naming the grid's range (the detectability map refuses it too); a star
    just past the edge within its error is still ranked."""
    body = ("poor,5700,4.4,-3.0,10,0.8,25,2\nedge,5700,4.4,-0.9,10,0.8,25,2\ngood," + GOOD)
    result, out = _rank(tmp_path, body)
    assert result.exit_code == 0, result.output
    assert out.loc["poor", "status"] == "out_of_model_range"
    assert "outside the track grid" in out.loc["poor", "note"]
    assert np.isnan(out.loc["poor", "priority"]) or out.loc["poor", "priority"] == 0
    assert out.loc["edge", "status"] == "ok"
    assert pd.isna(out.loc["poor", "rank"])          # not ranked


def test_a_truncated_fits_catalog_is_called_truncated(tmp_path):
    from astropy.table import Table
    whole = tmp_path / "whole.fits"
    Table({"star_id": ["a"] * 50, "teff_k": [5700.0] * 50}).write(whole)
    cut = tmp_path / "cut.fits"
    cut.write_bytes(whole.read_bytes()[:4000])        # inside the table's header/data blocks
    result = runner.invoke(app, ["check", str(cut)])
    assert result.exit_code == 1
    assert "truncated" in result.output and "cut.fits" in result.output
    assert runner.invoke(app, ["check", str(whole)]).exit_code == 0
