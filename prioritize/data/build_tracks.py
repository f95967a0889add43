"""Build the built-in stellar track grid from the Hurley, Pols & Tout (2000) fits.

Usage (needs the ``grid`` extra, i.e. ``cosmic-popsynth``)::

    python -m prioritize.data.build_tracks --workers 2          # the shipped grid
    python -m prioritize.data.build_tracks --output small.parquet --masses 1.0,1.5 --z 0.02

Recipe (Hurley, Pols & Tout 2000, MNRAS 315, 543).  Each initial mass and
metallicity is evolved as a single
star with ``cosmic-popsynth``, which evaluates the single-star fitting formulae of
Hurley, Pols & Tout (2000): ``InitialBinaries(m1=M, m2=0, porb=-1, ecc=-1,
tphysf=TPHYSF_MYR, kstar1=1, kstar2=15, metallicity=Z)``, BSE options = the entries
marked ``"default": true`` in the ``bse`` category of cosmic's
``cosmic-settings.json`` except ``zsun = 0.02`` (cosmic scales the Z it is given by
0.02/zsun before it reaches the fits; with 0.02 the Z passed is the Z of the fits),
and ``dtp = 0`` (every internal time step is output).  Runs happen in a temporary
directory because cosmic writes a stray ``fort.99`` file.

Each track is resampled at equivalent evolutionary points (EEPs,
:data:`prioritize.stars.tracks.PHASE_EEPS`) by :func:`resample_to_eeps`; the
spacing within each phase is :data:`PHASE_SPACING`.  A track
that stops before its evolution is over (no white-dwarf remnant by ``tphysf``, or a
missing main sequence, Hertzsprung gap or giant branch) is an error naming its mass
and Z.  Low-mass metal-rich stars whose main-sequence lifetime exceeds ~16 Gyr lose
their envelope to the fits' Reimers wind before or during core-helium burning and
never reach the early AGB; they are complete but have no (full) core-He-burning
phase: those EEPs are NaN (kstar -1) and the provenance lists the tracks and why.

The grid (:data:`DEFAULT_MASSES` x :data:`DEFAULT_Z`) is denser where the fits change
fast: in mass around the onset of the main-sequence hook and around M_HeF, in Z at
two kinks of the fitted radii and above Z = 0.02.  Interpolating it reproduces fresh
tracks at off-grid masses and metallicities to ~1-2% in L, R and Teff, except in a
few places listed in ``tests/test_tracks.py``; the tracks themselves are planning
estimates with the accuracy of the fits.

Then the convective envelope of every track point is integrated
(:func:`track_envelope`, :mod:`prioritize.stars.envelope`; needs ``rm-tables``): one mixing length
calibrated on the Sun (:func:`prioritize.stars.envelope.calibrate_solar_alpha` at
Z = 0.02), alpha solved on the giant branch so that the envelope meets the core,
at every k-th EEP of each phase (:data:`ENVELOPE_STRIDES`) and interpolated along
the track between, one track per process (``--workers``, default all cores).  The
RGB bump of each track is where the core reaches the deepest point mixed by the
envelope (:func:`prioritize.stars.envelope.rgb_bump_position`).  The provenance
records the rm-tables version, alpha, the strides, the run times and the cores.
Measured: the shipped grid (73 masses x 15 Z = 1095 tracks) took 2807 s (47 min)
with 2 worker processes on a 2-core machine shared with other work (load ~3; 13 s
of it the cosmic runs); 3-5 s of one core per track; the file is 17.9 MB.  Reproducible: cosmic's single-star runs draw no
random numbers (seed fixed anyway) and the integration is deterministic.

This is a build tool (file I/O, clock); the run-time package reads its output
through :func:`prioritize.stars.tracks.load_grid` and never imports cosmic.
"""

from __future__ import annotations

import ast
import contextlib
import datetime
import json
import multiprocessing
import operator
import os
import platform
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd
import typer

from ..constants import LOGG_SUN, TEFF_SUN_K, Z_SUN_TRACKS
from ..errors import PrioritizeError
from ..stars.envelope import (LITHIUM_BURNING_T_K, PROFILE_POINTS, TRACK_QUALITY_MEANINGS,
                              calibrate_solar_alpha, envelope_along_track, rgb_bump_position)
from ..stars.tracks import (BUMP_COLUMN, ENVELOPE_COLUMNS, MISSING_PHASE_CODE, N_EEPS, PHASE_EEPS,
                            PROFILE_COLUMNS, PROFILE_DEPTH_FRACTIONS, PROFILE_LOG_STEP_DEX,
                            PROVENANCE_METADATA_KEY, QUALITY_COLUMN, TRACK_COLUMNS, profile_column)


def _mass_grid():
    """0.70-3.50 M_sun in steps of 0.05, 0.025 where the tracks change fast with mass:
    1.10-1.50 (onset of the main-sequence hook) and 1.75-2.15 (M_HeF, the end of
    degenerate helium ignition: 1.85-2.04 M_sun over Z = 0.003-0.03)."""
    coarse = np.arange(0.70, 3.50 + 1e-9, 0.05)
    fine = np.concatenate([np.arange(1.10, 1.50 + 1e-9, 0.025), np.arange(1.75, 2.15 + 1e-9, 0.025)])
    return tuple(float(m) for m in np.unique(np.round(np.concatenate([coarse, fine]), 3)))


DEFAULT_MASSES = _mass_grid()
# Roughly log-spaced, with nodes at the two kinks of the fits' radii in Z (0.00512 and
# 0.00915) and denser above Z = 0.02, where the fits' polynomials in log Z curve strongly.
DEFAULT_Z = (0.003, 0.0035, 0.004, 0.00512, 0.0065, 0.008, 0.00915, 0.011, 0.014, 0.017, 0.020,
             0.0235, 0.0265, 0.0285, 0.030)
ZSUN_OPTION = Z_SUN_TRACKS
FITS_Z_RANGE = (1e-4, 0.03)   # Hurley, Pols & Tout 2000: fits to Pols et al. (1998) models
TPHYSF_MYR = 200_000.0   # 0.70 M_sun at Z = 0.03 leaves the main sequence at 49 Gyr
DTP_MYR = 0.0
RANDOM_SEED = 20000      # fixed for reproducibility (single stars draw no random numbers)
DEFAULT_OUTPUT = Path(__file__).with_name("tracks_grid.parquet")

MAIN_SEQUENCE_KSTARS = (0, 1)
HERTZSPRUNG_GAP, GIANT_BRANCH, CORE_HE_BURNING, EARLY_AGB = 2, 3, 4, 5
FIRST_REMNANT_KSTAR = 10
PHASE_SPACING = {
    "main_sequence": "equal steps of distance along the track in (log L, log Teff, "
                     "MS_PATH_AGE_WEIGHT x age fraction), ZAMS to the start of the Hertzsprung gap",
    "subgiant": "age fraction, end of the main sequence to the base of the giant branch",
    "giant_branch": "log L fraction, base to the helium-ignition tip (extended from the last "
                    "output step in core mass); for tracks without ignition, to maximum L",
    "core_he_burning": "age fraction, in two parts: CHEB_DESCENT_EEPS from ignition to the "
                       "luminosity minimum (zero length for degenerate ignition), the rest to "
                       "the start of the early AGB"}
CHEB_DESCENT_EEPS = 10
MS_PATH_AGE_WEIGHT = 0.5
MS_PATH_TEFF_WEIGHT = 1.0
FLOAT32_SIGNIFICANT_BITS = 14   # stored precision 2^-14 = 6.1e-5 (relative), far below the fits' accuracy
ENVELOPE_SIGNIFICANT_BITS = 12  # 2.4e-4 relative, far below the envelope model's accuracy (~5-20 %)
AGE_SIGNIFICANT_BITS = 32       # 2.3e-10 relative
ENVELOPE_STRIDES = {"main_sequence": 2, "subgiant": 1, "giant_branch": 4, "core_he_burning": 2}
"""Envelope integrated at every k-th EEP of each phase (plus phase ends), the rest
interpolated along the track.  Chosen from the 95th-percentile errors of stride 2
and 4 against stride 1 on 12 tracks (0.8-2.5 M_sun, Z = 0.004 and 0.02; M_cz,
T_bcz, r_bcz, rho_bcz): main sequence <= 1.9 % at stride 2 but up to 34 % at 4
(the thin surface zone of F stars switching on); subgiant up to 9 % at 2 (2-2.5
M_sun, where M_cz grows by 4 dex), so stride 1; giant branch <= 3 % at 4; core-He
burning <= 1.7 % at 2 but up to 10 % at 4."""
_STRUCTURE_COLUMNS = ("logl", "logr", "logteff", "logg", "mass_msun", "core_mass_msun",
                      "m_cz_fit_msun")
_ENVELOPE_FLOAT_COLUMNS = ("m_cz_msun", "r_bcz_rsun", "t_bcz_k", "rho_bcz_gcc",
                           "m_li_preserved_msun", "alpha_mlt")
_ENVELOPE_TRACK_KEYS = ("mass_msun", "logr", "logl", "logteff", "core_mass_msun", "kstar")
_BCM_COLUMNS = ["tphys", "kstar_1", "mass_1", "lum_1", "rad_1", "teff_1", "massc_he_layer_1",
                "massc_co_layer_1", "menv_1"]     # teff_1 only for checks
_ARITHMETIC = {ast.Add: operator.add, ast.Sub: operator.sub, ast.Mult: operator.mul,
               ast.Div: operator.truediv}


def _literal(node):
    """Value of a settings entry: numbers, lists and simple arithmetic such as 2.0/21.0."""
    if isinstance(node, ast.Expression):
        return _literal(node.body)
    if isinstance(node, ast.Constant):
        return node.value
    if isinstance(node, ast.List):
        return [_literal(item) for item in node.elts]
    if isinstance(node, ast.UnaryOp) and isinstance(node.op, ast.USub):
        return -_literal(node.operand)
    if isinstance(node, ast.BinOp) and type(node.op) in _ARITHMETIC:
        return _ARITHMETIC[type(node.op)](_literal(node.left), _literal(node.right))
    raise PrioritizeError(f"unexpected expression in cosmic-settings.json: {ast.dump(node)}")


def default_bse_options(settings_file=None):
    """BSE options marked ``"default": true`` in cosmic's settings, with zsun = 0.02.

    Parameters
    ----------
    settings_file : path-like, optional
        A ``cosmic-settings.json``; default: the one installed with cosmic.

    Returns
    -------
    dict
        Option name -> value, for ``Evolve.evolve(BSEDict=...)``.
    """
    if settings_file is None:
        from importlib.resources import files
        settings_file = files("cosmic.data").joinpath("cosmic-settings.json")
    categories = json.loads(Path(settings_file).read_text())
    options = {}
    for category in categories:
        if category["category"] != "bse":
            continue
        for setting in category["settings"]:
            defaults = [opt["name"] for opt in setting["options"] if opt.get("default")]
            if len(defaults) != 1:
                raise PrioritizeError(f"cosmic setting '{setting['name']}' has {len(defaults)} "
                                      "defaults; expected exactly one")
            value = defaults[0]
            options[setting["name"]] = (_literal(ast.parse(value, mode="eval"))
                                        if isinstance(value, str) else value)
    options["zsun"] = ZSUN_OPTION
    return options


def _require_cosmic():
    try:
        import cosmic
        from cosmic.evolve import Evolve
        from cosmic.sample.initialbinarytable import InitialBinaryTable
    except ImportError as exc:
        raise PrioritizeError("building the track grid needs cosmic-popsynth: "
                              "pip install -e '.[grid]'") from exc
    return cosmic, Evolve, InitialBinaryTable


def evolve_single_stars(masses, z, bse_options=None, tphysf_myr=TPHYSF_MYR):
    """Evolve single stars with cosmic (Hurley et al. 2000 fits), every internal step.

    Parameters
    ----------
    masses : array_like
        Initial masses (M_sun).
    z : array_like
        Metal mass fractions, broadcast against ``masses``.
    bse_options : dict, optional
        Default: :func:`default_bse_options`.
    tphysf_myr : float
        Evolution stops at this age (Myr).

    Returns
    -------
    pandas.DataFrame
        cosmic's ``bcm`` table (columns of ``_BCM_COLUMNS`` and ``bin_num``, the
        position in the flattened inputs), one row per time step.
    """
    _, evolve, initial_binary_table = _require_cosmic()
    masses, z = np.broadcast_arrays(np.asarray(masses, dtype=float), np.asarray(z, dtype=float))
    masses, z = masses.ravel(), z.ravel()
    n = masses.size
    binaries = initial_binary_table.InitialBinaries(
        m1=masses, m2=np.zeros(n), porb=np.full(n, -1.0), ecc=np.full(n, -1.0),
        tphysf=np.full(n, float(tphysf_myr)), kstar1=np.ones(n), kstar2=np.full(n, 15.0),
        metallicity=z)
    options = default_bse_options() if bse_options is None else bse_options
    with tempfile.TemporaryDirectory(prefix="prioritize-tracks-") as tmp, contextlib.chdir(tmp):
        _, bcm, _, _ = evolve.evolve(initialbinarytable=binaries, BSEDict=options, dtp=DTP_MYR,
                                     randomseed=RANDOM_SEED, bcm_columns=_BCM_COLUMNS)
    return bcm.reset_index(drop=True)


def _log_teff(logl, logr):
    """log Teff from L = 4 pi R^2 sigma Teff^4 in solar units (Teff_sun = 5772 K, IAU 2015)."""
    return np.log10(TEFF_SUN_K) + 0.25 * (logl - 2.0 * logr)


def _strictly_increasing(coordinate):
    """Mask keeping the rows where ``coordinate`` exceeds every earlier row."""
    running = np.maximum.accumulate(coordinate)
    keep = np.ones(coordinate.size, dtype=bool)
    keep[1:] = coordinate[1:] > running[:-1]
    return keep


def _main_sequence_path(logl, logteff, age):
    """Distance along the main sequence in (log L, log Teff, age fraction).

    .. math:: ds^2 = (d\\log L)^2 + (w_T\\, d\\log T_{eff})^2 + (w_t\\, d\\tau)^2,
              \\qquad \\tau = t / t_{MS}

    With w_t = MS_PATH_AGE_WEIGHT the quiet part of the main sequence is spaced
    nearly by age, while the hook near core-H exhaustion (above ~1 M_sun: a rise of
    ~0.1 dex in L within ~1% of the lifetime, at an age fraction that moves with
    mass; Hurley et al. 2000, main-sequence luminosity) gets points in proportion to
    its extent in the HR diagram, so it falls on the same EEPs on neighbouring
    tracks (measured: main-sequence interpolation errors drop from ~10% to ~1%).
    """
    tau = (age - age[0]) / (age[-1] - age[0])
    steps = np.sqrt(np.diff(logl) ** 2 + (MS_PATH_TEFF_WEIGHT * np.diff(logteff)) ** 2
                    + (MS_PATH_AGE_WEIGHT * np.diff(tau)) ** 2)
    return np.concatenate([[0.0], np.cumsum(steps)])


def _phase_rows(kstar, codes, label):
    """Indices of the contiguous rows whose kstar is in ``codes`` (empty if none)."""
    rows = np.flatnonzero(np.isin(kstar, codes))
    if rows.size and rows[-1] - rows[0] + 1 != rows.size:
        raise PrioritizeError(f"track {label}: phase kstar {codes} is interrupted by another phase")
    return rows


def _phase_coordinate(name, phase):
    """Coordinate along a phase in which its EEPs are spaced (see PHASE_SPACING)."""
    if name == "main_sequence":
        return _main_sequence_path(phase["logl"], _log_teff(phase["logl"], phase["logr"]),
                                   phase["age_myr"])
    if name == "giant_branch":
        return phase["logl"]
    return phase["age_myr"]


def _eep_positions(name, phase, coordinate, count):
    """Values of the phase coordinate at the phase's ``count`` EEPs.

    Equal steps from the start to the end of the phase; core-He burning is split at
    its luminosity minimum in the first half of the phase (the start itself after a
    degenerate helium flash; the bottom of the descent from the giant-branch tip
    after non-degenerate ignition, M > M_HeF): CHEB_DESCENT_EEPS steps in age before
    it, the rest after, so that red-clump points match across M_HeF.
    """
    if name != "core_he_burning":
        return np.linspace(coordinate[0], coordinate[-1], count)
    age = phase["age_myr"]
    first_half = age <= age[0] + 0.5 * (age[-1] - age[0])
    anchor = age[np.argmin(np.where(first_half, phase["logl"], np.inf))]
    return np.concatenate([np.linspace(age[0], anchor, CHEB_DESCENT_EEPS, endpoint=False),
                           np.linspace(anchor, age[-1], count - CHEB_DESCENT_EEPS)])


def _with_helium_ignition_tip(phase, ignition):
    """Giant branch extended from its last output step to helium ignition.

    The output steps stop up to one step (~1% in L) short of the tip.  The tip is
    where the core mass reaches its value at ignition, M_c,HeI (the first
    core-He-burning step): log L is extended linearly in log M_c (on the giant
    branch L is a power of M_c, the core-mass-luminosity relation of Hurley et al.
    2000), the other columns linearly in log L, and the age is that of ignition.
    """
    last, before = {c: v[-1] for c, v in phase.items()}, {c: v[-2] for c, v in phase.items()}
    slope = ((last["logl"] - before["logl"])
             / np.log10(last["core_mass_msun"] / before["core_mass_msun"]))
    tip_logl = last["logl"] + slope * np.log10(ignition["core_mass_msun"] / last["core_mass_msun"])
    step = (tip_logl - last["logl"]) / (last["logl"] - before["logl"])
    tip = {c: last[c] + step * (last[c] - before[c]) for c in phase}
    tip.update(logl=tip_logl, core_mass_msun=ignition["core_mass_msun"],
               age_myr=max(ignition["age_myr"], last["age_myr"]))
    return {c: np.append(v, tip[c]) for c, v in phase.items()}


def resample_to_eeps(age_myr, kstar, lum_lsun, radius_rsun, mass_msun, core_mass_msun,
                     extra=None, label="track", require_remnant=True):
    """Resample one dense track at the equivalent evolutionary points of PHASE_EEPS.

    Within each phase (kstar 0/1 main sequence, 2 Hertzsprung gap, 3 giant branch,
    4 core-He burning; Hurley et al. 2000) the n EEPs sit at equal steps of a phase
    coordinate x (:data:`PHASE_SPACING`),

    .. math:: x_i = x_{start} + (x_{end} - x_{start})\\, i / (n - 1),

    x = path length in (log L, log Teff, age) on the main sequence, age on the
    Hertzsprung gap and in core-He burning (in two parts, see ``_eep_positions``),
    log L on the giant branch (to the helium-ignition tip).  Each phase ends where
    the next one starts; every column is linear in x between the dense points.  Then
    log Teff = log(5772 K) + (log L - 2 log R)/4 and
    log g = 4.438 + log M - 2 log R (IAU 2015 nominal solar values).

    Parameters
    ----------
    age_myr, kstar, lum_lsun, radius_rsun, mass_msun, core_mass_msun : array_like
        The dense track in time order (age from the ZAMS in Myr; L, R, masses in
        solar units).
    extra : dict of str -> array_like, optional
        More dense columns resampled the same way (e.g. an envelope mass).
    label : str
        Names the track in error messages (e.g. "M = 1.00 M_sun, Z = 0.020").
    require_remnant : bool
        True (the built-in grid): the track must end as a white dwarf (kstar >= 10)
        and core-He burning counts as complete only if the early AGB (kstar 5)
        follows.  False (users' tracks, which stop earlier): the track may end
        anywhere after the giant branch, and a core-He-burning phase that ends the
        track is taken to run to core-He exhaustion.

    Returns
    -------
    columns : dict of str -> ndarray, shape (N_EEPS,)
        ``age_myr, logl, logr, logteff, logg, mass_msun, core_mass_msun, kstar`` and
        the ``extra`` columns; NaN and kstar -1 in core-He burning when the track
        has no complete core-He-burning phase.
    missing_phase : str or None
        Why core-He burning is missing, or None.

    Raises
    ------
    PrioritizeError
        If the track is truncated: it does not end as a white dwarf (when
        required), or lacks a main sequence, Hertzsprung gap or giant branch.

    References
    ----------
    Hurley, Pols & Tout 2000, MNRAS 315, 543 (phase codes, Sect. 1, and the phase
    parameterisations the spacing follows); Dotter 2016, ApJS 222, 8 (EEP method).
    """
    age = np.asarray(age_myr, dtype=float)
    kstar = np.asarray(kstar, dtype=int)
    dense = {"age_myr": age, "logl": np.log10(np.asarray(lum_lsun, dtype=float)),
             "logr": np.log10(np.asarray(radius_rsun, dtype=float)),
             "mass_msun": np.asarray(mass_msun, dtype=float),
             "core_mass_msun": np.asarray(core_mass_msun, dtype=float)}
    dense.update({name: np.asarray(values, dtype=float) for name, values in (extra or {}).items()})
    if require_remnant and kstar[-1] < FIRST_REMNANT_KSTAR:
        raise PrioritizeError(f"track {label} is truncated: it stops at age {age[-1]:.0f} Myr in "
                              f"phase kstar {kstar[-1]} instead of ending as a white dwarf; "
                              "raise tphysf")
    phases = {"main_sequence": _phase_rows(kstar, MAIN_SEQUENCE_KSTARS, label),
              "subgiant": _phase_rows(kstar, (HERTZSPRUNG_GAP,), label),
              "giant_branch": _phase_rows(kstar, (GIANT_BRANCH,), label),
              "core_he_burning": _phase_rows(kstar, (CORE_HE_BURNING,), label)}
    for name in ("main_sequence", "subgiant", "giant_branch"):
        if phases[name].size < 2:
            raise PrioritizeError(f"track {label} is truncated: phase '{name}' has "
                                  f"{phases[name].size} output step(s)")

    def next_code(rows):
        return int(kstar[rows[-1] + 1]) if rows[-1] + 1 < kstar.size else None

    he_rows = phases["core_he_burning"]
    missing_phase = None
    if he_rows.size == 0:
        after_gb = next_code(phases["giant_branch"])
        missing_phase = ("no core-He burning: the track ends on the giant branch" if after_gb is None
                         else f"no core-He burning: the envelope was lost on the giant branch "
                              f"(next phase kstar {after_gb})")
    elif he_rows.size < 2 or next_code(he_rows) not in ((EARLY_AGB,) if require_remnant else (EARLY_AGB, None)):
        missing_phase = (f"core-He burning ended by envelope loss (kstar 4 -> "
                         f"{next_code(he_rows)}) before the early AGB")
    out = {name: np.full(N_EEPS, np.nan) for name in dense}
    out["kstar"] = np.full(N_EEPS, MISSING_PHASE_CODE, dtype=np.int8)
    for name, rows in phases.items():
        if name == "core_he_burning" and missing_phase is not None:
            continue
        if name == "giant_branch":
            rows = rows[: np.argmax(dense["logl"][rows]) + 1]
        elif rows[-1] + 1 < kstar.size:
            rows = np.append(rows, rows[-1] + 1)     # the phase ends where the next one starts
        keep = _strictly_increasing(dense["logl" if name == "giant_branch" else "age_myr"][rows])
        if keep.sum() < 2:
            raise PrioritizeError(f"track {label} is truncated: phase '{name}' spans no time")
        phase = {column: values[rows[keep]] for column, values in dense.items()}
        if (name == "giant_branch" and he_rows.size
                and dense["core_mass_msun"][he_rows[0]] > phase["core_mass_msun"][-1]):
            phase = _with_helium_ignition_tip(phase, {c: v[he_rows[0]] for c, v in dense.items()})
        start, stop = PHASE_EEPS[name]
        coordinate = _phase_coordinate(name, phase)
        positions = _eep_positions(name, phase, coordinate, stop - start)
        for column, values in phase.items():
            out[column][start:stop] = np.interp(positions, coordinate, values)
        out["kstar"][start:stop] = kstar[rows[0]]
    out["logteff"] = _log_teff(out["logl"], out["logr"])
    out["logg"] = LOGG_SUN + np.log10(out["mass_msun"]) - 2.0 * out["logr"]
    return out, missing_phase


def tracks_table(masses, z, bse_options=None, tphysf_myr=TPHYSF_MYR):
    """Evolve and resample every (mass, Z) pair into the long grid table.

    Parameters
    ----------
    masses : sequence of float
        Initial masses (M_sun).
    z : sequence of float
        Metal mass fractions.
    bse_options : dict, optional
        Default: :func:`default_bse_options`.
    tphysf_myr : float
        Maximum age evolved (Myr).

    Returns
    -------
    table : pandas.DataFrame
        Columns ``KEY_COLUMNS``, the structure columns of
        :data:`prioritize.stars.tracks.TRACK_COLUMNS` (all but ``m_cz_msun``) and
        ``m_cz_fit_msun`` (the fits' envelope mass), sorted by z, mass, eep.
    missing : list of dict
        Tracks without a complete core-He-burning phase: mass, z, reason.
    """
    masses = np.asarray(masses, dtype=float)
    z = np.asarray(z, dtype=float)
    frames, missing = [], []
    for zi in z:
        bcm = evolve_single_stars(masses, zi, bse_options, tphysf_myr)
        for i, mass in enumerate(masses):
            star = bcm[bcm["bin_num"] == i]
            columns, why = resample_to_eeps(
                star["tphys"], star["kstar_1"], star["lum_1"], star["rad_1"], star["mass_1"],
                star["massc_he_layer_1"] + star["massc_co_layer_1"],
                extra={"m_cz_fit_msun": star["menv_1"]}, label=f"M = {mass:.3f} M_sun, Z = {zi:.4f}")
            if why is not None:
                missing.append({"initial_mass_msun": float(mass), "z": float(zi), "reason": why})
            frame = pd.DataFrame(columns)
            frame.insert(0, "eep", np.arange(N_EEPS, dtype=np.int16))
            frame.insert(0, "z", float(zi))
            frame.insert(0, "initial_mass_msun", float(mass))
            frames.append(frame)
    table = pd.concat(frames, ignore_index=True).sort_values(["z", "initial_mass_msun", "eep"])
    return table.reset_index(drop=True), missing


def envelope_stride_per_eep(strides=None):
    """Stride of the envelope integration at each EEP, from a stride per phase.

    Parameters
    ----------
    strides : dict of str -> int, optional
        Phase name of :data:`PHASE_EEPS` -> stride; default :data:`ENVELOPE_STRIDES`.

    Returns
    -------
    ndarray of int, shape (N_EEPS,)
    """
    strides = ENVELOPE_STRIDES if strides is None else strides
    out = np.ones(N_EEPS, dtype=int)
    for name, (start, stop) in PHASE_EEPS.items():
        out[start:stop] = int(strides[name])
    return out


def track_envelope(track, z, alpha_solar, strides=None):
    """Envelope columns of one resampled track (:mod:`prioritize.stars.envelope`).

    Calls :func:`prioritize.stars.envelope.envelope_along_track` with the stride of
    :func:`envelope_stride_per_eep` and converts its output to grid columns: the
    envelope columns, ``envelope_quality``, the track's RGB bump
    (:func:`prioritize.stars.envelope.rgb_bump_position`, repeated on every row) and
    the profiles as log10 rho and log10 T at the 16 depths of
    :data:`prioritize.stars.tracks.PROFILE_DEPTH_FRACTIONS`.

    Parameters
    ----------
    track : dict of str -> ndarray, shape (N_EEPS,)
        ``mass_msun, logr, logl, logteff, core_mass_msun, kstar`` along the EEPs.
    z : float
        Metal mass fraction.
    alpha_solar : float
        Solar-calibrated mixing length.
    strides : dict, optional
        Per-phase strides (default :data:`ENVELOPE_STRIDES`).

    Returns
    -------
    dict of str -> ndarray, shape (N_EEPS,)
        Planning estimates (see :mod:`prioritize.stars.envelope`).
    """
    env = envelope_along_track({k: track[k] for k in _ENVELOPE_TRACK_KEYS}, z, alpha_solar,
                               eep_stride=envelope_stride_per_eep(strides))
    out = {name: env[name] for name in _ENVELOPE_FLOAT_COLUMNS}
    out[QUALITY_COLUMN] = env["envelope_quality"]
    bump = rgb_bump_position(track["mass_msun"], track["core_mass_msun"], env["m_cz_msun"], track["kstar"])
    out[BUMP_COLUMN] = np.full(N_EEPS, bump)
    with np.errstate(divide="ignore", invalid="ignore"):
        for quantity, key in (("rho", "profile_rho_gcc"), ("t", "profile_t_k")):
            for k in range(PROFILE_POINTS):
                out[profile_column(quantity, k)] = np.log10(env[key][:, k])
    return out


def _envelope_task(task):
    z, track, alpha_solar, strides = task
    return track_envelope(track, z, alpha_solar, strides)


def envelope_table(table, alpha_solar, strides=None, workers=1, progress=None):
    """Add the envelope columns to a grid table, one process per track at a time.

    Parameters
    ----------
    table : pandas.DataFrame
        Output of :func:`tracks_table` (sorted by z, initial mass, EEP).
    alpha_solar : float
        Solar-calibrated mixing length (:func:`prioritize.stars.envelope.calibrate_solar_alpha`).
    strides : dict, optional
        Per-phase strides (default :data:`ENVELOPE_STRIDES`).
    workers : int
        Worker processes (1: in this process).
    progress : callable, optional
        Called as ``progress(done, total)`` after each track.

    Returns
    -------
    pandas.DataFrame
        The table with ``m_cz_msun`` (ours) and the other envelope and profile columns.
    """
    keys = ["z", "initial_mass_msun"]
    groups = [frame for _, frame in table.groupby(keys, sort=True)]
    tasks = [(float(frame["z"].iloc[0]), {c: frame[c].to_numpy() for c in _ENVELOPE_TRACK_KEYS},
              float(alpha_solar), strides) for frame in groups]
    results = []
    pool = multiprocessing.get_context("fork").Pool(workers) if workers > 1 else contextlib.nullcontext()
    with pool:
        iterator = (pool.imap(_envelope_task, tasks, chunksize=1) if workers > 1
                    else map(_envelope_task, tasks))
        for result in iterator:
            results.append(result)
            if progress:
                progress(len(results), len(tasks))
    frames = [frame.reset_index(drop=True).assign(**result) for frame, result in zip(groups, results)]
    return pd.concat(frames, ignore_index=True)


def provenance_path_for(output):
    """Sidecar provenance file of a grid file: ``<stem without _grid>_provenance.json``."""
    output = Path(output)
    return output.with_name(f"{output.stem.removesuffix('_grid')}_provenance.json")


def _atomic_write(path, write):
    """Call ``write(tmp_path)`` and move the result onto ``path``."""
    path = Path(path)
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".tmp")
    os.close(fd)
    try:
        write(tmp)
        os.chmod(tmp, 0o644)
        os.replace(tmp, path)
    finally:
        if os.path.exists(tmp):
            os.unlink(tmp)


def round_significand(values, bits):
    """Round to ``bits`` significant binary digits (NaN kept), so that stored floats compress.

    Parameters
    ----------
    values : array_like
        Floats.
    bits : int
        Significant bits kept; the relative rounding error is at most 2**-bits.

    Returns
    -------
    ndarray of float64
    """
    mantissa, exponent = np.frexp(np.asarray(values, dtype=float))
    return np.ldexp(np.round(mantissa * 2.0 ** bits) / 2.0 ** bits, exponent)


def _profile_codes(values):
    """log10 profile values -> int16 multiples of PROFILE_LOG_STEP_DEX (None where NaN)."""
    import pyarrow as pa

    values = np.asarray(values, dtype=float)
    finite = np.isfinite(values)
    codes = np.round(np.where(finite, values, 0.0) / PROFILE_LOG_STEP_DEX)
    return pa.array(codes.astype(np.int16), mask=~finite)


def write_grid(table, provenance, output):
    """Write the grid as Parquet (provenance in its metadata) plus the JSON sidecar.

    Float columns are rounded to FLOAT32_SIGNIFICANT_BITS significant bits
    (envelope columns ENVELOPE_SIGNIFICANT_BITS, ages AGE_SIGNIFICANT_BITS) and
    the profiles stored as int16 multiples of PROFILE_LOG_STEP_DEX in log10, so
    that the file compresses (~20 MB).
    """
    import pyarrow as pa
    import pyarrow.parquet as pq

    float32 = [(c, FLOAT32_SIGNIFICANT_BITS) for c in (*_STRUCTURE_COLUMNS, BUMP_COLUMN)]
    float32 += [(c, ENVELOPE_SIGNIFICANT_BITS) for c in _ENVELOPE_FLOAT_COLUMNS]
    arrays = {"initial_mass_msun": pa.array(table["initial_mass_msun"].to_numpy(dtype=float)),
              "z": pa.array(table["z"].to_numpy(dtype=float)),
              "eep": pa.array(table["eep"].to_numpy().astype(np.int16)),
              "age_myr": pa.array(round_significand(table["age_myr"], AGE_SIGNIFICANT_BITS))}
    for column, bits in float32:
        arrays[column] = pa.array(round_significand(table[column], bits).astype(np.float32))
    for column in ("kstar", QUALITY_COLUMN):
        arrays[column] = pa.array(table[column].to_numpy().astype(np.int8))
    for column in PROFILE_COLUMNS:
        arrays[column] = _profile_codes(table[column])
    text = json.dumps(provenance, indent=1)
    arrow = pa.table(arrays).replace_schema_metadata({PROVENANCE_METADATA_KEY: text.encode()})
    floats = ["age_myr", *(c for c, _ in float32)]
    _atomic_write(output, lambda tmp: pq.write_table(
        arrow, tmp, compression="zstd", compression_level=19,
        use_dictionary=["initial_mass_msun", "z", "eep", "kstar", QUALITY_COLUMN, BUMP_COLUMN],
        use_byte_stream_split=[c for c in floats if c != BUMP_COLUMN],
        column_encoding={c: "DELTA_BINARY_PACKED" for c in PROFILE_COLUMNS}))
    _atomic_write(provenance_path_for(output), lambda tmp: Path(tmp).write_text(text + "\n"))


def _package_version(name):
    from importlib.metadata import PackageNotFoundError, version

    try:
        return version(name)
    except PackageNotFoundError:
        return None


def build(output=DEFAULT_OUTPUT, masses=DEFAULT_MASSES, z=DEFAULT_Z, command=None, workers=None,
          strides=None, progress=None):
    """Build a track grid and write it with its provenance (the builder's entry function).

    Parameters
    ----------
    output : path-like
        Parquet file to write; the provenance goes to :func:`provenance_path_for`.
    masses, z : sequence of float
        Initial masses (M_sun) and metal mass fractions of the grid.
    command : str, optional
        Command line recorded in the provenance.
    workers : int, optional
        Processes for the envelope integrations (default: the number of cores).
    strides : dict, optional
        Envelope stride per phase (default :data:`ENVELOPE_STRIDES`).
    progress : callable, optional
        ``progress(done, total)`` after each track's envelope.

    Returns
    -------
    dict
        The provenance written.
    """
    masses = sorted({float(m) for m in masses})
    z = sorted({float(v) for v in z})
    if not masses or not z or masses[0] <= 0:
        raise PrioritizeError("give at least one positive initial mass and one metallicity Z")
    if z[0] < FITS_Z_RANGE[0] or z[-1] > FITS_Z_RANGE[1]:
        raise PrioritizeError(f"metallicities must lie in Z = {FITS_Z_RANGE[0]}-{FITS_Z_RANGE[1]}, "
                              f"where the Hurley et al. (2000) fits hold; got {z[0]}-{z[-1]}")
    workers = (os.cpu_count() or 1) if workers is None else int(workers)
    if workers < 1:
        raise PrioritizeError(f"workers must be at least 1; got {workers}")
    strides = dict(ENVELOPE_STRIDES if strides is None else strides)
    cosmic, _, _ = _require_cosmic()
    options = default_bse_options()
    started = time.perf_counter()
    table, missing = tracks_table(masses, z, options)
    tracks_time = time.perf_counter() - started
    alpha_solar = calibrate_solar_alpha(Z_SUN_TRACKS)
    table = envelope_table(table, alpha_solar, strides, workers, progress)
    run_time = time.perf_counter() - started
    provenance = {
        "description": "Single-star tracks from the Hurley, Pols & Tout (2000, MNRAS 315, 543) "
                       "fitting formulae evaluated by cosmic-popsynth, resampled at equivalent "
                       "evolutionary points, with the convective envelope integrated at every "
                       "track point by prioritize.stars.envelope (Kippenhahn, Weigert & Weiss 2012, "
                       "ch. 10-11; opacities of Iglesias & Rogers 1996 and Ferguson et al. 2005). "
                       "Planning estimates.",
        "generator": "prioritize.data.build_tracks",
        "command": command or "python -m prioritize.data.build_tracks",
        "build_date_utc": datetime.datetime.now(datetime.timezone.utc).isoformat(timespec="seconds"),
        "run_time_s": round(run_time, 1),
        "tracks_run_time_s": round(tracks_time, 1),
        "envelope_run_time_s": round(run_time - tracks_time, 1),
        "workers": workers,
        "cpu_count": os.cpu_count(),
        "cosmic_version": cosmic.__version__,
        "rm_tables_version": _package_version("rm-tables"),
        "python": platform.python_version(),
        "numpy": np.__version__,
        "stellar_engine": "sse",
        "initial_binaries": {"m2": 0, "porb": -1, "ecc": -1, "kstar1": 1, "kstar2": 15,
                             "tphysf_myr": TPHYSF_MYR},
        "dtp_myr": DTP_MYR,
        "random_seed": RANDOM_SEED,
        "zsun": ZSUN_OPTION,
        "bse_options": options,
        "initial_masses_msun": masses,
        "z": z,
        "phase_eeps": {k: list(v) for k, v in PHASE_EEPS.items()},
        "phase_spacing": PHASE_SPACING,
        "columns": {**TRACK_COLUMNS, **ENVELOPE_COLUMNS},
        "envelope": {
            "alpha_solar": alpha_solar,
            "alpha_calibration": "r_bcz = 0.713 R_sun for M = 1 M_sun, R = 1 R_sun, L = 1 L_sun, "
                                 f"Z = {Z_SUN_TRACKS}, X = 0.76 - 3Z",
            "strides": strides,
            "quality_codes": {str(k): v for k, v in TRACK_QUALITY_MEANINGS.items()},
            "lithium_burning_t_k": LITHIUM_BURNING_T_K,
            "profile_depth_fractions": [round(float(f), 6) for f in PROFILE_DEPTH_FRACTIONS],
            "profile_radius": "r_k = R (r_bcz/R)^f_k",
            "profile_log_step_dex": PROFILE_LOG_STEP_DEX,
            "rgb_bump": "first giant-branch point where the core mass reaches min(M - M_cz) over "
                        "the subgiant and giant branch, interpolated in core mass",
        },
        "teff_convention": "log Teff from log L and log R with Teff_sun = 5772 K (IAU 2015); "
                           "cosmic's own teff uses 1000 (1130 L/R^2)^(1/4) K, 0.45% hotter",
        "stored_significant_bits": {"age_myr": AGE_SIGNIFICANT_BITS,
                                    **{c: FLOAT32_SIGNIFICANT_BITS for c in _STRUCTURE_COLUMNS},
                                    **{c: ENVELOPE_SIGNIFICANT_BITS for c in _ENVELOPE_FLOAT_COLUMNS}},
        "tracks_without_core_he_burning": missing,
    }
    write_grid(table, provenance, output)
    return provenance


def _parse_values(text, what):
    """'a,b,c' or 'start:stop:step' (stop included) -> list of float."""
    try:
        if ":" in text:
            start, stop, step = (float(v) for v in text.split(":"))
            if step <= 0 or stop < start:
                raise ValueError
            return [float(v) for v in np.round(np.arange(start, stop + step / 2, step), 6)]
        return [float(v) for v in text.split(",") if v.strip()]
    except ValueError as exc:
        raise typer.BadParameter(f"{what}: give comma-separated numbers (1.0,1.5) or "
                                 f"start:stop:step (0.7:3.5:0.05), got '{text}'") from exc


def _report_progress(done, total):
    if done == total or done % 25 == 0:
        typer.echo(f"envelopes: {done}/{total} tracks", err=True)


app = typer.Typer(add_completion=False, help=__doc__.split("\n\n")[0])


@app.command()
def main(
    output: Path = typer.Option(DEFAULT_OUTPUT, "--output",
                                help="Parquet file to write (provenance JSON next to it)."),
    masses: str | None = typer.Option(None, "--masses",
                                      help="Initial masses (M_sun), '1.0,1.5' or '0.7:3.5:0.05' "
                                           "(default: 0.70-3.50 by 0.05, by 0.025 in 1.10-1.50 "
                                           "and 1.75-2.15)."),
    z: str | None = typer.Option(None, "--z",
                                 help="Metallicities Z, e.g. '0.014,0.02' (default: 15 values "
                                      "0.003-0.03)."),
    workers: int = typer.Option(os.cpu_count() or 1, "--workers", min=1,
                                help="Processes for the envelope integrations (default: all cores)."),
):
    """Build the stellar track grid (Hurley et al. 2000 fits via cosmic-popsynth).

    Example: python -m prioritize.data.build_tracks --output small_grid.parquet
    --masses 1.0,1.5 --z 0.02
    """
    mass_list = DEFAULT_MASSES if masses is None else _parse_values(masses, "--masses")
    z_list = DEFAULT_Z if z is None else _parse_values(z, "--z")
    try:
        provenance = build(output, mass_list, z_list,
                           command=" ".join(["python -m prioritize.data.build_tracks", *sys.argv[1:]]),
                           workers=workers, progress=_report_progress)
    except PrioritizeError as exc:
        typer.echo(f"error: {exc}", err=True)
        raise typer.Exit(1) from exc
    typer.echo(f"wrote {output} ({len(provenance['initial_masses_msun'])} masses x "
               f"{len(provenance['z'])} Z x {N_EEPS} EEPs) in {provenance['run_time_s']} s; "
               f"{len(provenance['tracks_without_core_he_burning'])} tracks without core-He burning")


if __name__ == "__main__":
    app()
