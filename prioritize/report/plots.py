"""Figures of the proposal report (matplotlib, no display, no pyplot state).

Every function takes tables computed elsewhere (the ranked table, track points, a
night plan or a season table) and returns a :class:`matplotlib.figure.Figure` of a
fixed printed size (:data:`FIGURE_SIZE_IN`, text at least :data:`MIN_FONT_PT` pt);
:mod:`prioritize.report.proposal` saves them.  Conventions of the trade: Teff
increases to the left, magnitudes and log g increase downward, luminosity is log L.
Colour maps are perceptually uniform and readable with colour-vision deficiency
(viridis, cividis: van der Walt & Smith 2015; Nuñez, Anderton & Renslow 2018);
stages use the Okabe & Ito (2008) palette and a marker shape each, so they read in
grey too.  Every mark has a legend entry.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from ..catalog import status as st
from ..catalog.status import STAGES
from ..constants import LOGG_SUN

FIGURE_SIZE_IN = (7.0, 5.4)       # printed size (inches): a page's text width
WIDE_SIZE_IN = (7.0, 6.4)         # two stacked panels
FIGURE_DPI = 150                  # PNG resolution: 1050 x 810 px at FIGURE_SIZE_IN
MIN_FONT_PT = 8.0                 # smallest text at the printed size
STYLE = {"font.size": 9.0, "axes.titlesize": 9.5, "axes.labelsize": 9.0, "xtick.labelsize": 8.5,
         "ytick.labelsize": 8.5, "legend.fontsize": 8.0, "legend.title_fontsize": 8.0,
         "figure.titlesize": 10.0, "svg.hashsalt": "prioritize", "svg.fonttype": "none"}
PRIORITY_CMAP = "viridis"
LIFETIME_CMAP = "cividis"
Z_CMAP = "viridis"
STAGE_STYLE = {                   # Okabe & Ito 2008 colours, one marker per stage
    "main_sequence": ("#0072B2", "o", "main sequence"),
    "turnoff": ("#56B4E9", "s", "turn-off"),
    "subgiant": ("#009E73", "D", "subgiant"),
    "lower_giant_branch": ("#E69F00", "^", "lower giant branch (below the bump)"),
    "upper_giant_branch": ("#D55E00", "v", "upper giant branch (above the bump)"),
    "red_clump": ("#CC79A7", "P", "red clump (core He burning)"),
}
STATUS_MARKERS = {st.DUPLICATE_ID: "x", st.INVALID_VALUE: "1", st.MISSING_INPUTS: "+",
                  st.OUT_OF_MODEL_RANGE: "4", st.NOT_ANOMALOUS_ROTATOR: "."}
TRACK_MASSES_MSUN = (0.7, 0.8, 1.0, 1.2, 1.4, 1.6, 2.0, 2.5)
SIZE_MIN_PT2, SIZE_MAX_PT2 = 10.0, 140.0   # marker areas of the smallest and largest priority
LOG_PRIORITY_FLOOR = -6.0                  # colour scale floor (log10 detections per hour)
FAINT_ALPHA = 0.35
DRAWN_MAP_MASSES_MSUN = (1.0, 1.2, 1.4, 1.6, 1.8, 2.0, 2.2, 2.5)   # tracks drawn on the map


def style():
    """The rc settings every report figure is drawn with (a context manager)."""
    import matplotlib

    return matplotlib.rc_context(STYLE)


def _figure(size=FIGURE_SIZE_IN):
    from matplotlib.figure import Figure

    return Figure(figsize=size, layout="constrained")


def star_logg(table: pd.DataFrame) -> np.ndarray:
    """log g (cgs) of the adopted model: log g_sun + log M - 2 log R (IAU 2015 nominal
    log g_sun = 4.438), from ``mass_msun`` and ``radius_rsun``."""
    mass = pd.to_numeric(table.get("mass_msun"), errors="coerce").to_numpy(float)
    radius = pd.to_numeric(table.get("radius_rsun"), errors="coerce").to_numpy(float)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where((mass > 0) & (radius > 0), LOGG_SUN + np.log10(mass) - 2 * np.log10(radius), np.nan)


def _num(table, column) -> np.ndarray:
    if column not in table.columns:
        return np.full(len(table), np.nan)
    return pd.to_numeric(table[column], errors="coerce").to_numpy(float)


def split_rows(table: pd.DataFrame) -> dict:
    """Boolean masks: ``candidate`` (computed, priority > 0), ``zero`` (computed, priority
    0 or undefined) and ``other`` (not computed: status other than ok)."""
    status = table["status"].astype(str).to_numpy()
    priority = _num(table, "priority")
    ok = status == st.OK
    candidate = ok & (np.nan_to_num(priority) > 0)
    return {"candidate": candidate, "zero": ok & ~candidate, "other": ~ok}


def priority_sizes(priority, top) -> np.ndarray:
    """Marker area (pt^2) growing linearly with the expected detections per hour."""
    p = np.clip(np.nan_to_num(np.asarray(priority, float)), 0.0, None)
    return SIZE_MIN_PT2 + (SIZE_MAX_PT2 - SIZE_MIN_PT2) * p / (top if top > 0 else 1.0)


def _log_priority(priority):
    with np.errstate(divide="ignore"):
        return np.maximum(np.log10(np.asarray(priority, float)), LOG_PRIORITY_FLOOR)


def _size_legend(ax, top, loc):
    """A second legend explaining the marker sizes."""
    from matplotlib.lines import Line2D

    if not top > 0:
        return
    values = [top, top / 2, top / 10]
    handles = [Line2D([], [], ls="", marker="o", color="0.3", mfc="none",
                      markersize=np.sqrt(priority_sizes(v, top))) for v in values]
    leg = ax.legend(handles, [f"{v:.2g}" for v in values], title="size: detections / h",
                    loc=loc, frameon=True, framealpha=0.85, labelspacing=1.0, borderpad=0.8)
    ax.add_artist(leg)


def _stars_on(ax, fig, table, x, y, label_zero="computed, priority 0 (no usable signature)"):
    """Candidates by priority, priority-0 stars small grey, others faint by status.

    Returns the handles and labels for the legend and the number of rows without a
    position (not drawn)."""
    rows = split_rows(table)
    priority = _num(table, "priority")
    placed = np.isfinite(x) & np.isfinite(y)
    handles, labels = [], []
    zero = rows["zero"] & placed
    if zero.any():
        handles.append(ax.scatter(x[zero], y[zero], s=6, c="0.6", marker="o", linewidths=0,
                                  zorder=2, label="_zero", gid="zero"))
        labels.append(f"{label_zero} ({int(zero.sum())})")
    status = table["status"].astype(str).to_numpy()
    for code in sorted(set(status[rows["other"] & placed])):
        sel = rows["other"] & placed & (status == code)
        handles.append(ax.scatter(x[sel], y[sel], s=22, c="0.45", alpha=FAINT_ALPHA,
                                  marker=STATUS_MARKERS.get(code, "x"), zorder=1.5, gid=f"status:{code}"))
        labels.append(f"not computed: {code} ({int(sel.sum())})")
    cand = rows["candidate"] & placed
    top = float(np.nanmax(priority[cand])) if cand.any() else 0.0
    order = np.flatnonzero(cand)[np.argsort(priority[cand])]      # best on top
    points = ax.scatter(x[order], y[order], s=priority_sizes(priority[order], top),
                        c=_log_priority(priority[order]), cmap=PRIORITY_CMAP, marker="o",
                        edgecolors="black", linewidths=0.3, zorder=4, gid="candidates",
                        vmin=LOG_PRIORITY_FLOOR if cand.any() else None)
    if cand.any():
        fig.colorbar(points, ax=ax, label="log$_{10}$ priority (expected detections per hour)",
                     shrink=0.9)
        handles.append(points)
        labels.append(f"candidates, colour and size by priority ({int(cand.sum())})")
    unplaced = int((~placed).sum())
    return handles, labels, unplaced, top


def track_points(grid, z: float, masses=TRACK_MASSES_MSUN, eeps=None) -> pd.DataFrame:
    """Track points for the diagrams: Teff, log L, log g and stage per (mass, EEP).

    EEPs 0-579 (main sequence to the end of core He burning); masses outside the
    grid are dropped; points older than the Universe (13.8 Gyr) are NaN (not drawn).  Columns ``initial_mass_msun, eep, teff_k, logl_lsun, logg,
    stage``; the RGB bump of each track in ``attrs["bump"]`` (mass -> (Teff, log L,
    log g), NaN where a track has none).
    """
    from ..stars import evolution
    from ..stars.placement import MAX_AGE_MYR
    from ..stars.tracks import N_EEPS, PHASE_EEPS

    masses = np.array([m for m in masses if grid.masses.min() <= m <= grid.masses.max()], float)
    eeps = np.arange(N_EEPS, dtype=float) if eeps is None else np.asarray(eeps, float)
    mass, eep = (a.ravel() for a in np.meshgrid(masses, eeps, indexing="ij"))
    zz = np.full(mass.size, z)
    cols = grid.interpolate(mass, zz, eep, columns=["logteff", "logl", "logg", "age_myr"])
    too_old = ~(cols["age_myr"] <= MAX_AGE_MYR)       # older than the Universe (or no model): not drawn
    for name in ("logteff", "logl", "logg"):
        cols[name] = np.where(too_old, np.nan, cols[name])
    bump_eep, bump_logl = evolution.rgb_bump(grid, masses, np.full(masses.size, z))
    bump_by_mass = dict(zip(masses, bump_logl))
    stage = evolution.stage_names(evolution.stage_index(
        eep, cols["logl"], np.array([bump_by_mass[m] for m in mass]), PHASE_EEPS))
    table = pd.DataFrame({"initial_mass_msun": mass, "eep": eep, "teff_k": 10 ** cols["logteff"],
                          "logl_lsun": cols["logl"], "logg": cols["logg"], "stage": stage})
    at = grid.interpolate(masses, np.full(masses.size, z), np.nan_to_num(bump_eep),
                          columns=["logteff", "logl", "logg", "age_myr"])
    table.attrs["bump"] = {m: ((10 ** t, l, g) if np.isfinite(e) and a <= MAX_AGE_MYR else (np.nan,) * 3)
                           for m, e, t, l, g, a in zip(masses, bump_eep, at["logteff"], at["logl"], at["logg"],
                                                       at["age_myr"])}
    return table


BOUNDARY_EEPS = {"turn-off begins": 170.0, "subgiant branch begins": 200.0,
                 "giant branch begins": 280.0, "tip / He ignition": 479.0}
_BOUNDARY_MARKERS = {"turn-off begins": "|", "subgiant branch begins": "_",
                     "giant branch begins": "x", "tip / He ignition": "*"}


def _draw_tracks(ax, tracks: pd.DataFrame, y_column: str):
    """Tracks (grey), stage boundaries (small black marks) and the RGB bump (open
    diamond), each with one legend handle; the pre-flash and core-He parts are drawn
    separately (the helium flash is not a path on the diagram)."""
    from matplotlib.lines import Line2D

    handles, labels = [], []
    for mass, one in tracks.groupby("initial_mass_msun"):
        for part in (one[one["eep"] < 480], one[one["eep"] >= 480]):
            ax.plot(part["teff_k"], part[y_column], color="0.55", lw=0.9, zorder=1, gid=f"track:{mass:g}")
        if one["teff_k"].isna().all():
            continue
        zams = one.iloc[0]
        ax.annotate(f"{mass:g} M$_\\odot$", (zams["teff_k"], zams[y_column]), xytext=(-5, 0),
                    textcoords="offset points", fontsize=8, color="0.2", ha="right", va="center",
                    zorder=6, annotation_clip=True, clip_on=True,
                    bbox={"boxstyle": "round,pad=0.1", "fc": "white", "ec": "none", "alpha": 0.8})
    handles.append(Line2D([], [], color="0.55", lw=0.9))
    labels.append("tracks (initial mass, M$_\\odot$), up to an age of 13.8 Gyr")
    for name, eep in BOUNDARY_EEPS.items():
        pts = tracks[np.isclose(tracks["eep"], eep)]
        ax.plot(pts["teff_k"], pts[y_column], ls="", marker=_BOUNDARY_MARKERS[name], color="black",
                markersize=6, zorder=3, gid=f"boundary:{name}")
        handles.append(Line2D([], [], ls="", marker=_BOUNDARY_MARKERS[name], color="black", markersize=6))
        labels.append(name)
    index = {"logl_lsun": 1, "logg": 2}[y_column]
    bump = np.array([v for v in tracks.attrs.get("bump", {}).values() if np.isfinite(v[0])])
    if bump.size:
        ax.plot(bump[:, 0], bump[:, index], ls="", marker="D", mfc="white", mec="black", markersize=6,
                zorder=3, gid="bump")
        handles.append(Line2D([], [], ls="", marker="D", mfc="white", mec="black", markersize=6))
        labels.append("RGB bump (end of the lower giant branch)")
    return handles, labels


def _teff_axis(ax, teff_values):
    """Teff on a log axis increasing to the left, ticks in K."""
    from matplotlib.ticker import FixedLocator, NullFormatter, NullLocator

    finite = np.asarray(teff_values, float)
    finite = finite[np.isfinite(finite)]
    lo, hi = (np.nanmin(finite), np.nanmax(finite)) if finite.size else (3500.0, 7000.0)
    ax.set_xscale("log")
    ax.set_xlim(hi * 1.2, lo / 1.04)   # room for the mass labels left of the ZAMS
    ticks = [t for t in (3000, 3500, 4000, 4500, 5000, 5500, 6000, 7000, 8000, 9000, 10000, 12000)
             if lo / 1.04 <= t <= hi * 1.04]
    ax.xaxis.set_major_locator(FixedLocator(ticks))
    ax.xaxis.set_major_formatter(lambda v, _: f"{v:.0f}")
    ax.xaxis.set_minor_locator(NullLocator())
    ax.xaxis.set_minor_formatter(NullFormatter())
    ax.set_xlabel("effective temperature T$_\\mathrm{eff}$ (K)")


def _finish_legend(ax, fig, handles, labels, unplaced, what):
    if unplaced:
        from matplotlib.lines import Line2D

        handles = handles + [Line2D([], [], ls="")]
        labels = labels + [f"{unplaced} rows without {what}: not drawn (see the table)"]
    fig.legend(handles, labels, loc="outside lower center", ncols=2, frameon=False)


def hr_diagram(table: pd.DataFrame, tracks: pd.DataFrame, feh: float, title: str = ""):
    """Teff (increasing to the left) against log L of the ranked stars and the tracks."""
    with style():
        fig = _figure()
        ax = fig.add_subplot()
        handles, labels = _draw_tracks(ax, tracks, "logl_lsun")
        x, y = _num(table, "teff_k"), _num(table, "logl_lsun")
        h2, l2, unplaced, top = _stars_on(ax, fig, table, x, y)
        _teff_axis(ax, np.concatenate([x, tracks["teff_k"].to_numpy()]))
        finite = np.concatenate([y[np.isfinite(y)], tracks["logl_lsun"].dropna().to_numpy()])
        ax.set_ylim(max(finite.min() - 0.2, -1.5), min(finite.max() + 0.2, 3.6))
        ax.set_ylabel("log$_{10}$ L / L$_\\odot$")
        ax.set_title(title or f"HR diagram; tracks at [Fe/H] = {feh:+.2f}")
        _size_legend(ax, top, "upper left")
        _finish_legend(ax, fig, handles + h2, labels + l2, unplaced, "Teff and L")
    return fig


def kiel_diagram(table: pd.DataFrame, tracks: pd.DataFrame, feh: float, title: str = ""):
    """Teff (increasing to the left) against log g (increasing downward)."""
    with style():
        fig = _figure()
        ax = fig.add_subplot()
        handles, labels = _draw_tracks(ax, tracks, "logg")
        x, y = _num(table, "teff_k"), star_logg(table)
        h2, l2, unplaced, top = _stars_on(ax, fig, table, x, y)
        _teff_axis(ax, np.concatenate([x, tracks["teff_k"].to_numpy()]))
        finite = np.concatenate([y[np.isfinite(y)], tracks["logg"].dropna().to_numpy()])
        ax.set_ylim(min(finite.max() + 0.15, 5.2), max(finite.min() - 0.15, -0.5))   # log g down
        ax.set_ylabel("log$_{10}$ g (cgs)")
        ax.set_title(title or f"Kiel diagram; tracks at [Fe/H] = {feh:+.2f}")
        _size_legend(ax, top, "upper left")
        _finish_legend(ax, fig, handles + h2, labels + l2, unplaced, "Teff, mass and radius")
    return fig


def colour_magnitude(table: pd.DataFrame, isochrone: pd.DataFrame | None, cluster: str):
    """G (increasing downward) against BP-RP of the members, with the isochrone."""
    from matplotlib.lines import Line2D

    with style():
        fig = _figure()
        ax = fig.add_subplot()
        handles, labels = [], []
        if isochrone is not None and len(isochrone):
            ax.plot(isochrone["bp_rp"], isochrone["g_mag"], color="0.35", lw=1.1, zorder=1, gid="isochrone")
            handles.append(Line2D([], [], color="0.35", lw=1.1))
            labels.append(isochrone.attrs.get("label", "isochrone"))
        x, y = _num(table, "bp_rp"), _num(table, "g_mag")
        h2, l2, unplaced, top = _stars_on(ax, fig, table, x, y)
        ax.set_xlabel("G$_\\mathrm{BP}$ − G$_\\mathrm{RP}$ (mag, as observed)")
        ax.set_ylabel("G (mag)")
        finite = y[np.isfinite(y)]
        if finite.size:
            ax.set_ylim(finite.max() + 0.4, finite.min() - 0.6)
        else:
            ax.invert_yaxis()
        ax.set_title(f"Colour–magnitude diagram of {cluster}")
        _size_legend(ax, top, "upper right")
        _finish_legend(ax, fig, handles + h2, labels + l2, unplaced, "G and BP−RP")
    return fig


def rotation_diagram(table: pd.DataFrame, sequence, cluster: str, anomaly_sigma: float):
    """Top: rotation period against BP-RP with the cluster sequence (robust fit, +/- 1
    sigma band); bottom: observed rotation velocity (v_eq from the period, else v sin i)
    against BP-RP with each star's expected value.  Anomalous rotators ringed."""
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch

    colour = _num(table, "bp_rp")
    prot = _num(table, "prot_d")
    veq, vsini = _num(table, "veq_kms"), _num(table, "vsini_kms")
    expected = _num(table, "veq_expected_kms")
    rapid = table["rapid_rotator"].astype(str).str.lower().isin(["true", "1"]).to_numpy() \
        if "rapid_rotator" in table.columns else np.zeros(len(table), bool)
    stage = table["stage"].astype(str).to_numpy() if "stage" in table.columns else np.full(len(table), "")
    with style():
        fig = _figure(WIDE_SIZE_IN)
        top_ax, low_ax = fig.subplots(2, 1, sharex=True)
        handles, labels = [], []
        if sequence is not None:
            xs = np.linspace(sequence.color_min, sequence.color_max, 200)
            period, spread = sequence.predict(xs)
            band = np.exp(sequence.ln_period_scatter)
            top_ax.fill_between(xs, period / band, period * band, color="0.85", zorder=0, gid="sequence_band")
            top_ax.plot(xs, period, color="black", lw=1.2, zorder=1, gid="sequence")
            handles += [Line2D([], [], color="black", lw=1.2), Patch(color="0.85")]
            labels += [f"cluster sequence (robust fit to {sequence.n_stars} dwarfs)", "±1 σ of the sequence"]
        velocity = np.where(np.isfinite(veq), veq, vsini)
        for name, (col, marker, text) in STAGE_STYLE.items():
            sel = stage == name
            p_sel = sel & np.isfinite(prot) & np.isfinite(colour)
            v_sel = sel & np.isfinite(velocity) & np.isfinite(colour)
            if p_sel.any():
                top_ax.scatter(colour[p_sel], prot[p_sel], s=14, c=col, marker=marker, linewidths=0,
                               zorder=2, gid=f"period:{name}")
            if v_sel.any():
                low_ax.scatter(colour[v_sel], velocity[v_sel], s=14, c=col, marker=marker, linewidths=0,
                               zorder=2, gid=f"velocity:{name}")
            if p_sel.any() or v_sel.any():
                handles.append(Line2D([], [], ls="", marker=marker, color=col))
                labels.append(text)
        exp_sel = np.isfinite(expected) & np.isfinite(colour) & np.isfinite(velocity)
        if exp_sel.any():
            low_ax.scatter(colour[exp_sel], expected[exp_sel], s=10, marker="_", c="0.3", zorder=1.5,
                           gid="expected")
            handles.append(Line2D([], [], ls="", marker="_", color="0.3", markersize=8))
            labels.append("expected velocity of that star (the ranking's)")
        ring = rapid & np.isfinite(colour)
        for ax, yv in ((top_ax, prot), (low_ax, velocity)):
            sel = ring & np.isfinite(yv)
            if sel.any():
                ax.scatter(colour[sel], yv[sel], s=110, facecolors="none", edgecolors="black",
                           linewidths=1.2, zorder=3, gid="anomalous")
        handles.append(Line2D([], [], ls="", marker="o", mfc="none", mec="black", markersize=10))
        labels.append(f"anomalous rotator (≥ {anomaly_sigma:g} σ faster; {int(ring.sum())})")
        top_ax.set_ylabel("rotation period (d)")
        low_ax.set_yscale("log")
        low_ax.set_ylabel("v (km s$^{-1}$): v$_\\mathrm{eq}$, else v sin i")
        low_ax.set_xlabel("G$_\\mathrm{BP}$ − G$_\\mathrm{RP}$ (mag, as observed)")
        top_ax.set_title(f"Rotation of {cluster}: colour–period and colour–velocity")
        fig.legend(handles, labels, loc="outside lower center", ncols=2, frameon=False)
    return fig


def significance_lifetime(table: pd.DataFrame, z_threshold: float, min_lifetime_myr: float):
    """Significance z against signature lifetime (log), coloured and shaped by stage;
    computed stars without a signature now (lifetime 0) sit on the left edge."""
    from matplotlib.lines import Line2D

    ok = table["status"].astype(str).to_numpy() == st.OK
    z, life = _num(table, "z_enrich"), _num(table, "lifetime_myr")
    stage = table["stage"].astype(str).to_numpy()
    positive = life > 0
    floor = 10 ** np.floor(np.log10(np.nanmin(life[ok & positive]) / 2)) if (ok & positive).any() else 0.01
    floor = min(floor, min_lifetime_myr / 10 if min_lifetime_myr > 0 else floor)
    with style():
        fig = _figure()
        ax = fig.add_subplot()
        handles, labels = [], []
        for name, (col, marker, text) in STAGE_STYLE.items():
            sel = ok & (stage == name) & np.isfinite(z)
            if not sel.any():
                continue
            with_life = sel & positive
            ax.scatter(life[with_life], z[with_life], s=16, c=col, marker=marker, linewidths=0,
                       alpha=0.85, zorder=2, gid=f"stage:{name}")
            none = sel & ~positive
            spread = 10 ** (0.12 * np.sin(np.flatnonzero(none) * 2.399))   # fixed jitter: shows density
            ax.scatter(floor * spread, z[none], s=16, c=col, marker=marker, linewidths=0,
                       alpha=0.5, zorder=1.5, gid=f"nolife:{name}")
            handles.append(Line2D([], [], ls="", marker=marker, color=col))
            labels.append(f"{text} ({int(sel.sum())})")
        ax.axhline(z_threshold, color="black", ls="--", lw=1.0, gid="z_threshold")
        handles.append(Line2D([], [], color="black", ls="--", lw=1.0))
        labels.append(f"signature threshold z = {z_threshold:g} σ")
        if min_lifetime_myr > 0:
            ax.axvline(min_lifetime_myr, color="black", ls=":", lw=1.0, gid="min_lifetime")
            handles.append(Line2D([], [], color="black", ls=":", lw=1.0))
            labels.append(f"shortest useful lifetime {min_lifetime_myr:g} Myr")
        ax.axvline(floor * 1.8, color="0.6", lw=0.6)
        handles.append(Line2D([], [], color="0.6", lw=0.6))
        labels.append("left of this line: no signature now (lifetime 0), drawn at the edge")
        ax.set_xscale("log")
        ax.set_xlim(floor / 1.5, None)
        ax.set_xlabel("lifetime of the signature (Myr)")
        ax.set_ylabel("enrichment significance z (σ)")
        ax.set_title("Significance against lifetime (computed stars)")
        fig.legend(handles, labels, loc="outside lower center", ncols=2, frameon=False)
    return fig


def budget_figure(table: pd.DataFrame):
    """Top: cumulative hours on target against the number of targets, in rank order,
    per instrument; bottom: cumulative expected detections against those hours."""
    from matplotlib.lines import Line2D

    ranked = table[_num(table, "rank") > 0].sort_values("rank")
    instrument = ranked["instrument"].astype(str) if "instrument" in ranked else pd.Series("", index=ranked.index)
    with style():
        fig = _figure(WIDE_SIZE_IN)
        ax_h, ax_d = fig.subplots(2, 1)
        handles, labels = [], []
        styles = ["-", "--", "-.", ":"]
        for k, (name, rows) in enumerate(ranked.groupby(instrument, sort=True)):
            hours = np.cumsum(_num(rows, "time_on_target_s") / 3600.0)
            detections = np.cumsum(_num(rows, "priority") * _num(rows, "time_on_target_s") / 3600.0)
            n = np.arange(1, len(rows) + 1)
            ls = styles[k % len(styles)]
            ax_h.plot(n, hours, color="black", ls=ls, lw=1.2, gid=f"hours:{name}")
            ax_d.plot(hours, detections, color="black", ls=ls, lw=1.2, gid=f"detections:{name}")
            usable = int((_num(rows, "priority") > 0).sum())
            if 0 < usable < len(rows):
                ax_h.plot([usable], [hours[usable - 1]], "o", color="#0072B2", gid=f"usable:{name}")
                ax_d.plot([hours[usable - 1]], [detections[usable - 1]], "o", color="#0072B2")
            handles.append(Line2D([], [], color="black", ls=ls, lw=1.2))
            labels.append(f"{name}: {len(rows)} ranked stars")
        handles.append(Line2D([], [], ls="", marker="o", color="#0072B2"))
        labels.append("last star with a usable signature (priority > 0)")
        ax_h.set_xscale("log")
        ax_h.set_yscale("log")
        ax_h.set_xlabel("number of targets (in rank order)")
        ax_h.set_ylabel("cumulative time on target (h)")
        ax_h.set_title("Exposure budget: exposure + overheads, best-ranked first")
        ax_d.set_xscale("log")
        ax_d.set_xlabel("cumulative time on target (h)")
        ax_d.set_ylabel("expected detections")
        ax_d.set_title("Expected detections (sum of P(engulfed) P(detect) P(measured))")
        for ax in (ax_h, ax_d):
            ax.grid(True, which="major", color="0.9", lw=0.6)
        fig.legend(handles, labels, loc="outside lower center", ncols=2, frameon=False)
    return fig


def detectability_hr(points: pd.DataFrame, outline, z_threshold: float, min_lifetime_myr: float,
                     feh: float, planet: str):
    """The detectability map on the HR diagram: tracks coloured by z (top) and by the
    signature's lifetime (bottom), the favourable region outlined.

    ``points`` is a :func:`prioritize.detectability.detectability_map` table (one row
    per initial mass x EEP); ``outline`` a list of (Teff, log L) arrays: the edge of
    the favourable region mapped from mass x EEP onto the diagram."""
    from matplotlib import colormaps
    from matplotlib.collections import LineCollection
    from matplotlib.colors import Normalize
    from matplotlib.lines import Line2D

    from ..stars.placement import MAX_AGE_MYR

    with style():
        fig = _figure((7.0, 8.2))
        axes = fig.subplots(2, 1, sharex=True, sharey=True)
        z = points["z_enrich"].to_numpy(float)
        top = max(float(np.nanmax(z)) if np.isfinite(z).any() else 0.0, 2 * z_threshold)
        life = points["lifetime_myr"].to_numpy(float)
        with np.errstate(divide="ignore", invalid="ignore"):
            log_life = np.where(life > 0, np.log10(life), np.nan)
        finite_life = log_life[np.isfinite(log_life)]
        life_norm = Normalize(finite_life.min(), finite_life.max()) if finite_life.size else Normalize(-1, 2)
        panels = ((axes[0], z, Normalize(0, min(top, 12.0)), colormaps[Z_CMAP],
                   "enrichment significance z (σ)"),
                  (axes[1], log_life, life_norm, colormaps[LIFETIME_CMAP],
                   "log$_{10}$ lifetime of the signature (Myr)"))
        for ax, values, norm, cmap, label in panels:
            mappable = None
            for mass, idx in points.groupby("initial_mass_msun").indices.items():
                if not np.isclose(mass, DRAWN_MAP_MASSES_MSUN).any():
                    continue
                one = points.iloc[idx]
                xy = np.column_stack([one["teff_k"], one["logl_lsun"]])
                v = values[idx]
                segs = np.stack([xy[:-1], xy[1:]], axis=1)
                mid = 0.5 * (v[:-1] + v[1:])
                old = (one["age_gyr"].to_numpy(float)[1:] * 1e3 > MAX_AGE_MYR)
                good = np.all(np.isfinite(segs), axis=(1, 2))
                base = LineCollection(segs[good], colors="0.8", linewidths=1.0, zorder=1)
                ax.add_collection(base)
                coloured = good & np.isfinite(mid) & ~old
                lc = LineCollection(segs[coloured], cmap=cmap, norm=norm, linewidths=2.2, zorder=2,
                                    gid=f"map:{mass:g}")
                lc.set_array(mid[coloured])
                ax.add_collection(lc)
                mappable = lc
                if (good & old).any():
                    ax.add_collection(LineCollection(segs[good & old], colors="0.5", linewidths=1.0,
                                                     linestyles=":", zorder=2))
                ax.annotate(f"{mass:g}", xy[0], xytext=(-4, 0), textcoords="offset points",
                            fontsize=8, color="0.2", ha="right", va="center", clip_on=True)
            for k, line in enumerate(outline):
                ax.plot(line[:, 0], line[:, 1], color="black", lw=1.4, zorder=3, gid=f"favourable:{k}")
                ax.plot(line[:, 0], line[:, 1], color="white", lw=0.5, zorder=3.1)
            if mappable is not None:
                fig.colorbar(mappable, ax=ax, label=label, shrink=0.9)
            ax.set_ylabel("log$_{10}$ L / L$_\\odot$")
        _teff_axis(axes[1], points["teff_k"].to_numpy(float))
        finite = points["logl_lsun"].dropna()
        axes[0].set_ylim(finite.min() - 0.2, finite.max() + 0.2)
        axes[0].set_title(f"Where a {planet} would show: tracks at [Fe/H] = {feh:+.2f}, coloured by z")
        axes[1].set_title("The same tracks coloured by how long the signature lasts")
        handles = [Line2D([], [], color="black", lw=1.4),
                   Line2D([], [], color="0.8", lw=1.0),
                   Line2D([], [], color="0.5", lw=1.0, ls=":")]
        labels = [f"favourable region (outline from a 0.1 M$_\\odot$ grid): z ≥ {z_threshold:g} σ and "
                  f"lifetime ≥ {min_lifetime_myr:g} Myr",
                  "grey: top, z not computed there; bottom, no signature there (z below the threshold)",
                  "older than the Universe (13.8 Gyr): never favourable",]
        fig.legend(handles, labels, loc="outside lower center", ncols=1, frameon=False,
                   title="numbers at the left end of each track: initial mass (M$_\\odot$)")
    return fig


def night_altitude(plan: pd.DataFrame, curves: dict | None, title: str):
    """Altitude against UTC of the planned targets; the observing slots drawn thick.

    ``plan`` needs ``star_id``, ``start_utc``, ``end_utc`` and (for the slot ends when
    no curves are given) ``airmass_start``/``airmass_end``; ``curves`` optionally holds
    ``times`` (datetimes), ``altitude`` (star_id -> degrees), ``moon`` and ``sun``
    altitudes (degrees)."""
    from matplotlib import colormaps
    from matplotlib.dates import DateFormatter
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch

    planned = plan[plan["start_utc"].astype(str).str.len() > 0].copy()
    planned["start"] = pd.to_datetime(planned["start_utc"], utc=True, errors="coerce")
    planned["end"] = pd.to_datetime(planned["end_utc"], utc=True, errors="coerce")
    planned = planned.dropna(subset=["start", "end"]).sort_values("start")
    with style():
        fig = _figure()
        ax = fig.add_subplot()
        handles, labels = [], []
        cmap = colormaps["cividis"]
        if curves is not None:
            times = curves["times"]
            sun = np.asarray(curves["sun"], float)
            dark = sun < -18.0
            ax.fill_between(times, 0, 90, where=dark, color="0.9", zorder=0, step="mid")
            handles.append(Patch(color="0.9"))
            labels.append("astronomical night (Sun below −18°)")
            ax.plot(times, curves["moon"], color="black", ls="--", lw=1.0, gid="moon")
            handles.append(Line2D([], [], color="black", ls="--", lw=1.0))
            labels.append("Moon")
        for k, row in enumerate(planned.itertuples(index=False)):
            colour = cmap(k / max(1, len(planned) - 1))
            if curves is not None and str(row.star_id) in curves["altitude"]:
                alt = np.asarray(curves["altitude"][str(row.star_id)], float)
                ax.plot(curves["times"], alt, color=colour, lw=0.6, alpha=0.6)
                t = pd.DatetimeIndex(curves["times"])
                inside = (t >= row.start) & (t <= row.end)
                ax.plot(t[inside], alt[inside], color=colour, lw=3.0, gid=f"slot:{row.star_id}")
                y0 = alt[inside][0] if inside.any() else np.nan
            else:
                a0, a1 = (90 - np.degrees(np.arccos(1 / np.clip(float(getattr(row, c, np.nan)), 1, None)))
                          for c in ("airmass_start", "airmass_end"))
                ax.plot([row.start, row.end], [a0, a1], color=colour, lw=3.0, gid=f"slot:{row.star_id}")
                y0 = a0
            if np.isfinite(y0):
                ax.annotate(str(k + 1), (row.start, y0), xytext=(0, 4), textcoords="offset points",
                            fontsize=8)
        handles.append(Line2D([], [], color=cmap(0.5), lw=3.0))
        labels.append(f"observing slot of each planned target ({len(planned)}; numbered in order)")
        if curves is not None:
            handles.append(Line2D([], [], color=cmap(0.5), lw=0.6))
            labels.append("its altitude through the night")
        ax.set_ylim(0, 90)
        ax.set_ylabel("altitude (deg)")
        ax.set_xlabel("time (UTC)")
        ax.xaxis.set_major_formatter(DateFormatter("%H:%M", tz="UTC"))
        ax.set_title(title)
        fig.legend(handles, labels, loc="outside lower center", ncols=2, frameon=False)
    return fig


SEASON_ROWS = 30


def season_visibility(season: pd.DataFrame, months: list, dark_hours: dict | None, title: str):
    """Hours observable per month (heat map) for the first :data:`SEASON_ROWS` targets."""
    with style():
        rows = season.head(SEASON_ROWS)
        values = rows[[f"{m}_hours" for m in months]].to_numpy(float)
        labels = [str(s) for s in rows["star_id"]]
        if dark_hours:
            values = np.vstack([[dark_hours.get(m, np.nan) for m in months], values])
            labels = ["dark time (all)"] + labels
        fig = _figure((7.0, max(3.2, 1.8 + 0.19 * len(labels))))
        ax = fig.add_subplot()
        image = ax.imshow(np.ma.masked_invalid(values), aspect="auto", cmap="cividis", vmin=0,
                          interpolation="nearest")
        top = np.nanmax(values) if np.isfinite(values).any() else 1.0
        for (r, c), v in np.ndenumerate(values):
            if np.isfinite(v):
                ax.text(c, r, f"{v:.0f}", ha="center", va="center", fontsize=8,
                        color="white" if v < 0.55 * top else "black")
        ax.set_xticks(range(len(months)), months)
        ax.set_yticks(range(len(labels)), labels)
        if dark_hours:
            ax.axhline(0.5, color="white", lw=2)
        fig.colorbar(image, ax=ax, label="dark hours within the air-mass limit")
        ax.set_title(title)
    return fig
