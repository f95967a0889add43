"""Users' own tracks (prioritize.stars.track_sources): our table format and MESA history files.

Outside references:

- MESA's published history-file layout and column names (``star/defaults/
  history_columns.list`` of the MESA source, and the history.data layout: a line of
  header column numbers, header names, header values, a blank line, data column
  numbers, data column names, then one row per model; Paxton et al. 2011, ApJS 192,
  3).  The files here are written by the tests in that layout from the built-in
  grid's tracks, so the truth of every round trip is the track that was written.
- The built-in grid (Hurley et al. 2000 fits + our envelope, its own tests) is the
  source of the tracks, not a reference for their accuracy.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from prioritize.constants import TEFF_SUN_K
from prioritize.errors import CatalogError
from prioritize.stars.envelope import TRACK_QUALITY_SUPPLIED
from prioritize.stars.track_sources import load_tracks, read_mesa_history
from prioritize.stars.tracks import PHASE_EEPS, load_grid, z_to_feh

MASSES = (1.0, 1.5)
Z = 0.02
NODE_LOG_TOL_DEX = 1e-4      # table round trip at the nodes (log of masses, T): twice the stored precision 2^-14
NODE_REL_TOL = 2 * 2.0 ** -14   # log L, log R at the nodes: stored to 14 significant bits, then re-resampled
NODE_ABS_TOL_DEX = 5e-5      # ... and the main-sequence path length, recomputed from the rounded L and Teff,
                             # moves points by up to 2e-5 dex (measured)
NODE_AGE_MS_FRACTION = 5e-4  # ... i.e. ages by up to 2.3e-4 of the main-sequence lifetime (measured)
MS_LOG_TOL_DEX = 2e-3        # MESA round trip on the main sequence at matched age (ZAMS moved by one row)
GB_LOGR_TOL_DEX = 5e-3       # MESA round trip on the giant branch at matched log L (base of the RGB defined differently)
M_CZ_REL_TOL = 0.01          # supplied M_cz at matched log L on the giant branch
BUMP_EEP_TOL = 0.2           # the bump is where two slowly converging curves (M_core, M - M_cz) cross:
                             # rounding the inputs to 2^-14 moves it by ~0.1 EEP (measured 0.09)
MS = slice(*PHASE_EEPS["main_sequence"])
GB = slice(*PHASE_EEPS["giant_branch"])
X_INITIAL = 0.70


@pytest.fixture(scope="module")
def grid():
    return load_grid()


def _source_track(grid, mass):
    iz = int(np.argmin(np.abs(grid.z - Z)))
    im = int(np.argmin(np.abs(grid.masses - mass)))
    track = {name: values[iz, im].astype(float) for name, values in grid.data.items()}
    return grid.z[iz], grid.masses[im], track


def _history_rows(track, retry=False):
    """MESA history rows from a grid track: a pre-ZAMS row, central abundances that put
    the end of the main sequence at EEP 199 and core-He burning after EEP 480."""
    eep = np.arange(track["logl"].size)
    ok = track["kstar"] >= 0
    eep = eep[ok]
    center_h1 = np.where(eep < 199, (X_INITIAL - 0.002) * (1 - eep / 199.0), 0.0)
    center_he4 = np.where(eep <= 480, 0.98, 0.98 * np.clip((579 - eep) / 98.0, 0.0, 1.0))
    mass, m_cz = track["mass_msun"][ok], track["m_cz_msun"][ok]
    rows = pd.DataFrame({
        "model_number": np.arange(1, eep.size + 1) + 1,
        "star_age": 1e7 + track["age_myr"][ok] * 1e6,
        "star_mass": mass, "log_L": track["logl"][ok], "log_R": track["logr"][ok],
        "log_Teff": track["logteff"][ok], "he_core_mass": track["core_mass_msun"][ok],
        "center_h1": center_h1, "center_he4": center_he4,
        "cz_bot_mass": mass - m_cz, "cz_top_mass": mass,
        "cz_bot_radius": track["r_bcz_rsun"][ok], "cz_logT": np.log10(track["t_bcz_k"][ok])})
    pre_zams = rows.iloc[[0]].assign(model_number=1, star_age=5e6, center_h1=X_INITIAL)
    rows = pd.concat([pre_zams, rows], ignore_index=True)
    if retry:   # models 50-59 redone after a retry: the first attempt (L off by 0.3 dex) must be dropped
        first_attempt = rows.iloc[50:60].assign(log_L=rows["log_L"].iloc[50:60] + 0.3)
        rows = pd.concat([rows.iloc[:50], first_attempt, rows.iloc[50:]], ignore_index=True)
    return rows


def _write_history(path, header, rows):
    """Write the MESA history.data layout (6 header lines, then the data rows)."""
    def numbered(names):
        return "".join(f"{i:>40d}" for i in range(1, len(names) + 1))

    def line(values):
        return "".join(f"{v:>40}" for v in values)

    text = [numbered(header), line(header), line(header.values()), "",
            numbered(rows.columns), line(rows.columns)]
    text += ["".join(f"{v:40.16e}" for v in row) for row in rows.to_numpy(dtype=float)]
    path.write_text("\n".join(text) + "\n")


def _header(mass):
    return {"version_number": '"r23.05.1"', "initial_mass": f"{mass:.16e}", "initial_z": f"{Z:.16e}"}


def test_mesa_history_round_trip(tmp_path, grid):
    sources = {}
    for mass in MASSES:
        _, _, track = _source_track(grid, mass)
        _write_history(tmp_path / f"history_{mass}.data", _header(mass), _history_rows(track, retry=True))
        sources[mass] = track
    mine = load_tracks(tmp_path)
    assert list(mine.masses) == list(MASSES) and list(mine.z) == [Z]
    assert mine.provenance["format"] == "MESA history"
    for j, mass in enumerate(MASSES):
        src = sources[mass]
        got = {name: values[0, j] for name, values in mine.data.items()}
        # main sequence: same ZAMS-to-TAMS span, compared at matched age
        age = src["age_myr"][MS]
        eep = mine.eep_at_age(mass, Z, age)
        back = mine.interpolate(mass, Z, eep, columns=["logl", "logr"])
        np.testing.assert_allclose(back["logl"], src["logl"][MS], atol=MS_LOG_TOL_DEX)
        np.testing.assert_allclose(back["logr"], src["logr"][MS], atol=MS_LOG_TOL_DEX)
        # giant branch: same tip, base defined by the knee; compared at matched log L
        gb = (got["kstar"] == 3)
        upper = src["logl"][GB] > src["logl"][GB][0] + 0.2
        logl = src["logl"][GB][upper]
        np.testing.assert_allclose(np.interp(logl, got["logl"][gb], got["logr"][gb]),
                                   src["logr"][GB][upper], atol=GB_LOGR_TOL_DEX)
        m_cz = np.interp(logl, got["logl"][gb], got["m_cz_msun"][gb])
        np.testing.assert_allclose(m_cz, src["m_cz_msun"][GB][upper], rtol=M_CZ_REL_TOL)
        assert np.all(got["envelope_quality"][got["kstar"] >= 0] == TRACK_QUALITY_SUPPLIED)
        assert np.nanmax(got["logl"][GB]) == pytest.approx(np.nanmax(src["logl"][GB]), abs=MS_LOG_TOL_DEX)


def test_mesa_retry_rows_are_dropped(tmp_path, grid):
    _, _, track = _source_track(grid, 1.0)
    path = tmp_path / "history.data"
    _write_history(path, _header(1.0), _history_rows(track, retry=True))
    dense = read_mesa_history(path)
    clean = _history_rows(track)
    assert dense["lum_lsun"].size == clean.shape[0] - 1          # the pre-ZAMS row is cut
    np.testing.assert_allclose(np.log10(dense["lum_lsun"]), clean["log_L"].to_numpy()[1:])


def test_track_table_round_trip_at_the_nodes(tmp_path, grid):
    """Our table format with the grid's own phases gives back the grid's EEPs."""
    frames = []
    names = {1: "ms", 2: "sg", 3: "rgb", 4: "cheb"}
    for mass in MASSES:
        z, node_mass, track = _source_track(grid, mass)
        ok = track["kstar"] >= 0
        frames.append(pd.DataFrame({
            "initial_mass_msun": node_mass, "feh": float(z_to_feh(z)),
            "age_myr": track["age_myr"][ok] + 100.0, "l_lsun": 10 ** track["logl"][ok],
            "teff_k": TEFF_SUN_K * 10 ** (0.25 * (track["logl"][ok] - 2 * track["logr"][ok])), "core_mass_msun": track["core_mass_msun"][ok],
            "mass_msun": track["mass_msun"][ok], "phase": [names[k] for k in track["kstar"][ok].astype(int)],
            "m_cz_msun": track["m_cz_msun"][ok], "t_bcz_k": track["t_bcz_k"][ok]}))
    path = tmp_path / "my_tracks.csv"
    pd.concat(frames).to_csv(path, index=False)
    mine = load_tracks(path)
    assert mine.provenance["format"] == "track table"
    for j, mass in enumerate(MASSES):
        _, _, src = _source_track(grid, mass)
        ok = src["kstar"] >= 0
        for name in ("logl", "logr"):
            np.testing.assert_allclose(mine.data[name][0, j][ok], src[name][ok], rtol=NODE_REL_TOL,
                                       atol=NODE_ABS_TOL_DEX, err_msg=name)
        post_ms = np.arange(ok.size) >= PHASE_EEPS["subgiant"][0]   # spaced in age and log L, not the MS path
        for name in ("core_mass_msun", "m_cz_msun", "t_bcz_k"):
            positive = ok & post_ms & (src[name] > 0)
            np.testing.assert_allclose(np.log10(mine.data[name][0, j][positive]), np.log10(src[name][positive]),
                                       atol=NODE_LOG_TOL_DEX, err_msg=name)
        t_ms = src["age_myr"][PHASE_EEPS["subgiant"][0]]
        np.testing.assert_allclose(mine.data["age_myr"][0, j][ok], src["age_myr"][ok], rtol=1e-6,
                                   atol=NODE_AGE_MS_FRACTION * t_ms)
        assert np.all(np.isnan(mine.data["rho_bcz_gcc"][0, j]))       # not supplied, not computed
    bump = mine.data["rgb_bump_eep"][0, 0, 0]
    assert bump == pytest.approx(grid.data["rgb_bump_eep"][int(np.argmin(np.abs(grid.z - Z))),
                                                           int(np.argmin(np.abs(grid.masses - 1.0))), 0], abs=BUMP_EEP_TOL)


def test_missing_m_cz_is_computed_with_our_integration(tmp_path, grid):
    """Without M_cz the reader integrates the envelope: the same numbers as the shipped grid."""
    z, mass, track = _source_track(grid, 1.0)
    ok = track["kstar"] >= 0
    names = {1: "ms", 2: "sg", 3: "rgb", 4: "cheb"}
    pd.DataFrame({"initial_mass_msun": mass, "z": z, "age_myr": track["age_myr"][ok],
                  "logl": track["logl"][ok], "logr": track["logr"][ok],
                  "core_mass_msun": track["core_mass_msun"][ok], "mass_msun": track["mass_msun"][ok],
                  "phase": [names[k] for k in track["kstar"][ok].astype(int)]}).to_parquet(tmp_path / "t.parquet")
    mine = load_tracks(tmp_path / "t.parquet")
    got = mine.data["m_cz_msun"][0, 0][ok]
    # Same integration and strides as the builder; differences come from float32 inputs only.
    np.testing.assert_allclose(got, track["m_cz_msun"][ok], rtol=0.01)
    assert mine.profiles is not None and np.isfinite(mine.profiles["rho"][0, 0, 100]).all()


def test_clear_errors_name_the_file_and_columns(tmp_path, grid):
    bad = tmp_path / "bad.csv"
    pd.DataFrame({"initial_mass_msun": [1.0], "age_myr": [0.0], "logl": [0.0]}).to_csv(bad, index=False)
    with pytest.raises(CatalogError, match=r"core_mass_msun.*feh or z.*logr or radius_rsun or teff_k") as info:
        load_tracks(bad)
    assert str(bad) in str(info.value)

    _, _, track = _source_track(grid, 1.0)
    rows = _history_rows(track)
    no_z = tmp_path / "no_z" / "history.data"
    no_z.parent.mkdir()
    _write_history(no_z, {"version_number": '"r23.05.1"'}, rows)
    with pytest.raises(CatalogError, match="initial_z") as info:
        load_tracks(no_z)
    assert str(no_z) in str(info.value)

    short = tmp_path / "short.data"
    _write_history(short, _header(1.0), rows.iloc[:300])        # stops on the subgiant branch
    with pytest.raises(CatalogError, match="before helium ignition"):
        load_tracks(short)

    no_column = tmp_path / "no_column.data"
    _write_history(no_column, _header(1.0), rows.drop(columns=["center_he4"]))
    with pytest.raises(CatalogError, match="center_he4"):
        load_tracks(no_column)

    folder = tmp_path / "grid"
    folder.mkdir()
    for mass, z in ((1.0, 0.02), (1.5, 0.02), (1.0, 0.01)):
        _write_history(folder / f"h_{mass}_{z}.data",
                       {"version_number": '"r"', "initial_mass": str(mass), "initial_z": str(z)}, rows)
    with pytest.raises(CatalogError, match="complete grid"):
        load_tracks(folder)
