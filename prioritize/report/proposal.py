"""The proposal report: one self-contained HTML file with the figures and the totals.

:func:`build_report` turns a ranked table (and optionally a night plan and a season
table) into a :class:`Report`: the summary numbers (:func:`summary_numbers`, all
computed from the ranked table), the assumptions read from the table's metadata,
and the figures of :mod:`prioritize.report.plots`.  :func:`write_report` writes the
HTML (figures embedded as base64 PNG, no external reference of any kind, so it
opens from disk in any browser and sends no request) and the same figures as PNG
and SVG in a folder beside it, every file atomically.

The HTML is made with Jinja2 (template ``templates/report.html.j2``, autoescaped):
a template keeps the page's structure readable and escapes every value from the
table (star names, notes), which string concatenation would not.

Night plan columns used: ``star_id``, ``start_utc``, ``end_utc`` (ISO UTC; empty
for targets not planned), ``night`` if present (only the first night is drawn) and, when the altitude curves cannot be computed,
``airmass_start``/``airmass_end``; the curves need the plan's metadata ``site`` and
the targets' ``ra_deg``/``dec_deg`` from the ranked table.  Season table columns
used: ``star_id``, every ``<YYYY-MM>_hours`` and, when present, ``reason`` and the
metadata ``dark_hours``.  Other columns are ignored.
"""

from __future__ import annotations

import base64
import io
import math
import re
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from .. import CAUTION, __version__
from ..catalog import status as st
from ..catalog.status import STAGES
from ..errors import CatalogError, PrioritizeError
from . import plots

TOP_TARGETS = 15
LISTED_NOT_COMPUTED = 60
MAP_MASSES_MSUN = np.round(np.arange(0.9, 2.51, 0.1), 2)   # coarse map: enough for the outline
MAP_EEP_POINTS = 60
BUDGET_STEPS = (10, 25, 50, 100)
FIGURE_TITLES = {"hr_diagram": "HR diagram", "kiel_diagram": "Kiel diagram",
                 "colour_magnitude": "Colour–magnitude diagram", "rotation": "Rotation",
                 "significance_lifetime": "Significance against lifetime",
                 "detectability_map": "Detectability map", "budget": "Exposure budget and detections",
                 "night": "Night altitude chart", "season": "Season visibility"}
MONTH_COLUMN = re.compile(r"^(\d{4}-\d{2})_hours$")

METHODS = [
    ("Stellar tracks", "Hurley, Pols & Tout 2000 (MNRAS 315, 543), evaluated with COSMIC (Breivik et al. 2020)"),
    ("Convective envelopes", "mixing-length theory (Böhm-Vitense 1958) with OPAL (Iglesias & Rogers 1996) and "
                             "low-temperature (Ferguson et al. 2005) opacities"),
    ("Colour–Teff and bolometric corrections", "Casagrande et al. 2021, 2010; Alonso, Arribas & "
                                               "Martínez-Roger 1999; Andrae et al. 2018; Torres 2010"),
    ("Extinction", "Cardelli, Clayton & Mathis 1989; Babusiaux et al. 2018"),
    ("Abundances and lithium", "Asplund et al. 2009; Iben 1967 (first dredge-up); Charbonnel & Zahn 2007 "
                               "(thermohaline mixing); Théado & Vauclair 2012 (fingering mixing)"),
    ("Li I 6708 line strength", "Wang et al. 2021 (3D non-LTE grid); Cayrel 1988 (EW uncertainty)"),
    ("Planet disruption", "Jia & Spruit 2018; Siess & Livio 1999"),
    ("Rotation", "Barnes 2007; Mamajek & Hillenbrand 2008; Carlberg et al. 2011; de Medeiros & Mayor 1999"),
    ("Engulfment odds", "Wright et al. 2012; Cumming et al. 2008; Villaver & Livio 2009"),
    ("Sky computations", "Astropy Collaboration 2022"),
    ("Figures", "Hunter 2007 (matplotlib); viridis (van der Walt & Smith 2015) and cividis (Nuñez, "
                "Anderton & Renslow 2018) colour maps; Okabe & Ito 2008 palette"),
]
CAUTIONS = [
    CAUTION,
    "Significances, lifetimes and detection odds are model estimates for planning: they rest on "
    "stellar-track fits, an envelope model and, without a reference population, a model lithium "
    "prior whose scatter is a guess.",
    "Exposure times come from a generic CCD equation; the observatory's own exposure-time "
    "calculator prevails, and observing is subject to each observatory's rules and safety practice.",
    "Night and season charts are planning estimates (weather, telescope limits and other "
    "programmes are not modelled).",
]


@dataclass
class Report:
    """Everything the report shows: numbers, texts and figures (name -> Figure)."""

    title: str
    source: str
    summary: dict
    assumptions: list
    figures: dict = field(default_factory=dict)      # name -> (Figure, caption)
    notes: list = field(default_factory=list)
    not_computed: list = field(default_factory=list)
    top: list = field(default_factory=list)
    cluster: dict | None = None


# ----------------------------------------------------------------------------- numbers

def _num(table, column):
    if column not in table.columns:
        return np.full(len(table), np.nan)
    return pd.to_numeric(table[column], errors="coerce").to_numpy(float)


def summary_numbers(table: pd.DataFrame) -> dict:
    """The report's totals, each computed from the ranked table.

    Returns
    -------
    dict
        ``rows``; ``status`` (code -> rows); ``stage`` (stage -> computed rows) and
        ``stage_usable`` (stage -> rows with priority > 0); ``instruments``
        (instrument -> dict of ``ranked``, ``hours_ranked``, ``usable``,
        ``hours_usable``, ``detections_usable``); ``budget`` (list of dicts
        ``targets``, ``hours``, ``detections`` for the best-ranked 10, 25, 50, 100
        and all usable targets).  Hours are exposure + overheads
        (``time_on_target_s``); expected detections are sum(priority x hours).
    """
    status = table["status"].astype(str)
    ok = table[status == st.OK]
    stage = ok["stage"].astype(str) if "stage" in ok.columns else pd.Series([], dtype=str)
    priority = _num(ok, "priority")
    usable = np.nan_to_num(priority) > 0
    counts = status.value_counts()
    out = {"rows": int(len(table)),
           "status": {c: int(counts[c]) for c in list(st.ALL) + sorted(set(counts.index) - set(st.ALL))
                      if c in counts},
           "stage": {s: int((stage == s).sum()) for s in STAGES if (stage == s).any()},
           "stage_usable": {s: int(((stage == s).to_numpy() & usable).sum()) for s in STAGES
                            if (stage == s).any()},
           "usable": int(usable.sum())}
    ranked = table[_num(table, "rank") > 0].sort_values("rank")
    hours = _num(ranked, "time_on_target_s") / 3600.0
    pr = _num(ranked, "priority")
    instrument = (ranked["instrument"].astype(str) if "instrument" in ranked.columns
                  else pd.Series("unknown", index=ranked.index)).to_numpy()
    out["instruments"] = {}
    for name in sorted(set(instrument)):
        sel = instrument == name
        use = sel & (np.nan_to_num(pr) > 0)
        out["instruments"][name] = {
            "ranked": int(sel.sum()), "hours_ranked": float(np.nansum(hours[sel])),
            "usable": int(use.sum()), "hours_usable": float(np.nansum(hours[use])),
            "detections_usable": float(np.nansum(pr[use] * hours[use]))}
    n_usable = int((np.nan_to_num(pr) > 0).sum())
    steps = sorted({n for n in BUDGET_STEPS if n < n_usable} | ({n_usable} if n_usable else set()))
    out["budget"] = [{"targets": n, "hours": float(np.nansum(hours[:n])),
                      "detections": float(np.nansum(pr[:n] * hours[:n]))} for n in steps]
    return out


def top_targets(table: pd.DataFrame, n: int = TOP_TARGETS) -> list[dict]:
    """The first ``n`` ranked rows with the numbers a proposal quotes."""
    ranked = table[_num(table, "rank") > 0].sort_values("rank").head(n)
    rows = []
    for r in ranked.to_dict("records"):
        hours = float(r.get("time_on_target_s", np.nan)) / 3600.0
        rows.append({"rank": int(r["rank"]), "star_id": str(r["star_id"]),
                     "stage": str(r.get("stage", "")).replace("_", " "),
                     "teff_k": r.get("teff_k"), "logl_lsun": r.get("logl_lsun"),
                     "g_mag": r.get("g_mag"), "z_enrich": r.get("z_enrich"),
                     "p_detect": r.get("p_detect"), "lifetime_myr": r.get("lifetime_myr"),
                     "exposure_s": r.get("exposure_s"), "hours": hours,
                     "priority": r.get("priority"),
                     "rapid": str(r.get("rapid_rotator", "")).lower() in ("true", "1")})
    return rows


def _not_computed(table: pd.DataFrame) -> list[dict]:
    rows = table[table["status"].astype(str) != st.OK]
    return [{"star_id": str(r["star_id"]), "status": str(r["status"]), "note": str(r.get("note", "") or "")}
            for r in rows.head(LISTED_NOT_COMPUTED).to_dict("records")]


# ----------------------------------------------------------------------------- context

def report_config(meta: dict):
    """The configuration the ranked table was made with (its metadata), or the defaults
    when the table carries none; (Config, True if it came from the metadata)."""
    from ..config import Config, config_from_dict

    raw = meta.get("config") if isinstance(meta, dict) else None
    if not raw:
        return Config(), False
    def unset(value):
        return value is None or (isinstance(value, float) and math.isnan(value))

    clean = {k: ({kk: vv for kk, vv in v.items() if not unset(vv)} if isinstance(v, dict) else v)
             for k, v in raw.items()}
    try:
        return config_from_dict(clean), True
    except PrioritizeError:
        return Config(), False


def catalog_feh(table: pd.DataFrame, grid) -> float:
    """[Fe/H] of the tracks drawn: the median adopted [Fe/H] of the computed stars,
    kept inside the grid (0 when no star has one)."""
    from ..stars.tracks import z_to_feh

    ok = table["status"].astype(str) == st.OK
    feh = _num(table[ok], "feh")
    value = float(np.median(feh[np.isfinite(feh)])) if np.isfinite(feh).any() else 0.0
    lo, hi = float(z_to_feh(grid.z.min())), float(z_to_feh(grid.z.max()))
    return float(np.clip(value, lo, hi))


def cluster_parameters(table: pd.DataFrame, cfg) -> dict | None:
    """The cluster of a cluster catalog (the most common ``cluster`` name, or the
    configured cluster) with its age, [Fe/H], distance and E(B-V) (medians of the
    members' ``cluster_*`` columns, else the configuration); None for a field list."""
    names = table["cluster"].dropna().astype(str).str.strip() if "cluster" in table.columns else pd.Series([], dtype=str)
    names = names[names != ""]
    age = _num(table, "cluster_age_gyr")
    if names.empty and not np.isfinite(age).any() and not math.isfinite(cfg.cluster.age_gyr):
        return None
    name = names.mode().iloc[0] if not names.empty else "the cluster"
    members = (table["cluster"].astype(str).str.strip() == name).to_numpy() if not names.empty \
        else np.ones(len(table), bool)

    def value(column, default):
        v = _num(table, column)[members]
        return float(np.median(v[np.isfinite(v)])) if np.isfinite(v).any() else float(default)

    return {"name": name, "members": members,
            "age_gyr": value("cluster_age_gyr", cfg.cluster.age_gyr),
            "feh": value("cluster_feh", cfg.cluster.feh),
            "distance_pc": value("cluster_distance_pc", cfg.cluster.distance_pc),
            "ebv": value("cluster_ebv", cfg.cluster.ebv if math.isfinite(cfg.cluster.ebv) else 0.0)}


def cluster_isochrone(grid, cluster: dict) -> pd.DataFrame | None:
    """G and BP-RP along the isochrone of the cluster's age and [Fe/H], at its distance
    behind its reddening (:func:`prioritize.detectability.gaia_photometry`)."""
    from ..detectability import gaia_photometry, grid_metallicity
    from ..stars.placement import isochrone
    from ..stars.tracks import z_to_feh

    if not all(math.isfinite(cluster[k]) for k in ("age_gyr", "distance_pc")):
        return None
    feh = cluster["feh"] if math.isfinite(cluster["feh"]) else 0.0
    z = grid_metallicity(grid, float(np.clip(feh, z_to_feh(grid.z.min()), z_to_feh(grid.z.max()))))
    iso = isochrone(grid, cluster["age_gyr"] * 1e3, z, mass_step=1e-4)
    if iso["mass"].size == 0:
        return None
    logg = grid.interpolate(iso["mass"], np.full(iso["mass"].size, z), iso["eep"], columns=["logg"])["logg"]
    phot = gaia_photometry(10 ** iso["logteff"], iso["logl"], logg, z_to_feh(z), cluster["distance_pc"],
                           cluster["ebv"] if math.isfinite(cluster["ebv"]) else 0.0)
    out = pd.DataFrame({"initial_mass_msun": iso["mass"], "eep": iso["eep"], "g_mag": phot["g_mag"],
                        "bp_rp": phot["bp_rp"]})
    out = out[out["eep"] < 480]        # to the tip; the clump is a point, not a path, on the CMD
    out.attrs["label"] = (f"isochrone {cluster['age_gyr']:g} Gyr, [Fe/H] = {feh:+.2f}, "
                          f"{cluster['distance_pc']:g} pc, E(B−V) = {cluster['ebv']:g}")
    return out


def rotation_sequence(table: pd.DataFrame, members):
    """The cluster's rotation sequence in the plotted colour (observed BP-RP): the same
    robust fit the ranking uses (:func:`prioritize.rotation.fit_cluster_sequence`) to
    the members on the main sequence or at the turn-off with a period; None if too few."""
    from ..rotation import GYRO_STAGES, fit_cluster_sequence

    colour, prot = _num(table, "bp_rp"), _num(table, "prot_d")
    stage = table["stage"].astype(str).to_numpy()
    sel = members & np.isin(stage, GYRO_STAGES) & np.isfinite(colour) & (prot > 0)
    try:
        return fit_cluster_sequence(colour[sel], prot[sel])
    except PrioritizeError:
        return None


def detectability_points(grid, cfg, feh: float) -> pd.DataFrame:
    """The detectability map on a coarse mass x EEP grid (:data:`MAP_MASSES_MSUN`,
    :data:`MAP_EEP_POINTS` EEPs from the ZAMS to the tip of the giant branch)."""
    from ..detectability import default_map_eeps, detectability_map
    from ..engine import load_baseline_reference

    try:
        reference = load_baseline_reference(cfg)
    except PrioritizeError:
        reference = None
    masses = MAP_MASSES_MSUN[(MAP_MASSES_MSUN >= grid.masses.min()) & (MAP_MASSES_MSUN <= grid.masses.max())]
    return detectability_map(grid, cfg, feh, masses, default_map_eeps(MAP_EEP_POINTS), reference)


def favourable_outline(points: pd.DataFrame, grid, feh: float) -> list[np.ndarray]:
    """Edge of the favourable region on the HR diagram: the 0.5 contour of the
    favourable flag over initial mass x EEP (contourpy), each vertex mapped to
    (Teff, log L) by interpolating the tracks at that mass and EEP."""
    import contourpy

    from ..stars.tracks import feh_to_z

    wide = points.pivot(index="eep", columns="initial_mass_msun", values="favourable")
    flag = wide.to_numpy(dtype=float)
    if not (flag > 0).any():
        return []
    masses, eeps = wide.columns.to_numpy(float), wide.index.to_numpy(float)
    lines = contourpy.contour_generator(masses, eeps, np.pad(flag, 0)).lines(0.5)
    z = float(np.clip(feh_to_z(feh), grid.z.min(), grid.z.max()))
    out = []
    for line in lines:
        cols = grid.interpolate(line[:, 0], np.full(len(line), z), line[:, 1], columns=["logteff", "logl"])
        xy = np.column_stack([10 ** cols["logteff"], cols["logl"]])
        if np.isfinite(xy).all(axis=1).sum() >= 2:
            out.append(xy[np.isfinite(xy).all(axis=1)])
    return out


def _assumptions(cfg, from_meta: bool, meta: dict, table: pd.DataFrame, grid_label: str) -> list:
    p, t, b = cfg.planet, cfg.thresholds, cfg.baseline
    instrument = ", ".join(sorted(set(table["instrument"].dropna().astype(str)))) \
        if "instrument" in table.columns else cfg.observing.instrument
    baseline = ("reference population " + (b.reference or "(file not named)")) if b.source == "reference" \
        else "built-in model prior (weak: its scatter is a guess, not measured)"
    deposition = (", ".join(sorted(set(table["deposition_scenario"].dropna().astype(str))))
                  if "deposition_scenario" in table.columns else p.deposition)
    rows = [("Planet", f"{p.mass_mjup:g} M_J {p.kind.replace('_', ' ')}, A(Li) = {p.a_li:g}"
                       + (f", extra masses {', '.join(f'{m:g}' for m in p.extra_masses_mjup)} M_J"
                          if p.extra_masses_mjup else "")),
            ("Deposition scenario", deposition),
            ("Thresholds", f"signature z ≥ {t.z_signature:g} σ; shortest useful lifetime "
                           f"{t.min_lifetime_myr:g} Myr"),
            ("Baseline lithium", baseline),
            ("Tracks", grid_label),
            ("Instrument", f"{instrument}; S/N ≥ {cfg.observing.min_snr_per_pixel:g} per pixel, EW floor "
                           f"{cfg.observing.ew_floor_mA:g} mÅ, air mass {cfg.observing.airmass:g}"),
            ("Random seed", f"{cfg.scoring.seed} ({cfg.scoring.samples_per_star} placement samples per star)")]
    if from_meta:
        rows.append(("Made by", f"{meta.get('tool', 'prioritize')} {meta.get('version', '')} on "
                                f"{meta.get('created_utc', '?')} from {meta.get('input', '?')}".replace("  ", " ")))
    else:
        rows.append(("Made by", "no metadata found with the ranked table: the assumptions above are the "
                                "defaults and may differ from those the table was made with"))
    return rows


def _grid_for(cfg):
    from ..engine import configured_grid

    grid = configured_grid(cfg)
    if cfg.run.tracks:
        return grid, f"user tracks {cfg.run.tracks}"
    prov = grid.provenance or {}
    return grid, (f"built-in grid: Hurley, Pols & Tout 2000 fits (cosmic {prov.get('cosmic_version', '?')}), "
                  f"{len(grid.masses)} masses {grid.masses.min():g}–{grid.masses.max():g} M☉, "
                  f"Z {grid.z.min():g}–{grid.z.max():g}")


# ----------------------------------------------------------------------------- night and season

def _night_curves(plan: pd.DataFrame, plan_meta: dict, ranked: pd.DataFrame):
    """Altitudes of the planned targets, the Moon and the Sun through the plan's night,
    with astropy (offline); None when the site or the coordinates are unknown."""
    from .. import sky  # noqa: F401  (configures astropy for offline work)
    from ..sky.sites import load_site

    site_name = plan_meta.get("site")
    start = pd.to_datetime(plan["start_utc"], utc=True, errors="coerce").dropna()
    if not site_name or start.empty:
        return None
    try:
        site = load_site(str(site_name).lower().replace(" ", "-"))
    except PrioritizeError:
        return None
    import astropy.units as u
    from astropy.coordinates import AltAz, EarthLocation, SkyCoord, get_body, get_sun
    from astropy.time import Time

    planned = plan.loc[start.index, "star_id"].astype(str)
    coords = ranked.set_index(ranked["star_id"].astype(str))[["ra_deg", "dec_deg"]]
    coords = coords[~coords.index.duplicated()].reindex(planned).dropna()
    if coords.empty:
        return None
    end = pd.to_datetime(plan["end_utc"], utc=True, errors="coerce").dropna()
    t0, t1 = start.min() - pd.Timedelta(hours=1.5), end.max() + pd.Timedelta(hours=1.5)
    times = pd.date_range(t0, t1, periods=120)
    location = EarthLocation(lat=site.latitude_deg * u.deg, lon=site.longitude_deg * u.deg,
                             height=site.height_m * u.m)
    t = Time(times.to_pydatetime())
    frame = AltAz(obstime=t[:, None], location=location)
    stars = SkyCoord(coords["ra_deg"].to_numpy(float) * u.deg, coords["dec_deg"].to_numpy(float) * u.deg)
    alt = stars[None, :].transform_to(frame).alt.deg
    flat = AltAz(obstime=t, location=location)
    return {"times": list(times.to_pydatetime()),
            "altitude": {sid: alt[:, k] for k, sid in enumerate(coords.index)},
            "moon": get_body("moon", t, location).transform_to(flat).alt.deg,
            "sun": get_sun(t).transform_to(flat).alt.deg, "site": site.name}


def first_night(plan: pd.DataFrame, plan_meta: dict) -> tuple[pd.DataFrame, str]:
    """The rows of the plan's first night and its date: a plan of several nights has a
    ``night`` column (local evening date); a one-night plan gives its date in the
    metadata (``date`` or ``nights``)."""
    nights = plan["night"].dropna().astype(str).str.strip() if "night" in plan.columns else pd.Series([], dtype=str)
    nights = nights[nights != ""]
    if not nights.empty:
        first = sorted(nights.unique())[0]
        return plan[plan["night"].astype(str).str.strip() == first], first
    listed = plan_meta.get("nights")
    return plan, str(plan_meta.get("date") or (listed[0] if isinstance(listed, list) and listed else "?"))


def season_months(season: pd.DataFrame) -> list[str]:
    """The months of a season table (columns ``<YYYY-MM>_hours``), in order."""
    return sorted(m.group(1) for c in season.columns if (m := MONTH_COLUMN.match(str(c))))


# ----------------------------------------------------------------------------- assembly

def build_report(ranked: pd.DataFrame, meta: dict | None = None, source: str = "",
                 night: tuple[pd.DataFrame, dict] | None = None,
                 season: tuple[pd.DataFrame, dict] | None = None) -> Report:
    """Compute the report's numbers and draw its figures.

    Parameters
    ----------
    ranked : pandas.DataFrame
        A ranked table (``prioritize rank`` output; needs ``star_id`` and ``status``).
    meta : dict, optional
        Its metadata (configuration, tool, input), as written beside it.
    source : str
        The ranked file's name, shown in the report.
    night, season : (table, metadata), optional
        A ``prioritize night`` plan and a ``prioritize season`` table.

    Raises
    ------
    CatalogError
        If a needed column is missing (named in the message).
    """
    for column in ("star_id", "status"):
        if column not in ranked.columns:
            raise CatalogError(f"missing column {column}: a ranked table from `prioritize rank` is expected",
                               path=source or None)
    meta = meta or {}
    cfg, from_meta = report_config(meta)
    grid, grid_label = _grid_for(cfg)
    summary = summary_numbers(ranked)
    report = Report(title=f"Target report: {Path(source).name or 'ranked table'}", source=source,
                    summary=summary, assumptions=_assumptions(cfg, from_meta, meta, ranked, grid_label),
                    top=top_targets(ranked), not_computed=_not_computed(ranked))
    cluster = cluster_parameters(ranked, cfg)
    feh = catalog_feh(ranked, grid) if cluster is None or not math.isfinite(cluster["feh"]) \
        else float(np.clip(cluster["feh"], -0.82, 0.18))
    tracks = plots.track_points(grid, _z(grid, feh))
    thr = cfg.thresholds
    report.figures["hr_diagram"] = (plots.hr_diagram(ranked, tracks, feh), (
        f"HR diagram of the {summary['rows']} rows. Candidates with a usable signature are coloured "
        "and sized by their priority (expected detections per hour); computed stars with priority 0 are "
        "small grey dots; rows that were not computed are faint, by status, where they have a position. "
        f"Tracks at [Fe/H] = {feh:+.2f} ({'the cluster' if cluster else 'median of the computed stars'})."))
    report.figures["kiel_diagram"] = (plots.kiel_diagram(ranked, tracks, feh), (
        "Kiel diagram: the same stars and tracks in Teff and log g (log g from each star's adopted "
        "mass and radius)."))
    if cluster is not None:
        report.cluster = {k: v for k, v in cluster.items() if k != "members"}
        members = ranked[cluster["members"]]
        iso = cluster_isochrone(grid, cluster)
        report.figures["colour_magnitude"] = (plots.colour_magnitude(members, iso, cluster["name"]), (
            f"Colour–magnitude diagram of {cluster['name']} (observed G and BP−RP) with the isochrone of "
            "the cluster parameters the ranking used; members coloured and sized by priority."))
        seq = rotation_sequence(ranked, cluster["members"])
        report.figures["rotation"] = (plots.rotation_diagram(
            members, seq, cluster["name"], cfg.rotation.rapid_anomaly_sigma), (
            "Top: rotation period against colour, with the cluster's rotation sequence (robust fit, the "
            "ranking's routine, to the dwarfs with periods). Bottom: rotation velocity, with the velocity "
            "the ranking expected for each star. Ringed: anomalous rotators (rapid_rotator)."))
        if seq is None:
            report.notes.append("too few main-sequence members with periods for a rotation sequence")
    report.figures["significance_lifetime"] = (plots.significance_lifetime(
        ranked, thr.z_signature, thr.min_lifetime_myr), (
        "Enrichment significance z against the signature's lifetime for every computed star, by stage; "
        "a star is worth a spectrum above the dashed line and right of the dotted one."))
    points = detectability_points(grid, cfg, feh)
    planet = f"{cfg.planet.mass_mjup:g} M$_J$ {cfg.planet.kind.replace('_', ' ')}"
    report.figures["detectability_map"] = (plots.detectability_hr(
        points, favourable_outline(points, grid, feh), thr.z_signature, thr.min_lifetime_myr, feh, planet), (
        f"Detectability map: tracks of {MAP_MASSES_MSUN.min():g}–{MAP_MASSES_MSUN.max():g} M☉ "
        f"at [Fe/H] = {feh:+.2f} coloured by the significance of the configured planet's signature (top) "
        "and by how long it lasts (bottom), main sequence to the tip of the giant branch; the black "
        "outline encloses the favourable region. Coarse grid (0.1 M☉ steps); `prioritize map` gives "
        "the fine version."))
    if summary["instruments"]:
        report.figures["budget"] = (plots.budget_figure(ranked), (
            "Exposure budget: cumulative time on target (exposure + overheads) taking the targets in rank "
            "order, and the expected number of detections that time buys."))
    if night is not None:
        plan, plan_meta = night
        for column in ("star_id", "start_utc", "end_utc"):
            if column not in plan.columns:
                raise CatalogError(f"missing column {column}: a night plan from `prioritize night` is "
                                   "expected", path="--night")
        plan, date = first_night(plan, plan_meta or {})
        curves = _night_curves(plan, plan_meta or {}, ranked)
        site = (plan_meta or {}).get("site", "")
        title = f"Night of {date}" + (f" at {site}" if site else "")
        report.figures["night"] = (plots.night_altitude(plan, curves, title), (
            "Altitude of the planned targets through the night (thin) and their observing slots (thick), "
            "from the night plan (its first night); planning estimate."))
        if curves is None:
            report.notes.append("night chart: site or coordinates unknown, slots drawn from the plan's "
                                "air masses only")
    if season is not None:
        table, season_meta = season
        months = season_months(table)
        if "star_id" not in table.columns or not months:
            raise CatalogError("a season table from `prioritize season` is expected (star_id and "
                               "<YYYY-MM>_hours columns)", path="--season")
        order = ranked[_num(ranked, "rank") > 0].sort_values("rank")["star_id"].astype(str)
        rank_of = {s: k for k, s in enumerate(order)}
        shown = table.copy()
        if "reason" in shown.columns:
            shown = shown[shown["reason"].astype(str) == st.OK]
        shown = shown.assign(_order=shown["star_id"].astype(str).map(rank_of)).sort_values("_order")
        dark = (season_meta or {}).get("dark_hours")
        report.figures["season"] = (plots.season_visibility(
            shown, months, dark if isinstance(dark, dict) else None,
            f"Hours observable per month{' at ' + season_meta['site'] if (season_meta or {}).get('site') else ''}"),
            f"Season visibility of the best-ranked {min(plots.SEASON_ROWS, len(shown))} targets, from the "
            "season table; planning estimate.")
    return report


def _z(grid, feh):
    from ..stars.tracks import feh_to_z

    return float(np.clip(feh_to_z(feh), grid.z.min(), grid.z.max()))


# ----------------------------------------------------------------------------- writing

def figure_bytes(fig, fmt: str) -> bytes:
    """A figure as PNG (at :data:`plots.FIGURE_DPI`) or SVG bytes, without timestamps."""
    buffer = io.BytesIO()
    metadata = {"Software": None} if fmt == "png" else {"Date": None, "Creator": None}
    with plots.style():
        fig.savefig(buffer, format=fmt, dpi=plots.FIGURE_DPI, metadata=metadata)
    return buffer.getvalue()


def figures_folder(html_path: Path) -> Path:
    """``report.html`` -> ``report_figures/``."""
    return html_path.with_name(html_path.stem + "_figures")


def render_html(report: Report, images: dict) -> str:
    """The HTML page (Jinja2 template, autoescaped)."""
    import jinja2

    env = jinja2.Environment(loader=jinja2.PackageLoader("prioritize.report", "templates"),
                             autoescape=jinja2.select_autoescape(["html", "j2"]),
                             undefined=jinja2.StrictUndefined, trim_blocks=True, lstrip_blocks=True)
    env.filters["fmt"] = _fmt
    return env.get_template("report.html.j2").render(
        report=report, images=images, version=__version__, cautions=CAUTIONS, methods=METHODS,
        descriptions=st.DESCRIPTIONS, stage_names={k: v[2] for k, v in plots.STAGE_STYLE.items()})


def _fmt(value, spec="{:.3g}"):
    try:
        if value is None or (isinstance(value, float) and not math.isfinite(value)):
            return "–"
        return spec.format(value)
    except (TypeError, ValueError):
        return str(value)


def write_report(report: Report, html_path: Path) -> list[Path]:
    """Write the HTML and, in ``<stem>_figures/``, every figure as PNG and SVG.

    Returns the paths written.  Each file is written atomically.

    Raises
    ------
    CatalogError
        If the folder is missing or a file cannot be written.
    """
    from ..catalog.io import atomic_target

    html_path = Path(html_path)
    if not html_path.parent.is_dir():
        raise CatalogError(f"cannot be written: folder {html_path.parent} does not exist", path=str(html_path))
    folder = figures_folder(html_path)
    written = []
    images = {}
    try:
        folder.mkdir(exist_ok=True)
        for name, (fig, caption) in report.figures.items():
            with plots.style():
                fig.draw_without_rendering()      # lay out once; both formats reuse it
            fig.set_layout_engine("none")
            png = figure_bytes(fig, "png")
            images[name] = {"png": base64.b64encode(png).decode("ascii"), "caption": caption,
                            "title": FIGURE_TITLES.get(name, name),
                            "width": int(round(fig.get_figwidth() * plots.FIGURE_DPI)),
                            "height": int(round(fig.get_figheight() * plots.FIGURE_DPI)),
                            "file": f"{folder.name}/{name}.png"}
            for fmt, data in (("png", png), ("svg", figure_bytes(fig, "svg"))):
                target = folder / f"{name}.{fmt}"
                with atomic_target(target) as temporary:
                    temporary.write_bytes(data)
                written.append(target)
        with atomic_target(html_path) as temporary:
            temporary.write_text(render_html(report, images), encoding="utf-8")
    except OSError as exc:
        raise CatalogError(f"cannot be written: {exc}", path=str(html_path)) from exc
    return [html_path] + written


def report_for_file(ranked_path: Path, output: Path | None = None, night: Path | None = None,
                    season: Path | None = None) -> list[Path]:
    """Read a ranked table (and optional plan and season tables), build and write the
    report; ``output`` defaults to ``<ranked stem>_report.html`` beside the table."""
    from ..catalog.io import catalog_stem, read_table

    ranked, meta = read_table(ranked_path)
    extra = {}
    for key, path in (("night", night), ("season", season)):
        if path is not None:
            extra[key] = read_table(path)
    report = build_report(ranked, meta, str(ranked_path), **extra)
    output = Path(output) if output else Path(ranked_path).with_name(f"{catalog_stem(ranked_path)}_report.html")
    return write_report(report, output)
