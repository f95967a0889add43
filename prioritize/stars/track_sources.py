"""Users' own stellar tracks: our track-table format and MESA history files.

:func:`load_tracks` turns a file (or a folder of MESA history files) into a
:class:`~prioritize.stars.tracks.TrackGrid` with the same EEP layout as the
built-in grid (:data:`~prioritize.stars.tracks.PHASE_EEPS`), resampled by the
builder's own function (:func:`prioritize.data.build_tracks.resample_to_eeps`), so
that the same interpolation and placement serve both.  The tracks must form a
complete grid: every initial mass at every metallicity.

Track-table format
------------------
One row per track point, in any table format that
:func:`prioritize.catalog.io.read_table` reads (CSV, Parquet, FITS, ECSV, VOTable).
Column names are lower case; units are fixed by the name:

=======================  ========  ==============================================
column                   needed    meaning
=======================  ========  ==============================================
``initial_mass_msun``    yes       initial mass of the track (M_sun); names the track
``feh`` or ``z``         yes       initial [Fe/H] (dex, Z = 0.02 x 10^[Fe/H]) or metal
                                   mass fraction Z; constant along a track
``age_myr``              yes       age (Myr), any origin: the first ``ms`` row is the
                                   zero-age main sequence and ages count from it
``logl`` or ``l_lsun``   yes       log10 L/L_sun, or L/L_sun
``logr``, ``radius_rsun``  yes     log10 R/R_sun, R/R_sun, or T_eff (K, then
or ``teff_k``                      R = sqrt(L)/(T_eff/5772 K)^2)
``core_mass_msun``       yes       helium core mass (M_sun); 0 on the main sequence
``phase`` or ``kstar``   yes       ``ms`` (core H burning), ``sg`` (subgiant /
                                   Hertzsprung gap), ``rgb`` (giant branch, up to the
                                   helium-ignition tip), ``cheb`` (core He burning,
                                   to core-He exhaustion), ``agb`` (after it; optional);
                                   or the Hurley et al. (2000) codes 1/2/3/4/5
``mass_msun``            no        current mass (M_sun); default the initial mass
``m_cz_msun``            no        mass of the outer convective envelope (M_sun)
``r_bcz_rsun``           no        radius of its base (R_sun)
``t_bcz_k``              no        temperature at its base (K)
=======================  ========  ==============================================

Rows are sorted by age within each track; each track must reach helium ignition
(a complete giant branch: its EEPs are spaced in log L from the base to the tip);
core-He burning is optional.  Where ``m_cz_msun`` is given the envelope values
are the user's (``envelope_quality`` 8, "supplied"; ``r_bcz_rsun`` and
``t_bcz_k`` NaN where not given, the other envelope columns NaN); without it, M_cz, r_bcz, T_bcz, rho_bcz, the
lithium-preserving mass and the profiles are computed with our envelope
integration (:mod:`prioritize.stars.envelope`, needs the ``grid`` extra,
~3 s per track).  The RGB bump is computed from M_cz either way.

MESA history files
------------------
A ``history.data`` file written by MESA (one track per file) or a folder of them
(every file in it whose data column names include ``star_age``; MESA's profile
files are skipped).  Read: the header's ``initial_mass`` and ``initial_z`` (else the
first ``star_mass``; ``initial_z`` is required), and the columns ``model_number``
(rows of a model repeated after a retry/restart keep the last), ``star_age`` (yr),
``star_mass``, ``log_L``, ``log_R`` (or ``log_Teff``), ``he_core_mass``,
``center_h1``, ``center_he4``; optional ``cz_bot_mass`` (with ``cz_top_mass``,
``cz_bot_radius``, ``cz_logT``) for the envelope.  ``cz_bot_mass`` is the base of
the *largest* convective zone: it is taken as the surface envelope's base where
that zone is not a convective core (base above the centre and, if ``cz_top_mass``
is there, top within 0.1 % of the surface); other rows, or files without the
column, get our envelope integration.  Phases (our definitions, from central
abundances and the HR diagram):

- zero-age main sequence: ``center_h1`` has fallen 0.0015 below its first value;
- end of the main sequence: ``center_h1`` < 1e-4;
- tip of the giant branch: the maximum of ``log_L`` between the end of the main
  sequence and the start of core-He burning, ``center_he4`` 0.01 below its value
  at the end of the main sequence (a track that never gets there is an error);
- base of the giant branch: between the end of the main sequence and the tip, the
  point farthest to the cool, faint side of the straight line joining them in
  (log T_eff, log L) normalised to their spans (the knee of the subgiant branch);
- end of core-He burning: ``center_he4`` < 1e-4.

Everything derived from users' tracks is a planning estimate with the accuracy of
their models plus the EEP resampling and interpolation.

References
----------
Paxton et al. 2011, ApJS 192, 3 (MESA; history columns as in its
``star/defaults/history_columns.list``); Dotter 2016, ApJS 222, 8 (EEPs);
Hurley, Pols & Tout 2000, MNRAS 315, 543 (phase codes).
"""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np
import pandas as pd

from ..catalog.io import read_table
from ..constants import TEFF_SUN_K
from ..errors import CatalogError, PrioritizeError
from .envelope import TRACK_QUALITY_SUPPLIED, rgb_bump_position
from .tracks import (BUMP_COLUMN, KEY_COLUMNS, N_EEPS, PHASE_CODE_COLUMN, PROFILE_COLUMNS,
                     PROFILE_LOG_STEP_DEX, QUALITY_COLUMN, Z_SUN, TrackGrid, feh_to_z, grid_from_table)

PHASE_CODES = {"ms": 1, "sg": 2, "rgb": 3, "cheb": 4, "agb": 5}
ZAMS_CENTER_H1_DROP = 0.0015     # ZAMS: central X has dropped this far (cf. Dotter 2016)
TAMS_CENTER_H1 = 1e-4            # end of core H burning
HE_IGNITION_CENTER_HE4_DROP = 0.01   # start of core He burning: central Y this far below its TAMS value
TACHEB_CENTER_HE4 = 1e-4         # end of core He burning
SURFACE_ZONE_TOP_FRACTION = 1e-3     # largest zone reaches the surface if its top is this close (mass fraction)
MESA_REQUIRED = ("star_age", "star_mass", "log_L", "he_core_mass", "center_h1", "center_he4")
TABLE_REQUIRED = ("initial_mass_msun", "age_myr", "core_mass_msun")
_SUPPLIED = ("m_cz_msun", "r_bcz_rsun", "t_bcz_k")
_MESA_HEADER_LINES = 6


def load_tracks(path) -> TrackGrid:
    """Read users' stellar tracks into a track grid (format chosen from the content).

    Parameters
    ----------
    path : str or path-like
        A track table in our format (any format of
        :func:`prioritize.catalog.io.read_table`), a MESA ``history.data`` file, or
        a folder of MESA history files.  See the module docstring for the columns.

    Returns
    -------
    TrackGrid
        Same EEP layout and interpolation as the built-in grid; its provenance
        names the source and the tracks.  Planning estimates.

    Raises
    ------
    CatalogError
        Naming the file and what is missing or wrong (columns, an incomplete grid,
        a track that stops before helium ignition).
    """
    path = Path(path)
    if path.is_dir():
        files = sorted(p for p in path.iterdir() if p.is_file() and _looks_like_mesa_history(p))
        if not files:
            raise CatalogError("holds no MESA history files (text files whose column names "
                               "include star_age)", path=str(path))
        return _grid_from_tracks([read_mesa_history(p) for p in files], str(path), "MESA history")
    if path.is_file() and _looks_like_mesa_history(path):
        return _grid_from_tracks([read_mesa_history(path)], str(path), "MESA history")
    table, _ = read_table(path)
    return _grid_from_tracks(tracks_from_table(table, str(path)), str(path), "track table")


def _looks_like_mesa_history(path):
    """True if the sixth line (MESA's data column names) names ``star_age``."""
    with open(path, "rb") as handle:
        head = [handle.readline(1 << 20) for _ in range(_MESA_HEADER_LINES)]
    return b"star_age" in head[-1].split()


def _missing_message(missing, what):
    return f"lacks the column(s) {missing} needed for {what} (see prioritize.stars.track_sources)"


def tracks_from_table(table, source="track table"):
    """Split a table in our track format into dense tracks (see the module docstring).

    Parameters
    ----------
    table : pandas.DataFrame
        One row per track point.
    source : str
        Names the file in error messages.

    Returns
    -------
    list of dict
        One dense track per (initial mass, Z): ``initial_mass_msun``, ``z``,
        ``label`` and arrays ``age_myr`` (from the ZAMS), ``kstar``, ``lum_lsun``,
        ``radius_rsun``, ``mass_msun``, ``core_mass_msun``, and the supplied
        envelope columns (NaN where absent).

    Raises
    ------
    CatalogError
        For missing columns or unknown phase names.
    """
    columns = set(table.columns)
    missing = [c for c in TABLE_REQUIRED if c not in columns]
    for choices in (("feh", "z"), ("logl", "l_lsun"), ("logr", "radius_rsun", "teff_k"), ("phase", "kstar")):
        if not columns & set(choices):
            missing.append(" or ".join(choices))
    if missing:
        raise CatalogError(_missing_message(missing, "a track table"), path=source)
    z = (table["z"].to_numpy(dtype=float) if "z" in columns
         else feh_to_z(table["feh"].to_numpy(dtype=float)))
    logl = (table["logl"].to_numpy(dtype=float) if "logl" in columns
            else np.log10(table["l_lsun"].to_numpy(dtype=float)))
    if "logr" in columns:
        logr = table["logr"].to_numpy(dtype=float)
    elif "radius_rsun" in columns:
        logr = np.log10(table["radius_rsun"].to_numpy(dtype=float))
    else:
        logr = 0.5 * logl - 2.0 * np.log10(table["teff_k"].to_numpy(dtype=float) / TEFF_SUN_K)
    if "phase" in columns:
        names = table["phase"].astype(str).str.strip().str.lower()
        unknown = sorted(set(names) - set(PHASE_CODES))
        if unknown:
            raise CatalogError(f"column 'phase' has unknown value(s) {unknown[:5]}; use "
                               f"{list(PHASE_CODES)}", path=source)
        kstar = names.map(PHASE_CODES).to_numpy(dtype=int)
    else:
        kstar = table["kstar"].to_numpy(dtype=int)
    mass0 = table["initial_mass_msun"].to_numpy(dtype=float)
    frame = pd.DataFrame({
        "initial_mass_msun": mass0, "z": z, "age_myr": table["age_myr"].to_numpy(dtype=float),
        "kstar": kstar, "lum_lsun": 10.0 ** logl, "radius_rsun": 10.0 ** logr,
        "mass_msun": table["mass_msun"].to_numpy(dtype=float) if "mass_msun" in columns else mass0,
        "core_mass_msun": table["core_mass_msun"].to_numpy(dtype=float)})
    for name in _SUPPLIED:
        frame[name] = table[name].to_numpy(dtype=float) if name in columns else np.nan
    numeric = ["initial_mass_msun", "z", "age_myr", "lum_lsun", "radius_rsun", "mass_msun", "core_mass_msun"]
    bad = ~np.all(np.isfinite(frame[numeric].to_numpy()), axis=1)
    if bad.any():
        raise CatalogError(f"has {int(bad.sum())} row(s) with missing or non-finite values in the "
                           f"needed columns", path=source, row=int(np.flatnonzero(bad)[0]))
    tracks = []
    for (mass, zi), rows in frame.groupby(["initial_mass_msun", "z"], sort=True):
        rows = rows.sort_values("age_myr", kind="stable")
        ms = rows["kstar"].to_numpy() <= 1
        if not ms.any():
            raise CatalogError(f"track M = {mass} M_sun, Z = {zi} has no main-sequence ('ms') rows",
                               path=source)
        rows = rows.iloc[int(np.argmax(ms)):]
        track = {"initial_mass_msun": float(mass), "z": float(zi),
                 "label": f"M = {mass:.3f} M_sun, Z = {zi:.4f} in {source}"}
        for name in rows.columns.drop(["initial_mass_msun", "z"]):
            track[name] = rows[name].to_numpy()
        track["age_myr"] = track["age_myr"] - track["age_myr"][0]
        tracks.append(track)
    return tracks


def _read_mesa_columns(path):
    """Header values (dict) and the data table of a MESA history file."""
    lines = Path(path).read_text(errors="replace").splitlines()
    if len(lines) <= _MESA_HEADER_LINES:
        raise CatalogError("is not a MESA history file with data rows (expected 6 header lines: "
                           "header column numbers, names, values, a blank line, column numbers, "
                           "column names)", path=str(path))
    header = dict(zip(lines[1].split(), lines[2].split()))
    names = lines[_MESA_HEADER_LINES - 1].split()
    rows = [line.split() for line in lines[_MESA_HEADER_LINES:] if line.strip()]
    short = [i for i, row in enumerate(rows) if len(row) != len(names)]
    if short:
        raise CatalogError(f"data row has {len(rows[short[0]])} values for {len(names)} columns",
                           path=str(path), row=short[0] + 1)
    try:
        data = pd.DataFrame(np.array(rows, dtype=float), columns=names)
    except ValueError as exc:
        raise CatalogError(f"has a non-numeric data value ({exc})", path=str(path)) from exc
    return header, data


def _header_float(header, key):
    try:
        return float(header[key].strip('"').replace("D", "E").replace("d", "e"))
    except (KeyError, ValueError):
        return None


def read_mesa_history(path):
    """Read one MESA ``history.data`` file into a dense track with phase codes.

    Parameters
    ----------
    path : str or path-like
        The history file (MESA's published column names, see the module docstring).

    Returns
    -------
    dict
        As one item of :func:`tracks_from_table`: ``initial_mass_msun``, ``z``,
        ``label`` and per-row arrays from the zero-age main sequence on.

    Raises
    ------
    CatalogError
        Naming the file: missing columns, no ``initial_z`` in the header, or a
        track that does not reach the end of the main sequence or helium ignition.
    """
    source = str(path)
    header, data = _read_mesa_columns(path)
    missing = [c for c in MESA_REQUIRED if c not in data.columns]
    if "log_R" not in data.columns and "log_Teff" not in data.columns:
        missing.append("log_R or log_Teff")
    if missing:
        raise CatalogError(_missing_message(missing, "a MESA track"), path=source)
    z = _header_float(header, "initial_z")
    if z is None or not z > 0:
        raise CatalogError("has no positive 'initial_z' in its header; write it (MESA does so by "
                           "default) or convert the track to our track-table format", path=source)
    if "model_number" in data.columns:
        model = data["model_number"].to_numpy()
        later_min = np.minimum.accumulate(model[::-1])[::-1]
        keep = np.append(model[:-1] < later_min[1:], True)     # drop models redone after a retry
        data = data[keep].reset_index(drop=True)
    mass0 = _header_float(header, "initial_mass") or float(data["star_mass"].iloc[0])
    label = f"M = {mass0:.3f} M_sun, Z = {z:.4f} in {source}"
    logl = data["log_L"].to_numpy()
    logr = (data["log_R"].to_numpy() if "log_R" in data.columns
            else 0.5 * logl - 2.0 * (data["log_Teff"].to_numpy() - np.log10(TEFF_SUN_K)))
    kstar, zams = _mesa_phases(data["center_h1"].to_numpy(), data["center_he4"].to_numpy(),
                               logl, logr, label, source)
    rows = slice(zams, None)
    star_mass = data["star_mass"].to_numpy()
    track = {"initial_mass_msun": float(mass0), "z": float(z), "label": label,
             "age_myr": (data["star_age"].to_numpy()[rows] - data["star_age"].iloc[zams]) / 1e6,
             "kstar": kstar[rows], "lum_lsun": 10.0 ** logl[rows], "radius_rsun": 10.0 ** logr[rows],
             "mass_msun": star_mass[rows], "core_mass_msun": data["he_core_mass"].to_numpy()[rows]}
    for name in _SUPPLIED:
        track[name] = np.full(star_mass[rows].size, np.nan)
    if "cz_bot_mass" in data.columns:
        bottom = data["cz_bot_mass"].to_numpy()
        surface = bottom > 0                        # a zone based at the centre is a convective core
        if "cz_top_mass" in data.columns:
            surface &= data["cz_top_mass"].to_numpy() >= star_mass * (1.0 - SURFACE_ZONE_TOP_FRACTION)
        track["m_cz_msun"] = np.where(surface, star_mass - bottom, np.nan)[rows]
        for name, column, convert in (("r_bcz_rsun", "cz_bot_radius", lambda v: v),
                                      ("t_bcz_k", "cz_logT", lambda v: 10.0 ** v)):
            if column in data.columns:
                track[name] = np.where(surface, convert(data[column].to_numpy()), np.nan)[rows]
    return track


def _mesa_phases(center_h1, center_he4, logl, logr, label, source):
    """Phase codes (1 MS, 2 subgiant, 3 giant branch, 4 core-He burning, 5 after) and the ZAMS row."""
    n = center_h1.size
    zams_rows = np.flatnonzero(center_h1 <= center_h1[0] - ZAMS_CENTER_H1_DROP)
    tams_rows = np.flatnonzero(center_h1 < TAMS_CENTER_H1)
    if zams_rows.size == 0 or tams_rows.size == 0:
        raise CatalogError(f"track {label} does not reach the end of the main sequence "
                           f"(center_h1 < {TAMS_CENTER_H1})", path=source)
    zams, tams = int(zams_rows[0]), int(tams_rows[0])
    he_start_rows = np.flatnonzero((np.arange(n) > tams)
                                   & (center_he4 < center_he4[tams] - HE_IGNITION_CENTER_HE4_DROP))
    if he_start_rows.size == 0:
        raise CatalogError(f"track {label} stops before helium ignition; tracks must include the "
                           "whole giant branch", path=source)
    he_start = int(he_start_rows[0])
    tip = tams + int(np.argmax(logl[tams:he_start + 1]))
    log_teff = 0.25 * (logl - 2.0 * logr)
    span_t = log_teff[tams] - log_teff[tip]
    span_l = logl[tip] - logl[tams]
    if not (span_t > 0 and span_l > 0):
        raise CatalogError(f"track {label}: the giant branch is not cooler and brighter than the end "
                           "of the main sequence", path=source)
    knee = ((log_teff[tams] - log_teff[tams:tip + 1]) / span_t
            - (logl[tams:tip + 1] - logl[tams]) / span_l)
    base = tams + max(1, int(np.argmax(knee)))
    kstar = np.full(n, 1, dtype=int)
    kstar[tams:base] = 2
    kstar[base:tip + 1] = 3
    kstar[tip + 1:] = 4
    exhausted = np.flatnonzero((np.arange(n) > tip) & (center_he4 < TACHEB_CENTER_HE4))
    if exhausted.size:
        kstar[int(exhausted[0]):] = 5
    return kstar, zams


def _grid_from_tracks(tracks, source, kind):
    """Resample dense tracks at the EEPs, add the envelope, and build the grid."""
    from ..data.build_tracks import resample_to_eeps, track_envelope
    from .envelope import calibrate_solar_alpha

    masses = sorted({t["initial_mass_msun"] for t in tracks})
    zs = sorted({t["z"] for t in tracks})
    have = {(t["initial_mass_msun"], t["z"]) for t in tracks}
    absent = [(m, z) for z in zs for m in masses if (m, z) not in have]
    if absent:
        raise CatalogError(f"the tracks do not form a complete grid: missing (initial mass, Z) "
                           f"{absent[:5]}; give every mass at every metallicity", path=source)
    if len(have) != len(tracks):
        raise CatalogError("holds two tracks with the same initial mass and Z", path=source)
    alpha = None
    frames, missing_phases = [], []
    for track in sorted(tracks, key=lambda t: (t["z"], t["initial_mass_msun"])):
        try:
            columns, why = resample_to_eeps(
                track["age_myr"], track["kstar"], track["lum_lsun"], track["radius_rsun"],
                track["mass_msun"], track["core_mass_msun"],
                extra={name: track[name] for name in _SUPPLIED}, label=track["label"],
                require_remnant=False)
        except PrioritizeError as exc:
            raise CatalogError(str(exc), path=source) from exc
        if why is not None:
            missing_phases.append({"initial_mass_msun": track["initial_mass_msun"], "z": track["z"],
                                   "reason": why})
        supplied = np.isfinite(columns["m_cz_msun"])
        if not np.all(supplied | (columns[PHASE_CODE_COLUMN] < 0)):
            if alpha is None:
                alpha = calibrate_solar_alpha()
            ours = track_envelope(columns, track["z"], alpha)
            for name in PROFILE_COLUMNS:
                ours[name] = ours[name] / PROFILE_LOG_STEP_DEX      # stored as multiples of the step
            for name, values in ours.items():
                columns[name] = np.where(supplied, columns[name] if name in _SUPPLIED else np.nan, values)
            columns[QUALITY_COLUMN] = np.where(supplied, TRACK_QUALITY_SUPPLIED, ours[QUALITY_COLUMN])
        else:
            columns[QUALITY_COLUMN] = np.full(N_EEPS, TRACK_QUALITY_SUPPLIED)
        columns[BUMP_COLUMN] = np.full(N_EEPS, rgb_bump_position(
            columns["mass_msun"], columns["core_mass_msun"], columns["m_cz_msun"], columns[PHASE_CODE_COLUMN]))
        frame = pd.DataFrame(columns)
        frame.insert(0, "eep", np.arange(N_EEPS))
        frame.insert(0, "z", track["z"])
        frame.insert(0, "initial_mass_msun", track["initial_mass_msun"])
        frames.append(frame)
    table = pd.concat(frames, ignore_index=True)
    provenance = {"source": os.fspath(source), "format": kind, "initial_masses_msun": masses, "z": zs,
                  "z_sun": Z_SUN, "key_columns": list(KEY_COLUMNS),
                  "envelope": "user-supplied where given (envelope_quality 8), else our integration"
                              + ("" if alpha is None else f" with alpha_solar = {alpha:.4f}"),
                  "tracks_without_core_he_burning": missing_phases}
    return grid_from_table(table, provenance=provenance, source=source)
