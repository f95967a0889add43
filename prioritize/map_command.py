"""The ``map`` command: where over initial mass x evolutionary point a signature would show.

A plain function with typer-annotated parameters; the application registers it with
``app.command("map")(map_command)``.  The computation is
:mod:`prioritize.detectability`; this is its file edge: it writes the table (format
by extension, atomic), a PNG figure beside it and, for a cluster, the isochrone
table, and prints a short summary.  Heavy imports happen inside the function so that
``prioritize --help`` stays fast; every user mistake ends as one line on stderr and
exit code 2.
"""

from __future__ import annotations

import math
from enum import Enum
from pathlib import Path
from typing import Annotated, Optional

import typer

from . import CAUTION
from .console import friendly
from .errors import PrioritizeError


class PlanetKind(str, Enum):
    """Composition class of the engulfed body (``planet.kind`` in the config)."""

    gas_giant = "gas_giant"
    brown_dwarf = "brown_dwarf"
    rocky = "rocky"


def _companions(output: Path) -> tuple[Path, Path]:
    """``map.csv`` -> (``map.png``, ``map_isochrone.csv``); double extensions kept."""
    from .catalog.io import companion_path

    figure = companion_path(output, ".png")
    stem = figure.with_suffix("")
    return figure, stem.with_name(stem.name + "_isochrone" + output.name[len(stem.name):])


def _cluster_settings(cfg, feh_option):
    """[Fe/H] of the map, the cluster (age, distance, E(B-V)) or None, and notes for the user."""
    import math

    c = cfg.cluster
    feh = feh_option if feh_option is not None else (c.feh if math.isfinite(c.feh) else 0.0)
    if not math.isfinite(c.age_gyr):
        if math.isfinite(c.distance_pc) or math.isfinite(c.ebv):
            raise PrioritizeError("--distance and --ebv describe a cluster: give --cluster-age GYR too")
        return feh, None, []
    if not math.isfinite(c.distance_pc):
        raise PrioritizeError("--cluster-age needs the cluster's distance: add --distance PC "
                              "(and --ebv MAG)")
    if math.isfinite(c.ebv):
        return feh, (c.age_gyr, c.distance_pc, c.ebv), []
    return feh, (c.age_gyr, c.distance_pc, 0.0), ["(no reddening given: E(B-V) = 0 assumed)"]


def _stage_lines(per_stage) -> list[str]:
    lines = []
    for row in per_stage.itertuples():
        where = f"{row.mass_ranges} M_sun" if row.favourable else "none"
        longest = f", longest lifetime {row.lifetime_max_myr:.3g} Myr" if row.favourable else ""
        lines.append(f"  {row.Index:<20} {where:<26} ({row.favourable} of {row.points} points{longest})")
    return lines


@friendly
def map_command(
    feh: Annotated[Optional[float], typer.Option(
        "--feh", help="[Fe/H] of the map (dex; the grid covers -0.82 to +0.18). Default: the "
                      "config's cluster.feh, else 0.0.")] = None,
    planet_mass: Annotated[Optional[float], typer.Option(
        "--planet-mass", min=1e-5, max=80, help="Engulfed planet mass in Jupiter masses.")] = None,
    planet_kind: Annotated[Optional[PlanetKind], typer.Option(
        "--planet-kind", help="Composition class of the engulfed body.")] = None,
    config: Annotated[Optional[Path], typer.Option(
        "--config", "-c", exists=True, dir_okay=False,
        help="TOML configuration (see configs/default.toml).")] = None,
    z_threshold: Annotated[Optional[float], typer.Option(
        "--z-threshold", min=0.5, max=20, help="Significance that counts as a signature.")] = None,
    min_lifetime: Annotated[Optional[float], typer.Option(
        "--min-lifetime", min=0, max=1e4, help="Shortest useful lifetime of the signature (Myr).")] = None,
    cluster_age: Annotated[Optional[float], typer.Option(
        "--cluster-age", help="Cluster age (Gyr): adds its isochrone, with G and BP-RP of "
                              "each point.")] = None,
    distance: Annotated[Optional[float], typer.Option(
        "--distance", help="Cluster distance (pc); needed with --cluster-age.")] = None,
    ebv: Annotated[Optional[float], typer.Option(
        "--ebv", help="Cluster reddening E(B-V) (mag); default 0.")] = None,
    mass_min: Annotated[float, typer.Option("--mass-min", help="Smallest initial mass (M_sun).")] = 0.8,
    mass_max: Annotated[float, typer.Option("--mass-max", help="Largest initial mass (M_sun).")] = 3.0,
    mass_step: Annotated[float, typer.Option("--mass-step", help="Initial-mass step (M_sun).")] = 0.05,
    eep_points: Annotated[int, typer.Option(
        "--eep-points", help="Evolutionary points from the ZAMS to the tip of the giant branch "
                             "(phase boundaries always included).")] = 150,
    output: Annotated[Path, typer.Option(
        "--output", "-o", help="Map table; format from the extension (CSV, Parquet, ECSV, FITS, "
                               "VOTable). The figure is written beside it as <name>.png; with a cluster, its "
                               "isochrone as <name>_isochrone.<ext>.")]
        = Path("detectability_map.csv"),
):
    """Map the engulfment signature over initial mass x evolutionary point.

    For one [Fe/H], planet and threshold: the significance z of the lithium
    enrichment, how long it lasts, and the favourable region (z >= threshold and
    lifetime >= minimum); with a cluster age, which members (by G magnitude) fall in
    it.  Planning estimates from stellar-track fits and a model lithium prior.

    Example: prioritize map --feh 0.0 --planet-mass 1 --cluster-age 2.5 --distance 800 --ebv 0.05 -o map.csv
    """
    from .catalog.io import atomic_target, provenance_metadata, table_format, write_table
    from .config import load_config, with_overrides
    from .detectability import (NOTE_TOO_OLD, cluster_window, default_map_eeps, detectability_map,
                                favourable_by_stage, grid_metallicity, map_masses)
    from .engine import load_baseline_reference
    from .errors import CatalogError
    from .report.figures import FIGURE_DPI, detectability_figure
    from .stars.tracks import load_grid

    table_format(output, writing=True)
    for option, value in (("--feh", feh), ("--cluster-age", cluster_age), ("--distance", distance),
                          ("--ebv", ebv), ("--mass-min", mass_min), ("--mass-max", mass_max),
                          ("--mass-step", mass_step)):
        if value is not None and not math.isfinite(value):
            raise PrioritizeError(f"{option} must be a finite number, got {value}")
    if not output.parent.is_dir():
        raise CatalogError(f"cannot be written: folder {output.parent} does not exist", path=str(output))
    cfg = with_overrides(load_config(config), {
        "planet.mass_mjup": planet_mass, "planet.kind": planet_kind.value if planet_kind else None,
        "thresholds.z_signature": z_threshold, "thresholds.min_lifetime_myr": min_lifetime,
        "cluster.age_gyr": cluster_age, "cluster.distance_pc": distance, "cluster.ebv": ebv})
    feh, cluster, notes = _cluster_settings(cfg, feh)
    grid = load_grid()
    z = grid_metallicity(grid, feh)
    masses = map_masses(mass_min, mass_max, mass_step)
    eeps = default_map_eeps(eep_points)
    reference = load_baseline_reference(cfg)
    from .cli import _progress
    table = detectability_map(grid, cfg, feh, masses, eeps, reference, progress=_progress("point"))
    window = None
    if cluster:
        age_gyr, distance_pc, reddening = cluster
        window = cluster_window(grid, cfg, age_gyr, feh, distance_pc, reddening, reference,
                                progress=_progress("point"))

    thr = cfg.thresholds
    planet = f"{cfg.planet.mass_mjup:g} M_J {cfg.planet.kind.replace('_', ' ')}"
    title = (f"[Fe/H] = {feh:+.2f} (Z = {z:.4f}), planet {planet}: favourable where "
             f"z ≥ {thr.z_signature:g} and lifetime ≥ {thr.min_lifetime_myr:g} Myr")
    if cluster:
        title += f"; cluster {cluster[0]:g} Gyr at {cluster[1]:g} pc, E(B-V) = {cluster[2]:g}"
    meta = provenance_metadata(cfg.to_dict(), command="map", feh=feh, z=z,
                               cluster=None if cluster is None else
                               {"age_gyr": cluster[0], "distance_pc": cluster[1], "ebv": cluster[2]})
    figure_path, isochrone_path = _companions(output)
    write_table(table, output, meta)
    written = [output]
    if window is not None:
        write_table(window, isochrone_path, meta)
        written.append(isochrone_path)
    figure = detectability_figure(table, thr.z_signature, thr.min_lifetime_myr, window, title)
    try:
        with atomic_target(figure_path) as temporary:
            figure.savefig(temporary, format="png", dpi=FIGURE_DPI)
    except OSError as exc:
        raise CatalogError(f"cannot be written: {exc}", path=str(figure_path)) from exc
    written.append(figure_path)

    n_fav = int(table["favourable"].sum())
    typer.echo(title)
    typer.echo(f"{masses.size} masses ({masses.min():g}-{masses.max():g} M_sun) x {eeps.size} "
               f"evolutionary points: {n_fav} of {len(table)} favourable")
    typer.echo("\n".join(_stage_lines(favourable_by_stage(table))))
    old = int((table["note"] == NOTE_TOO_OLD).sum())
    if old:
        typer.echo(f"  ({old} points older than 13.8 Gyr are marked and never favourable)")
    if window is not None:
        typer.echo(f"Cluster {cluster[0]:g} Gyr at {cluster[1]:g} pc, E(B-V) = {cluster[2]:g}: "
                   f"{window.attrs['summary']}")
        for note in notes:
            typer.echo(f"  {note}")
    typer.echo("wrote " + ", ".join(str(p) for p in written))
    typer.echo(f"Caution: {CAUTION}")
