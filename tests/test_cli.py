"""Command-line tests with typer's CliRunner: exit codes and what a user reads."""

import pandas as pd
import pytest
from typer.testing import CliRunner

from prioritize.cli import app

runner = CliRunner()


@pytest.fixture()
def catalog(tmp_path):
    path = tmp_path / "cands.csv"
    pd.DataFrame([
        {"star_id": "A", "Teff": 5600, "e_Teff": 70, "logL": 0.6, "feh": 0.0},
        {"star_id": "B", "mass": 1.3, "stage": "RGB"},
        {"star_id": "C", "Teff": "hot", "logL": 0.5},
    ]).to_csv(path, index=False)
    return path


def test_rank_writes_every_row_and_prints_a_summary(catalog, tmp_path):
    out = tmp_path / "ranked.parquet"
    result = runner.invoke(app, ["rank", str(catalog), "-o", str(out)])
    assert result.exit_code == 0, result.output
    assert "status counts" in result.output and "Caution" in result.output
    table = pd.read_parquet(out)
    assert sorted(table["star_id"]) == ["A", "B", "C"]
    assert table.set_index("star_id").loc["C", "status"] == "invalid_value"


def test_rank_columns_option_and_bad_config(catalog, tmp_path):
    bad = tmp_path / "bad.toml"
    bad.write_text("[planet]\nmass_jup = 2\n")
    result = runner.invoke(app, ["rank", str(catalog), "-c", str(bad), "-o", str(tmp_path / "x.csv")])
    assert result.exit_code == 1
    assert "unknown key planet.mass_jup" in result.output
    result = runner.invoke(app, ["rank", str(catalog), "--columns", "nonsense", "-o",
                                 str(tmp_path / "x.csv")])
    assert result.exit_code == 1 and "error:" in result.output


def test_explain_shows_the_chain_and_unknown_star_is_one_line(catalog):
    result = runner.invoke(app, ["explain", str(catalog), "A"])
    assert result.exit_code == 0, result.output
    for word in ("Placement on tracks", "Enrichment", "Lifetime", "Priority", "Caution"):
        assert word in result.output
    result = runner.invoke(app, ["explain", str(catalog), "Z"])
    assert result.exit_code == 1 and "not in" in result.output
    assert "Traceback" not in result.output


def test_check_reports_problems_and_routes(catalog):
    result = runner.invoke(app, ["check", str(catalog)])
    assert result.exit_code == 0, result.output
    assert "invalid_value" in result.output
    assert "mass+stage" in result.output


def test_demo_runs_on_the_bundled_samples(tmp_path):
    result = runner.invoke(app, ["demo", "--output-dir", str(tmp_path)])
    assert result.exit_code == 0, result.output
    assert (tmp_path / "cluster_members_ranked.csv").exists()
    assert (tmp_path / "field_stars_ranked.csv").exists()
    for name in ("cluster_members", "field_stars"):
        report = tmp_path / f"{name}_ranked_report.html"
        assert report.exists() and str(report) in result.output
        assert (tmp_path / f"{name}_ranked_report_figures" / "hr_diagram.png").exists()
    assert (tmp_path / "cluster_members_ranked_report_figures" / "colour_magnitude.svg").exists()


def test_rank_with_several_planets_a_reference_and_the_rapid_filter(catalog, tmp_path):
    ref = tmp_path / "ref.csv"
    pd.DataFrame({"Teff": [4700, 4750, 4800] * 10, "logg": [2.6] * 30, "ALi": [1.2] * 30}).to_csv(ref, index=False)
    out = tmp_path / "ranked.csv"
    result = runner.invoke(app, ["rank", str(catalog), "-o", str(out), "--planet-mass", "1,5",
                                 "--reference", str(ref), "--rapid-only", "--instrument", "echelle-8m"])
    assert result.exit_code == 0, result.output
    table = pd.read_csv(out)
    assert {"z_enrich_5mj", "p_detect_5mj", "lifetime_myr_5mj"} <= set(table.columns)
    assert (table["instrument"].dropna() == "echelle-8m").all()
    # no rotation data at all: every computed star is left out by the filter, with its status
    assert set(table["status"]) <= {"not_anomalous_rotator", "invalid_value"}
    result = runner.invoke(app, ["rank", str(catalog), "--planet-mass", "one", "-o", str(out)])
    assert result.exit_code == 1 and "--planet-mass takes numbers" in result.output


def test_night_plan_from_a_ranked_table(catalog, tmp_path):
    ranked = tmp_path / "ranked.csv"
    table = pd.DataFrame({"star_id": ["a", "b"], "ra_deg": [97.4, 150.0], "dec_deg": [12.3, 20.0],
                          "priority": [2.0, 1.0], "exposure_s": [600.0, 900.0], "status": ["ok", "ok"]})
    table.to_csv(ranked, index=False)
    plan = tmp_path / "plan.csv"
    result = runner.invoke(app, ["night", str(ranked), "--site", "mauna-kea", "--date", "2027-01-15",
                                 "-o", str(plan)])
    assert result.exit_code == 0, result.output
    assert set(pd.read_csv(plan)["star_id"]) == {"a", "b"}


def test_rank_with_user_tracks(tmp_path):
    """--tracks swaps the built-in grid for the user's own track table (our format)."""
    import numpy as np

    from prioritize.constants import TEFF_SUN_K
    from prioritize.stars.tracks import feh_to_z, load_grid

    grid = load_grid()
    names = {1: "ms", 2: "sg", 3: "rgb", 4: "cheb"}
    frames = []
    for mass in (1.0, 1.2, 1.4):
        track = grid.track(mass, float(feh_to_z(0.0)))
        ok = track["kstar"] >= 0
        frames.append(pd.DataFrame({
            "initial_mass_msun": mass, "feh": 0.0, "age_myr": track["age_myr"][ok],
            "l_lsun": 10 ** track["logl"][ok],
            "teff_k": TEFF_SUN_K * 10 ** (0.25 * (track["logl"][ok] - 2 * track["logr"][ok])),
            "core_mass_msun": track["core_mass_msun"][ok], "mass_msun": track["mass_msun"][ok],
            "phase": [names[k] for k in track["kstar"][ok].astype(int)],
            "m_cz_msun": track["m_cz_msun"][ok]}))
    tracks = tmp_path / "my_tracks.csv"
    pd.concat(frames).to_csv(tracks, index=False)
    catalog = tmp_path / "c.csv"
    pd.DataFrame([{"star_id": "x", "mass_msun": 1.1, "stage": "subgiant", "feh": 0.0,
                   "g_mag": 9.0, "bp_rp": 0.9}]).to_csv(catalog, index=False)
    out = tmp_path / "r.csv"
    result = runner.invoke(app, ["rank", str(catalog), "--tracks", str(tracks), "-o", str(out)])
    assert result.exit_code == 0, result.output
    row = pd.read_csv(out).iloc[0]
    assert row["status"] == "ok" and 1.0 < row["mass_msun"] < 1.2 and np.isfinite(row["m_cz_msun"])


def test_version():
    from prioritize import __version__
    result = runner.invoke(app, ["--version"])
    assert result.exit_code == 0 and result.output.strip() == f"prioritize {__version__}"


def test_a_bad_output_type_or_instrument_fails_before_any_work(catalog, tmp_path):
    result = runner.invoke(app, ["rank", str(catalog), "-o", str(tmp_path / "ranked.xlsx")])
    assert result.exit_code != 0 and "unknown file type" in result.output
    result = runner.invoke(app, ["rank", str(catalog), "--instrument", "no-such-spectrograph",
                                 "-o", str(tmp_path / "r.csv")])
    assert result.exit_code != 0 and "no-such-spectrograph" in result.output
    assert not (tmp_path / "r.csv").exists()


def test_the_terminal_table_fits_80_columns():
    from prioritize.report.terminal import top_table
    row = {"rank": 1.0, "star_id": "Gaia DR3 1234567890123456789", "stage": "lower_giant_branch",
           "mass_msun": 1.2, "teff_k": 4800.0, "m_cz_msun": 0.8, "a_li_base": 1.1, "delta_a_li": 0.4,
           "z_enrich": 3.2, "p_detect": 0.7, "lifetime_myr": 120.0, "rot_anomaly_sigma": 1.0,
           "ew_enriched_mA": 80.0, "snr_needed": 120.0, "exposure_s": 900.0, "priority": 1e-3}
    text = top_table(pd.DataFrame([row]), 5, width=80)
    assert max(len(line) for line in text.splitlines()) <= 80
    assert "det/h" in text and "z" in text.split()
    wide = top_table(pd.DataFrame([row]), 5, width=200)
    assert "rot/sig" in wide
    from prioritize.report.terminal import status_summary
    summary = status_summary(pd.DataFrame([{**row, "status": "duplicate_id", "time_on_target_s": 1000.0,
                                            "instrument": "echelle-4m"}]), width=80)
    assert max(len(line) for line in summary.splitlines()) <= 80
    assert "only the first copy is computed" in " ".join(summary.split())
