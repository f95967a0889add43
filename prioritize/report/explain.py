"""The whole chain for one star, with intermediate values and the source of each step.

The explanation is built from :data:`SECTIONS`: each section is a title and a list of
:class:`Shown` entries (label, output column, format, unit).  An entry is printed only
when its column is in the star's output row, so columns the chain adds or drops do not
break the text; :func:`shown_values` gives the formatted values, one per entry, which
is what tests compare with the ranked table.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass

import numpy as np
import pandas as pd

from .. import CAUTION
from ..config import Config

_OTHER_PLANET = re.compile(r"^(z_enrich|p_detect|lifetime_myr)_(.+)mj$")  # engine columns per extra planet
_OTHER_PLANET_LABELS = {"z_enrich": ("z", "{:.2f}", ""), "p_detect": ("P(z >= {thr:g})", "{:.3f}", ""),
                        "lifetime_myr": ("lifetime", "{:.3g}", "Myr")}


@dataclass(frozen=True)
class Shown:
    """One number (or text) of the explanation: ``label = value unit`` from ``column``."""

    label: str
    column: str
    fmt: str = "{:.3g}"
    unit: str = ""


SECTIONS: tuple[tuple[str, tuple[Shown, ...]], ...] = (
    ("Stellar parameters  (prioritize.stars.photometry; radius from Stefan-Boltzmann, "
     "Teff_sun = 5772 K)", (
        Shown("Teff", "teff_k", "{:.0f}", "K"), Shown("Teff source", "teff_source", "{}"),
        Shown("log L", "logl_lsun", "{:.3f}"), Shown("log L source", "logl_source", "{}"),
        Shown("R", "radius_rsun", "{:.3g}", "Rsun"),
        Shown("[Fe/H]", "feh", "{:+.2f}"), Shown("[Fe/H] source", "feh_source", "{}"))),
    ("Placement on tracks  (prioritize.stars.placement; Hurley, Pols & Tout 2000 tracks)", (
        Shown("route", "placement_method", "{}"),
        Shown("initial mass", "mass_msun", "{:.3f}", "Msun"),
        Shown("initial mass spread", "mass_err_msun", "{:.3f}", "Msun"),
        Shown("age", "age_gyr", "{:.3g}", "Gyr"), Shown("age spread", "age_err_gyr", "{:.2f}", "Gyr"),
        Shown("stage", "stage", "{}"), Shown("EEP", "eep", "{:.1f}"),
        Shown("best chi^2", "chi2_best", "{:.2f}"))),
    ("Convective envelope  (the track grid's envelope integration, prioritize.stars.tracks)", (
        Shown("M_cz", "m_cz_msun", "{:.4g}", "Msun"), Shown("T at its base", "t_bcz_k", "{:.3g}", "K"),
        Shown("rho at its base", "rho_bcz_gcc", "{:.3g}", "g/cm3"),
        Shown("r at its base", "r_bcz_rsun", "{:.3g}", "Rsun"),
        Shown("Li-preserving mass", "m_li_preserved_msun", "{:.3g}", "Msun"),
        Shown("envelope quality", "envelope_quality", "{}"))),
    ("Lithium baseline  (prioritize.lithium.baseline, or your reference population)", (
        Shown("baseline source", "baseline_source", "{}"), Shown("reference stars", "baseline_n", "{:.0f}"),
        Shown("ZAMS Teff of the track", "teff_zams_k", "{:.0f}", "K"),
        Shown("main-sequence A(Li)", "a_li_main_sequence", "{:.2f}"),
        Shown("first-dredge-up dilution", "dilution_dex", "{:+.2f}", "dex"),
        Shown("A(Li) baseline", "a_li_base", "{:.2f}"), Shown("baseline scatter", "a_li_scatter", "{:.2f}", "dex"),
        Shown("A(Li) detection limit", "a_li_detection_limit", "{:.2f}"),
        Shown("share in the Li-rich tail (clump, helium flash)", "li_rich_tail_fraction", "{:.3f}"))),
    ("Measured lithium  (your A(Li) against the baseline)", (
        Shown("A(Li) measured", "a_li", "{:.2f}"), Shown("A(Li) error", "a_li_err", "{:.2f}", "dex"),
        Shown("A(Li) is an upper limit", "a_li_is_limit", "{}"),
        Shown("z observed", "z_observed", "{:+.2f}", "sigma"),
        Shown("z observed is a limit", "z_observed_is_limit", "{}"),
        Shown("planet that explains it", "m_planet_needed_mjup", "{:.3g}", "M_J"))),
    ("Enrichment  (atom counting, prioritize.lithium.enrichment; planet = {cfg.planet.mass_mjup:g} M_J "
     "{cfg.planet.kind}, X_p = {cfg.planet.hydrogen_fraction:g}, A(Li)_p = {cfg.planet.a_li:g} "
     "raised by log10(Z_p / 0.0142) with Z_p = {cfg.planet.bulk_metallicity:g} when "
     "li_follows_metals = {cfg.planet.li_follows_metals})", (
        Shown("deposition", "deposition_scenario", "{}"),
        Shown("M_p", "m_planet_msun", "{:.3e}", "Msun"),
        Shown("A(Li) after mixing into M_cz", "a_li_enriched", "{:.2f}"),
        Shown("Delta A(Li)", "delta_a_li", "{:+.3f}", "dex"),
        Shown("z against scatter and tail", "z_enrich", "{:.2f}"), Shown("z spread", "z_enrich_err", "{:.2f}"),
        Shown("P(z >= {thr:g}) over the placement samples", "p_detect", "{:.3f}"),
        Shown("smallest planet for z >= {thr:g}", "m_planet_min_mjup", "{:.3g}", "M_J"))),
    ("Lifetime  (prioritize.lithium.lifetime: the star followed along its track)", (
        Shown("lifetime", "lifetime_myr", "{:.3g}", "Myr"),
        Shown("lifetime, 16th percentile sample", "lifetime_p16_myr", "{:.3g}", "Myr"),
        Shown("lifetime, 84th percentile sample", "lifetime_p84_myr", "{:.3g}", "Myr"),
        Shown("ended by", "lifetime_end", "{}"),
        Shown("Li burning time at the envelope base", "li_burning_timescale_myr", "{:.3g}", "Myr"))),
    ("Rotation  (prioritize.rotation)", (
        Shown("v_eq = 2 pi R / P", "veq_kms", "{:.2f}", "km/s"),
        Shown("v_eq expected", "veq_expected_kms", "{:.2f}", "km/s"),
        Shown("expected spread", "veq_expected_spread_kms", "{:.2f}", "km/s"),
        Shown("expectation from", "rot_expect_source", "{}"),
        Shown("anomaly", "rot_anomaly_sigma", "{:+.1f}", "sigma"),
        Shown("rapid rotator", "rapid_rotator", "{}"),
        Shown("planet for the spin excess", "m_planet_spin_mjup", "{:.3g}", "M_J"),
        Shown("spin vs lithium", "spin_li_consistency", "{}"),
        Shown("share of the lifetime the spin-up stays visible", "spin_visible_fraction", "{:.3g}"),
        Shown("likelihood ratio p(v | engulfed) / p(v | normal)", "rotation_likelihood_ratio", "{:.3g}"))),
    ("Observing cost  (prioritize.spectra, prioritize.exposure; Cayrel 1988; airmass "
     "{cfg.observing.airmass:g}, {cfg.observing.k_sigma:g} sigma; floors: S/N >= "
     "{cfg.observing.min_snr_per_pixel:g} per pixel, Delta EW >= {cfg.observing.ew_floor_mA:g} mA; "
     "P(measured) x {cfg.observing.cool_measured_factor:g} below {cfg.observing.cool_limit_k:.0f} K)", (
        Shown("instrument", "instrument", "{}"),
        Shown("EW(6708) baseline", "ew_base_mA", "{:.1f}", "mA"),
        Shown("EW(6708) enriched", "ew_enriched_mA", "{:.1f}", "mA"),
        Shown("Delta EW", "delta_ew_mA", "{:.1f}", "mA"),
        Shown("Delta EW clears the systematic floor", "delta_ew_measurable", "{}"), Shown("line FWHM", "line_fwhm_A", "{:.3f}", "A"),
        Shown("S/N per pixel needed", "snr_needed", "{:.0f}"), Shown("R_C", "r_c_mag", "{:.2f}", "mag"),
        Shown("R_C from", "r_c_source", "{}"),
        Shown("exposure", "exposure_s", "{:.0f}", "s"), Shown("exposure limit", "exposure_flag", "{}"),
        Shown("S/N reached", "snr_at_exposure", "{:.0f}"), Shown("overhead", "overhead_s", "{:.0f}", "s"),
        Shown("lines to take", "lines_to_measure", "{}"),
        Shown("outside coverage", "coverage_missing", "{}"))),
    ("Priority = expected detections per hour  (prioritize.score; `prioritize rank` orders by it)", (
        Shown("giant planets swept by the growing radius (prioritize.engulfment)", "planets_swept", "{:.3g}"),
        Shown("capture radius now", "capture_radius_now_rsun", "{:.3g}", "Rsun"),
        Shown("capture radius one lifetime ago", "capture_radius_then_rsun", "{:.3g}", "Rsun"),
        Shown("of it from dynamically delivered planets", "p_background", "{:.3g}"),
        Shown("P(engulfed | history)", "p_engulfed_history", "{:.3g}"),
        Shown("x rotation likelihood ratio", "rotation_likelihood_ratio", "{:.3g}"),
        Shown("P(engulfed) = p LR / (1 - p + p LR)", "p_engulfed", "{:.3g}"),
        Shown("P(z >= {thr:g})", "p_detect", "{:.3f}"),
        Shown("P(measured)", "p_measured", "{:.3f}"),
        Shown("time on target", "time_on_target_s", "{:.0f}", "s"),
        Shown("priority", "priority", "{:.3e}", "per hour"))),
)


def _missing(value) -> bool:
    if value is None or value is pd.NA:
        return True
    if isinstance(value, (float, np.floating)):
        return math.isnan(value)
    return isinstance(value, str) and value == ""


def format_value(row: pd.Series, shown: Shown) -> str:
    """``shown``'s value in ``row`` as the explanation prints it ('-' when missing)."""
    value = row.get(shown.column)
    if _missing(value):
        return "-"
    if isinstance(value, (bool, np.bool_)):
        text = str(bool(value))
    else:
        try:
            text = shown.fmt.format(value)
        except (ValueError, TypeError):
            text = str(value)
    return f"{text} {shown.unit}".rstrip()


def _other_planets(row: pd.Series) -> tuple[Shown, ...]:
    """Entries for the extra planet masses (``--planet-mass 1,5,10``) present in the row."""
    entries = []
    for name in row.index:
        match = _OTHER_PLANET.match(str(name))
        if match:
            label, fmt, unit = _OTHER_PLANET_LABELS[match.group(1)]
            entries.append(Shown(f"{label} for a {match.group(2)} M_J planet", name, fmt, unit))
    return tuple(entries)


def shown_values(row: pd.Series, cfg: Config) -> list[tuple[str, list[tuple[Shown, str]]]]:
    """Section titles and the (entry, formatted value) pairs the explanation prints.

    Entries whose column is not in ``row`` are left out; the labels and titles have the
    configuration's values filled in."""
    thr = cfg.thresholds.z_signature
    out = []
    for title, entries in SECTIONS:
        if title.startswith("Lifetime"):          # the other planets' z, P and lifetime
            entries = entries + _other_planets(row)
        present = [Shown(e.label.format(thr=thr), e.column, e.fmt, e.unit) for e in entries
                   if e.column in row.index]
        out.append((title.format(cfg=cfg), [(e, format_value(row, e)) for e in present]))
    return out


def explain_text(inputs: pd.Series, row: pd.Series, cfg: Config) -> str:
    """Plain-text explanation of one star's chain.

    Parameters
    ----------
    inputs : Series
        The star's canonical input row (after column mapping and validation).
    row : Series
        Its output row from the engine, computed as ``prioritize rank`` computes it
        (:func:`prioritize.engine.rank_row`).
    cfg : Config
        The configuration used.

    Returns
    -------
    str
        Header, inputs, one numbered block per section of :data:`SECTIONS` with
        ``label = value unit`` lines, and the caution.
    """
    given = {k: v for k, v in inputs.items() if k not in ("status", "note") and not _missing(v)}
    lines = [f"Star {row['star_id']}  —  status: {row['status']}"
             + (f"  ({row['note']})" if not _missing(row.get("note")) else ""), "",
             "1. Inputs (canonical names): " + ", ".join(f"{k}={v}" for k, v in given.items())]
    for number, (title, values) in enumerate(shown_values(row, cfg), start=2):
        lines += ["", f"{number}. {title}"]
        lines += [f"   {shown.label} = {text}" for shown, text in values]
    lines += ["", f"Caution: {CAUTION}"]
    return "\n".join(lines)
