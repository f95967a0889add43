"""The whole chain for one star, with intermediate values and the source of each step."""

from __future__ import annotations

import math

import pandas as pd

from .. import CAUTION
from ..config import Config


def _v(row, key, fmt="{:.3g}", unit=""):
    value = row.get(key)
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return "-"
    try:
        text = fmt.format(value)
    except (ValueError, TypeError):
        text = str(value)
    return f"{text} {unit}".rstrip()


def explain_text(inputs: pd.Series, row: pd.Series, cfg: Config) -> str:
    """Plain-text explanation of one star's chain.

    Parameters
    ----------
    inputs : Series
        The star's canonical input row (after column mapping and validation).
    row : Series
        Its output row from the engine.
    cfg : Config
        The configuration used.
    """
    given = {k: v for k, v in inputs.items()
             if k not in ("status", "note") and not (isinstance(v, float) and math.isnan(v))
             and v is not None and v != ""}
    thr = cfg.thresholds.z_signature
    planet = cfg.planet
    lines = [f"Star {row['star_id']}  —  status: {row['status']}"
             + (f"  ({row['note']})" if row.get("note") else ""), "",
             "1. Inputs (canonical names): " + ", ".join(f"{k}={v}" for k, v in given.items()), "",
             "2. Stellar parameters",
             f"   Teff  = {_v(row, 'teff_k', '{:.0f}', 'K')}   [{row.get('teff_source', '')}]",
             f"   log L = {_v(row, 'logl_lsun', '{:.3f}')}   [{row.get('logl_source', '')}]",
             f"   R     = {_v(row, 'radius_rsun', '{:.3g}', 'Rsun')}   (Stefan-Boltzmann, Teff_sun = 5772 K)",
             f"   [Fe/H] = {_v(row, 'feh', '{:+.2f}')}   [{row.get('feh_source', '')}]", "",
             f"3. Placement on tracks  [{row.get('placement_method', '')}]  "
             "(Hurley, Pols & Tout 2000 tracks; Salpeter IMF x time spent as prior)",
             f"   initial mass = {_v(row, 'mass_msun', '{:.3f}')} ± {_v(row, 'mass_err_msun', '{:.3f}')} Msun,"
             f" age = {_v(row, 'age_gyr', '{:.3g}')} ± {_v(row, 'age_err_gyr', '{:.2g}')} Gyr",
             f"   stage = {row.get('stage', '')}, EEP = {_v(row, 'eep', '{:.1f}')},"
             f" best chi^2 = {_v(row, 'chi2_best', '{:.2f}')}", "",
             "4. Convective envelope  (track grid's envelope column; interim until the envelope integration)",
             f"   M_cz = {_v(row, 'm_cz_msun', '{:.4g}', 'Msun')}", "",
             "5. Lithium baseline  [" + str(row.get("baseline_source", "")) + "]  (SCIENCE.md §17)",
             f"   ZAMS Teff of the track = {_v(row, 'teff_zams_k', '{:.0f}', 'K')}"
             f" -> main-sequence A(Li) = {_v(row, 'a_li_main_sequence', '{:.2f}')}",
             f"   first-dredge-up dilution = {_v(row, 'dilution_dex', '{:+.2f}', 'dex')}"
             f" -> A(Li)_base = {_v(row, 'a_li_base', '{:.2f}')} ± {_v(row, 'a_li_scatter', '{:.2f}')} (scatter)", "",
             f"6. Enrichment  (atom counting, SCIENCE.md §2): planet = {planet.mass_mjup:g} M_J {planet.kind},"
             f" X_p = {planet.hydrogen_fraction:g}, A(Li)_p = {planet.a_li:g}",
             f"   M_p = {_v(row, 'm_planet_msun', '{:.3e}', 'Msun')} mixed into M_cz:"
             f" A(Li)_new = {_v(row, 'a_li_enriched', '{:.2f}')}, ΔA = {_v(row, 'delta_a_li', '{:+.3f}')} dex",
             f"   z = ΔA / σ = {_v(row, 'z_enrich', '{:.2f}')} ± {_v(row, 'z_enrich_err', '{:.2f}')}"
             f"   P(z >= {thr:g}) over the placement samples = {_v(row, 'p_detect', '{:.2f}')}", "",
             "7. Lifetime  (follow the track: dilution into the deepening envelope, RGB bump, SCIENCE.md §19)",
             f"   lifetime = {_v(row, 'lifetime_myr', '{:.3g}', 'Myr')}, ended by: {row.get('lifetime_end', '')}", "",
             "8. Priority (interim) = P(z >= threshold) x lifetime weight",
             f"   = {_v(row, 'p_detect', '{:.3f}')} x {_v(row, 'lifetime_weight', '{:.3f}')}"
             f"  [w = t/(t + {cfg.scoring.lifetime_scale_myr:g} Myr), 0 below {cfg.thresholds.min_lifetime_myr:g} Myr]"
             f" = {_v(row, 'priority', '{:.4f}')}   rank {_v(row, 'rank', '{:.0f}')}", "",
             f"Caution: {CAUTION}"]
    return "\n".join(lines)
