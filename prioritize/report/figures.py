"""Figures of the detectability map (matplotlib, no display needed).

Functions here only draw results computed elsewhere (:mod:`prioritize.detectability`)
and return a :class:`matplotlib.figure.Figure`; the caller saves it (the command
writes it atomically).  No pyplot state is used, so they work with any backend.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from .. import CAUTION
from ..catalog.status import STAGES
from ..detectability import phase_boundaries
from ..stars.placement import MAX_AGE_MYR

Z_COLOUR_MAX_SIGMA = 10.0        # z above this shares the top colour (the scale ends at
                                 # the map's largest z, but not below twice the threshold)
FIGURE_DPI = 110
_STAGE_LABELS = {"main_sequence": "main sequence", "turnoff": "turn-off", "subgiant": "subgiant",
                 "lower_giant_branch": "lower giant branch", "upper_giant_branch": "upper giant branch"}


def _grid(table: pd.DataFrame, column: str) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Masses (x), EEPs (y) and the column as a (n_eep, n_mass) array."""
    wide = table.pivot(index="eep", columns="initial_mass_msun", values=column)
    return wide.columns.to_numpy(float), wide.index.to_numpy(float), wide.to_numpy()


def _bump_line(table: pd.DataFrame) -> tuple[np.ndarray, np.ndarray]:
    """Per mass, the first EEP of the upper giant branch (the RGB bump, or mid-branch
    on tracks without a bump); NaN where the map does not reach it."""
    upper = table[table["stage"] == "upper_giant_branch"].groupby("initial_mass_msun")["eep"].min()
    masses = np.unique(table["initial_mass_msun"].to_numpy(float))
    return masses, upper.reindex(masses).to_numpy(float)


def _outline(ax, masses, eeps, mask, **style):
    """Contour of a boolean region on the map grid (nothing if the region is empty)."""
    if mask.any() and masses.size > 1 and eeps.size > 1:
        ax.contour(masses, eeps, mask.astype(float), levels=[0.5], **style)


def _decorate_map(ax, table, masses, eeps, favourable, too_old, window):
    bounds = phase_boundaries()
    for name in ("turnoff", "subgiant", "giant_branch"):
        ax.axhline(bounds[name], color="0.35", lw=0.7, ls=":")
    bump_m, bump_e = _bump_line(table)
    ax.plot(bump_m, bump_e, color="0.35", lw=0.9, ls="--")
    _outline(ax, masses, eeps, favourable, colors="black", linewidths=2.4)
    _outline(ax, masses, eeps, favourable, colors="white", linewidths=0.8)
    if too_old.any() and masses.size > 1 and eeps.size > 1:
        ax.contourf(masses, eeps, too_old.astype(float), levels=[0.5, 1.5], colors="none",
                    hatches=["////"])
    if window is not None:
        ax.plot(window["initial_mass_msun"], window["eep"], color="white", lw=1.6)
        ax.plot(window["initial_mass_msun"], window["eep"], color="black", lw=0.8)
    centres = {"main_sequence": 0.5 * (bounds["main_sequence"] + bounds["turnoff"]),
               "turnoff": 0.5 * (bounds["turnoff"] + bounds["subgiant"]),
               "subgiant": 0.5 * (bounds["subgiant"] + bounds["giant_branch"]),
               "lower_giant_branch": bounds["giant_branch"] + 0.2 * (bounds["tip"] - bounds["giant_branch"]),
               "upper_giant_branch": bounds["giant_branch"] + 0.85 * (bounds["tip"] - bounds["giant_branch"])}
    for stage, eep in centres.items():
        if eeps.min() <= eep <= eeps.max():
            ax.text(0.99, eep, _STAGE_LABELS[stage], transform=ax.get_yaxis_transform(),
                    va="center", ha="right", fontsize=8, color="0.1",
                    bbox={"boxstyle": "round,pad=0.15", "fc": "white", "ec": "none", "alpha": 0.75})
    ax.set_xlim(masses.min(), masses.max())
    ax.set_ylim(eeps.min(), eeps.max())
    ax.set_xlabel("initial mass (M$_\\odot$)")
    ax.set_ylabel("evolutionary point (EEP)")


def detectability_figure(table: pd.DataFrame, z_threshold: float, min_lifetime_myr: float,
                         window: pd.DataFrame | None = None, title: str = ""):
    """The map as a figure: z and lifetime over initial mass x EEP, favourable region
    outlined; with a cluster window, its isochrone and a colour-magnitude panel.

    Parameters
    ----------
    table : pandas.DataFrame
        A :func:`prioritize.detectability.detectability_map` table (a full
        mass x EEP grid).
    z_threshold : float
        Significance of a signature (sigma), drawn as a dashed contour on the z panel.
    min_lifetime_myr : float
        Shortest useful lifetime (Myr), drawn as a dashed contour on the lifetime panel.
    window : pandas.DataFrame, optional
        A :func:`prioritize.detectability.cluster_window` table.
    title : str
        Figure title (the caution about planning estimates is added below it).

    Returns
    -------
    matplotlib.figure.Figure
        Every mark is in the legend below the panels: dotted lines, the start of the
        turn-off, subgiant branch and giant branch; dashed grey, the lower/upper
        giant-branch split (RGB bump); black-and-white outline, the favourable region;
        white dashes, the threshold contour of each panel; hatched, older than 13.8
        Gyr; light grey cells, no signature.  The caution is a footnote.
    """

    masses, eeps, z = _grid(table, "z_enrich")
    life = _grid(table, "lifetime_myr")[2]
    favourable = _grid(table, "favourable")[2].astype(bool)
    too_old = _grid(table, "age_gyr")[2] * 1e3 > MAX_AGE_MYR
    import matplotlib

    with matplotlib.rc_context(MAP_STYLE):
        return _detectability_figure(table, z_threshold, min_lifetime_myr, window, title,
                                     masses, eeps, z, life, favourable, too_old)


def _detectability_figure(table, z_threshold, min_lifetime_myr, window, title, masses, eeps, z, life,
                          favourable, too_old):
    from matplotlib import colormaps
    from matplotlib.colors import Normalize
    from matplotlib.figure import Figure

    if window is not None:
        fig = Figure(figsize=(11.0, 9.6), layout="constrained")
        grid = fig.add_gridspec(2, 2)
        axes = [fig.add_subplot(grid[0, 0]), fig.add_subplot(grid[0, 1]), fig.add_subplot(grid[1, 0])]
    else:
        fig = Figure(figsize=(11.0, 6.2), layout="constrained")
        axes = list(fig.subplots(1, 2))
    z_map = colormaps["magma"].with_extremes(bad="0.85")
    top = np.nanmax(z) if np.isfinite(z).any() else 0.0
    top = max(min(top, Z_COLOUR_MAX_SIGMA), 2.0 * z_threshold)
    mesh = axes[0].pcolormesh(masses, eeps, np.ma.masked_invalid(z), shading="nearest", cmap=z_map,
                              norm=Normalize(0.0, top))
    fig.colorbar(mesh, ax=axes[0], label="enrichment significance z (σ)")
    _outline(axes[0], masses, eeps, np.nan_to_num(z) >= z_threshold, colors="white",
             linewidths=0.9, linestyles="--")
    axes[0].set_title("significance z of the signature")
    with np.errstate(divide="ignore", invalid="ignore"):
        log_life = np.where(life > 0, np.log10(life), np.nan)
    life_map = colormaps["viridis"].with_extremes(bad="0.85")
    mesh = axes[1].pcolormesh(masses, eeps, np.ma.masked_invalid(log_life), shading="nearest",
                              cmap=life_map)
    fig.colorbar(mesh, ax=axes[1], label="log$_{10}$ lifetime of the signature (Myr)")
    _outline(axes[1], masses, eeps, np.nan_to_num(life) >= max(min_lifetime_myr, 1e-9),
             colors="white", linewidths=0.9, linestyles="--")
    axes[1].set_title("lifetime of the signature")
    for ax in axes[:2]:
        _decorate_map(ax, table, masses, eeps, favourable, too_old, window)
    if window is not None:
        _colour_magnitude(fig, axes[2], window)
    _map_legend(fig, z_threshold, min_lifetime_myr, too_old.any(), window is not None)
    if title:
        fig.suptitle(title)
    return fig


def _map_legend(fig, z_threshold, min_lifetime_myr, any_too_old, cluster):
    """One legend for every mark of the map, and the caution as a footnote."""
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch
    from matplotlib.patheffects import withStroke

    handles = [Line2D([], [], color="0.35", lw=0.7, ls=":"), Line2D([], [], color="0.35", lw=0.9, ls="--"),
               Line2D([], [], color="black", lw=2.4),
               Line2D([], [], color="white", lw=0.9, ls="--", path_effects=[withStroke(linewidth=3, foreground="0.3")]),
               Patch(facecolor="0.85", edgecolor="0.6")]
    labels = ["start of the turn-off, subgiant branch, giant branch (EEP 170, 200, 280)",
              "RGB bump: lower / upper giant branch",
              f"favourable region: z ≥ {z_threshold:g} σ and lifetime ≥ {min_lifetime_myr:g} Myr",
              f"threshold contour: z = {z_threshold:g} σ (left), lifetime = {min_lifetime_myr:g} Myr (right)",
              "no signature computed (no envelope model or no track there)"]
    if any_too_old:
        handles.append(Patch(facecolor="none", edgecolor="0.3", hatch="////"))
        labels.append("hatched: older than the Universe (13.8 Gyr), never favourable")
    if cluster:
        handles.append(Line2D([], [], color="black", lw=1.6))
        labels.append("the cluster's isochrone (black; right panel: colour–magnitude)")
    fig.legend(handles, labels, loc="outside lower center", ncols=2, frameon=False,
               title=f"Caution: {CAUTION}")


MAP_STYLE = {"font.size": 9.0, "axes.titlesize": 10.0, "axes.labelsize": 9.0, "xtick.labelsize": 8.5,
             "ytick.labelsize": 8.5, "legend.fontsize": 8.5, "figure.titlesize": 10.0}
"""Text sizes of the map figure (pt at the written size; nothing below 8)."""


def _colour_magnitude(fig, ax, window: pd.DataFrame):
    """G against BP-RP along the isochrone, favourable points coloured by z."""
    ax.plot(window["bp_rp"], window["g_mag"], color="0.6", lw=1.0, label="isochrone")
    fav = window[window["favourable"].astype(bool)]
    if not fav.empty:
        points = ax.scatter(fav["bp_rp"], fav["g_mag"], c=fav["z_enrich"], cmap="magma", s=22,
                            edgecolors="black", linewidths=0.6, zorder=3, label="favourable point (colour: z)")
        fig.colorbar(points, ax=ax, label="z (σ) of favourable points")
    for stage in STAGES:
        s = window[(window["stage"] == stage) & np.isfinite(window["g_mag"]) & np.isfinite(window["bp_rp"])]
        if len(s):
            mid = s.iloc[len(s) // 2]
            ax.annotate(_STAGE_LABELS.get(stage, stage.replace("_", " ")), (mid["bp_rp"], mid["g_mag"]),
                        fontsize=8, color="0.2", xytext=(4, 0), textcoords="offset points")
    if np.isfinite(window["g_mag"]).any():
        ax.invert_yaxis()
    ax.set_xlabel("BP − RP (mag, reddened)")
    ax.set_ylabel("G (mag)")
    ax.set_title("cluster members along the isochrone")
    ax.legend(loc="lower left", fontsize=8)
