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
             f" age = {_v(row, 'age_gyr', '{:.3g}')} ± {_v(row, 'age_err_gyr', '{:.2f}')} Gyr",
             f"   stage = {row.get('stage', '')}, EEP = {_v(row, 'eep', '{:.1f}')},"
             f" best chi^2 = {_v(row, 'chi2_best', '{:.2f}')}", "",
             "4. Convective envelope  (track grid; SCIENCE.md §16)",
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
             f"   smallest planet for z >= {thr:g}: {_v(row, 'm_planet_min_mjup', '{:.3g}', 'M_J')}", "",
             "8. Rotation  (SCIENCE.md §11)",
             f"   v_eq = 2πR/P = {_v(row, 'veq_kms', '{:.2f}', 'km/s')}; expected"
             f" {_v(row, 'veq_expected_kms', '{:.2f}')} ± {_v(row, 'veq_expected_spread_kms', '{:.2f}', 'km/s')}"
             f" [{row.get('rot_expect_source', '')}]",
             f"   anomaly = {_v(row, 'rot_anomaly_sigma', '{:+.1f}', 'sigma')}, rapid rotator: {row.get('rapid_rotator', '')},"
             f" planet for the spin excess = {_v(row, 'm_planet_spin_mjup', '{:.3g}', 'M_J')}"
             f" ({row.get('spin_li_consistency', '')})",
             f"   P(engulfed | rotation) = {_v(row, 'p_engulfed_rotation', '{:.3f}')}"
             f" (prior odds {cfg.rotation.base_odds:g}, raised by the anomaly)", "",
             f"9. Observing cost on {row.get('instrument', '')}  (SCIENCE.md §7-§9; Cayrel 1988)",
             f"   EW(6708) = {_v(row, 'ew_base_mA', '{:.1f}')} -> {_v(row, 'ew_enriched_mA', '{:.1f}', 'mA')}"
             f" (ΔEW = {_v(row, 'delta_ew_mA', '{:.1f}', 'mA')}), line FWHM = {_v(row, 'line_fwhm_A', '{:.3f}', 'A')}",
             f"   S/N per pixel for {cfg.observing.k_sigma:g} sigma = {_v(row, 'snr_needed', '{:.0f}')};"
             f" R_C = {_v(row, 'r_c_mag', '{:.2f}')} at airmass {cfg.observing.airmass:g}"
             f" -> exposure {_v(row, 'exposure_s', '{:.0f}', 's')} [{row.get('exposure_flag', '')}],"
             f" S/N reached {_v(row, 'snr_at_exposure', '{:.0f}')}, + {_v(row, 'overhead_s', '{:.0f}', 's')} overhead",
             f"   lines to take: {row.get('lines_to_measure', '')}"
             + (f"; outside coverage: {row['coverage_missing']}" if row.get("coverage_missing") else ""), "",
             "10. Priority = expected detections per hour",
             f"   = P(engulfed | rotation) {_v(row, 'p_engulfed_rotation', '{:.3g}')}"
             f" x lifetime weight {_v(row, 'lifetime_weight', '{:.3f}')}"
             f" [t/(t + {cfg.scoring.lifetime_scale_myr:g} Myr), 0 below {cfg.thresholds.min_lifetime_myr:g} Myr]",
             f"     x P(z >= {thr:g}) {_v(row, 'p_detect', '{:.3f}')} x P(measured) {_v(row, 'p_measured', '{:.3f}')}"
             f" / {_v(row, 'time_on_target_s', '{:.0f}', 's')} in hours",
             f"   = {_v(row, 'priority', '{:.3e}')} per hour  (`prioritize rank` orders the list by it)", "",
             f"Caution: {CAUTION}"]
    return "\n".join(lines)
