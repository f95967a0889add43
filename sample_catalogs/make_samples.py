"""Generate the bundled sample catalogs (all stars invented; seeded, reproducible).

    python sample_catalogs/make_samples.py

Writes, beside this script:

- ``cluster_members.csv`` — members of the invented open cluster "Valtra 5"
  (2.0 Gyr, [Fe/H] = 0.0, 850 pc, E(B-V) = 0.06) from the main sequence through
  the turnoff and subgiant branch to the red clump, with Gaia-like photometry and
  parallaxes, some rotation periods and v sin i, and a few measured A(Li);
- ``field_stars.csv`` — ~2,000 invented field dwarfs, subgiants and giants of the
  kind photometric and time-series surveys deliver, some with spectroscopic
  parameters, some with asteroseismic mass and stage, a handful with deliberate
  mistakes (to show the per-row statuses);
- ``reference_lithium.csv`` — ~20,000 invented stars with A(Li) or upper limits,
  a stand-in for a survey's own abundance table.

The stars are drawn from the package's own track grid and photometric relations,
so the catalogs are consistent with the models by construction: they exercise the
tool, they are not data.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from prioritize.lithium.baseline import li_preserving_mass_interim, prior_baseline
from prioritize.stars import photometry as ph
from prioritize.stars.placement import isochrone
from prioritize.stars.tracks import PHASE_EEPS, feh_to_z, load_grid

HERE = Path(__file__).resolve().parent
SEED = 20261201
CLUSTER = {"name": "Valtra 5", "age_gyr": 2.0, "feh": 0.0, "distance_pc": 850.0, "ebv": 0.06,
           "ra_deg": 97.42, "dec_deg": 12.31}


def _photometry(rng, teff, logg, logl, feh, distance_pc, ebv):
    """Gaia-like G, BP-RP and parallax for stars of known parameters."""
    bp_rp0 = ph.bp_rp_from_teff(teff, logg, feh).value
    mbol = 4.74 - 2.5 * logl
    abs_g = mbol - ph.bc_g(teff).value
    ext = ph.gaia_extinction_from_intrinsic(ebv, bp_rp0)
    a_g, e_bprp = ext.a_g, ext.a_bp - ext.a_rp
    g = abs_g + 5 * np.log10(distance_pc / 10.0) + a_g
    g_err = 0.0003 + 0.002 * 10 ** (0.2 * (g - 15))
    bprp_err = 0.003 + 0.01 * 10 ** (0.2 * (g - 15))
    plx = 1000.0 / distance_pc
    plx_err = 0.015 + 0.02 * 10 ** (0.2 * (g - 15))
    return {"g_mag": g + rng.normal(0, g_err), "g_mag_err": g_err,
            "bp_rp": bp_rp0 + e_bprp + rng.normal(0, bprp_err), "bp_rp_err": bprp_err,
            "parallax_mas": plx + rng.normal(0, plx_err), "parallax_mas_err": plx_err}


def _model_points(grid, mass, z, eep):
    cols = grid.interpolate(mass, z, eep, columns=["logteff", "logl", "logg", "age_myr", "logr"])
    return {"teff": 10 ** cols["logteff"], "logl": cols["logl"], "logg": cols["logg"],
            "age_myr": cols["age_myr"]}


def make_cluster(grid, rng) -> pd.DataFrame:
    z = float(feh_to_z(CLUSTER["feh"]))
    iso = isochrone(grid, CLUSTER["age_gyr"] * 1e3, z, mass_step=0.0005)
    gb0 = PHASE_EEPS["subgiant"][0]
    ms = iso["eep"] < gb0
    # 220 main-sequence/turnoff members drawn from a Salpeter IMF, 90 evolved ones drawn
    # evenly along the evolved part of the isochrone (so every stage is represented).
    m_ms = iso["mass"][ms]
    w = m_ms ** -2.35 * np.gradient(m_ms)
    pick_ms = rng.choice(np.flatnonzero(ms), size=220, p=w / w.sum())
    evolved = np.flatnonzero(~ms)
    pick_ev = rng.choice(evolved, size=90, replace=True)
    pick = np.concatenate([pick_ms, pick_ev])
    mass, eep = iso["mass"][pick], iso["eep"][pick]
    p = _model_points(grid, mass, np.full_like(mass, z), eep)
    n = mass.size
    d = CLUSTER["distance_pc"] + rng.normal(0, 3.0, n)
    phot = _photometry(rng, p["teff"], p["logg"], p["logl"], CLUSTER["feh"], d, CLUSTER["ebv"])
    df = pd.DataFrame({"star_id": [f"Valtra5-{i + 1:03d}" for i in range(n)],
                       "ra_deg": CLUSTER["ra_deg"] + rng.normal(0, 0.15, n),
                       "dec_deg": CLUSTER["dec_deg"] + rng.normal(0, 0.15, n), **phot})
    radius = 10 ** (0.5 * p["logl"]) * (5772.0 / p["teff"]) ** 2
    giant = p["logg"] < 3.8
    # rotation: dwarfs spin down (P ~ 10-20 d at 2 Gyr for G/K, faster for F stars);
    # giants rotate slowly (v sin i 1-3 km/s); three members are injected fast rotators.
    prot = np.where(p["teff"] < 6300, 12.0 * (p["teff"] / 5772.0) ** -4 * rng.lognormal(0, 0.1, n),
                    np.nan)
    has_prot = (~giant) & (rng.uniform(size=n) < 0.6)
    df["prot_d"] = np.where(has_prot, prot, np.nan)
    veq = 2 * np.pi * radius * 695700.0 / (np.where(giant, 200.0, prot) * 86400.0)
    vsini = np.where(giant, rng.uniform(0.5, 3.0, n), veq * rng.uniform(0.3, 1.0, n))
    fast = rng.choice(np.flatnonzero(giant), size=3, replace=False)
    vsini[fast] = rng.uniform(12, 25, 3)
    df["vsini_kms"] = np.where(giant | (rng.uniform(size=n) < 0.3), vsini, np.nan)
    # a few measured A(Li) for evolved members, one Li-rich giant among them
    a_li = np.full(n, np.nan)
    measured = rng.choice(np.flatnonzero(giant), size=12, replace=False)
    a_li[measured] = rng.normal(1.0, 0.3, 12)
    a_li[measured[0]] = 2.4
    df["a_li"] = a_li
    df["a_li_err"] = np.where(np.isfinite(a_li), 0.1, np.nan)
    df["a_li_is_limit"] = np.isfinite(a_li) & (a_li < 0.6)
    for key in ("age_gyr", "feh", "distance_pc", "ebv"):
        df[f"cluster_{key}"] = CLUSTER[key]
    df.insert(1, "cluster", CLUSTER["name"])
    return df


def _draw_alive(grid, rng, n, eep_ranges):
    """Field stars: Salpeter masses 0.8-3 Msun, [Fe/H] ~ N(-0.05, 0.2), an evolutionary
    point uniform within one of ``eep_ranges`` (chosen at random); draws older than the
    Universe (13.8 Gyr), off the grid or outside the colour-Teff relation are redrawn."""
    mass, feh, eep, part = [], [], [], []
    while sum(len(m) for m in mass) < n:
        k = 3 * n
        f = np.clip(rng.normal(-0.05, 0.2, k), -0.8, 0.17)
        m = 0.8 * (1 - rng.uniform(size=k) * (1 - (3.0 / 0.8) ** -1.35)) ** (-1 / 1.35)
        which = rng.integers(0, len(eep_ranges), k)
        lo = np.array([r[0] for r in eep_ranges])[which]
        hi = np.array([r[1] for r in eep_ranges])[which]
        e = rng.uniform(lo, hi - 1)
        p = _model_points(grid, m, feh_to_z(f), e)
        # alive, younger than the Universe, and inside the colour-Teff relations' range
        ok = (np.isfinite(p["logl"]) & (p["age_myr"] <= 13800.0)
              & np.isfinite(ph.bp_rp_from_teff(p["teff"], p["logg"], f).value))
        mass.append(m[ok]); feh.append(f[ok]); eep.append(e[ok]); part.append(which[ok])
    return tuple(np.concatenate(x)[:n] for x in (mass, feh, eep, part))


def make_field(grid, rng, n=2000) -> pd.DataFrame:
    # a third each on the main sequence, the subgiant branch, the giant branch + clump
    mass, feh, eep, part = _draw_alive(grid, rng, n, [
        (PHASE_EEPS["main_sequence"][0], PHASE_EEPS["main_sequence"][1]),
        (PHASE_EEPS["subgiant"][0], PHASE_EEPS["subgiant"][1]),
        (PHASE_EEPS["giant_branch"][0], PHASE_EEPS["core_he_burning"][1])])
    z = feh_to_z(feh)
    p = _model_points(grid, mass, z, eep)
    d = 10 ** rng.uniform(np.log10(80), np.log10(1500), n)
    ebv = np.clip(0.0004 * d * rng.uniform(0.3, 1.5, n), 0, 0.6)
    phot = _photometry(rng, p["teff"], p["logg"], p["logl"], feh, d, ebv)
    df = pd.DataFrame({"star_id": [f"FLD-{i + 1:05d}" for i in range(n)],
                       "ra_deg": rng.uniform(0, 360, n),
                       "dec_deg": np.degrees(np.arcsin(rng.uniform(-0.6, 0.9, n))), **phot,
                       "ebv": ebv})
    spec = rng.uniform(size=n) < 0.45          # spectroscopic survey parameters
    df["teff_k"] = np.where(spec, p["teff"] + rng.normal(0, 80, n), np.nan)
    df["teff_k_err"] = np.where(spec, 80.0, np.nan)
    df["logg"] = np.where(spec, p["logg"] + rng.normal(0, 0.1, n), np.nan)
    df["logg_err"] = np.where(spec, 0.1, np.nan)
    df["feh"] = np.where(spec, feh + rng.normal(0, 0.08, n), np.nan)
    df["feh_err"] = np.where(spec, 0.08, np.nan)
    seismic = (~spec) & (part > 0) & (rng.uniform(size=n) < 0.25)   # asteroseismic mass + stage
    stage = np.where(part == 1, "subgiant", np.where(eep >= PHASE_EEPS["core_he_burning"][0],
                                                     "red_clump", "lower_giant_branch"))
    df["mass_msun"] = np.where(seismic, mass * rng.normal(1, 0.05, n), np.nan)
    df["mass_msun_err"] = np.where(seismic, 0.05 * mass, np.nan)
    df["stage"] = np.where(seismic, stage, "")
    radius = 10 ** (0.5 * p["logl"]) * (5772.0 / p["teff"]) ** 2
    has_prot = rng.uniform(size=n) < 0.3
    prot = np.where(part == 0, 15 * rng.lognormal(0, 0.4, n), 80 * radius / 4 * rng.lognormal(0, 0.4, n))
    df["prot_d"] = np.where(has_prot, prot, np.nan)
    df["vsini_kms"] = np.where(rng.uniform(size=n) < 0.3, rng.uniform(0.5, 6, n), np.nan)
    # deliberate mistakes, one of each kind the validator reports
    df.loc[5, "star_id"] = df.loc[4, "star_id"]            # duplicated id
    df.loc[10, "teff_k"] = 3.76                             # Teff given as log Teff
    df.loc[11, "parallax_mas"] = -0.8                       # negative parallax, no error
    df.loc[11, "parallax_mas_err"] = np.nan
    df["logg"] = df["logg"].astype(object)
    df.loc[12, "logg"] = "n/a"                              # non-numeric text
    df.loc[13, ["teff_k", "logg", "feh", "g_mag", "bp_rp", "parallax_mas"]] = np.nan  # nothing to go on
    return df


def make_reference(grid, rng, n=20000) -> pd.DataFrame:
    mass, feh, eep, _ = _draw_alive(grid, rng, n, [(0, PHASE_EEPS["core_he_burning"][1])])
    z = feh_to_z(feh)
    p = _model_points(grid, mass, z, eep)
    zams = grid.interpolate(mass, z, np.zeros(n), columns=["logteff"])
    tams = grid.interpolate(mass, z, np.full(n, PHASE_EEPS["main_sequence"][1]), columns=["age_myr"])
    m_cz = grid.interpolate(mass, z, eep, columns=["m_cz_msun"])["m_cz_msun"]
    a, s = prior_baseline(10 ** zams["logteff"], p["age_myr"] / 1e3, tams["age_myr"] / 1e3, m_cz,
                          li_preserving_mass_interim(mass), 0.35)
    a_obs = a + rng.normal(0, s)
    # rough detection limit (cooler is easier), never below A(Li) = -0.5
    limit = np.maximum(1.5 - 5.0 * (5040.0 / p["teff"] - 0.87), -0.5)
    is_limit = a_obs < limit
    ok = np.isfinite(a_obs)
    return pd.DataFrame({"star_id": [f"REF-{i + 1:05d}" for i in range(n)],
                         "teff_k": np.round(p["teff"] + rng.normal(0, 60, n)),
                         "logg": np.round(p["logg"] + rng.normal(0, 0.08, n), 2),
                         "feh": np.round(feh + rng.normal(0, 0.05, n), 2),
                         "a_li": np.round(np.where(is_limit, limit, a_obs), 2),
                         "a_li_is_limit": is_limit})[ok]


def main():
    rng = np.random.default_rng(SEED)
    grid = load_grid()
    make_cluster(grid, rng).to_csv(HERE / "cluster_members.csv", index=False, float_format="%.5g")
    make_field(grid, rng).to_csv(HERE / "field_stars.csv", index=False, float_format="%.5g")
    make_reference(grid, rng).to_csv(HERE / "reference_lithium.csv", index=False, float_format="%.5g")


if __name__ == "__main__":
    main()
