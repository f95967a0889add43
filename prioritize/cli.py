"""Command-line front end: one thin function per command.

Heavy imports (pandas, astropy, scipy) happen inside the commands so that
``prioritize --help`` starts quickly.  Every run goes through one handler
(:func:`prioritize.console.run_guarded`): exit code 0 ok, 1 a user mistake (one line
naming what to fix), 2 an internal error (one line asking for a report; the
traceback only with ``--debug``).
"""

from __future__ import annotations

import functools
import inspect
import sys
from pathlib import Path
from typing import Optional

import typer
import typer.core

from . import CAUTION, __version__
from .console import DEBUG, friendly, run_guarded
from .errors import PrioritizeError
from .map_command import map_command
from .report.command import report_command
from .sky.commands import night_command, season_command

class _GuardedGroup(typer.core.TyperGroup):
    """The application's command group: every run ends in an exit code of
    :func:`prioritize.console.run_guarded` (callers asking for non-standalone mode get
    click's own behaviour)."""

    def main(self, args=None, prog_name=None, complete_var=None, standalone_mode=True, **extra):
        if not standalone_mode:
            return super().main(args, prog_name, complete_var, standalone_mode, **extra)
        sys.exit(run_guarded(lambda: super(_GuardedGroup, self).main(
            args, prog_name, complete_var, False, **extra)))


app = typer.Typer(
    cls=_GuardedGroup, add_completion=False, no_args_is_help=True, rich_markup_mode=None,
    help="Rank planet-engulfment candidates for lithium follow-up.\n\n"
         "Example: prioritize rank candidates.csv -o ranked.parquet\n\n" + CAUTION)


SAMPLE_DIR = Path(__file__).resolve().parents[1] / "sample_catalogs"

ConfigOpt = typer.Option(None, "--config", "-c", exists=True, dir_okay=False,
                         help="TOML configuration (see configs/default.toml).")
ColumnsOpt = typer.Option(None, "--columns",
                          help="Map a column of yours to a canonical name: --columns Teff=teff_k "
                               "(repeatable).")


def _load(catalog: Path, config: Optional[Path], columns: Optional[list[str]], overrides=None):
    from .config import load_config, with_overrides
    from .instruments import load_instrument

    cfg = load_config(config)
    if overrides:
        cfg = with_overrides(cfg, overrides)
    load_instrument(cfg.observing.instrument)      # a bad instrument fails before any work
    from .catalog.io import parse_column_option, read_catalog
    from .catalog.validate import validate_catalog
    mapping = {**cfg.columns, **parse_column_option(columns or [])}
    table, messages = read_catalog(catalog, mapping)
    return cfg, validate_catalog(table, path=str(catalog), cluster_context=_cluster_context(cfg)), \
        messages


def _planet_masses(text: Optional[str]) -> list[float]:
    """'1,5,10' -> [1.0, 5.0, 10.0]; a clear error for anything else."""
    if text is None:
        return []
    try:
        return [float(part) for part in text.split(",") if part.strip()]
    except ValueError:
        raise PrioritizeError(f"--planet-mass takes numbers separated by commas (e.g. 1,5,10), "
                              f"got {text!r}") from None


# Options that change what the chain computes for a star.  Every command that shows a
# star's numbers takes all of them (through ``chain_options``), so ``explain`` cannot
# compute a star differently from ``rank``.
CHAIN_OPTIONS = {
    "planet_mass": (Optional[str], typer.Option(
        None, "--planet-mass", help="Engulfed planet mass in Jupiter masses; several separated by "
                                    "commas (1,5,10): the first ranks, the others add columns.")),
    "z_threshold": (Optional[float], typer.Option(
        None, "--z-threshold", min=0.5, max=20, help="Significance that counts as a signature.")),
    "seed": (Optional[int], typer.Option(None, "--seed", min=0, help="Random seed.")),
    "reference": (Optional[Path], typer.Option(
        None, "--reference", exists=True, dir_okay=False,
        help="Your own A(Li) table (Teff, logg, [Fe/H], A(Li), upper-limit flag) for the baseline.")),
    "instrument": (Optional[str], typer.Option(
        None, "--instrument", help="Instrument preset (echelle-2m, echelle-4m, echelle-8m) or a TOML file.")),
    "tracks": (Optional[Path], typer.Option(
        None, "--tracks", exists=True, help="Your own stellar tracks: a track table in our format or "
                                            "MESA history file(s) (see DEVELOPERS.md).")),
    "rapid_only": (bool, typer.Option(
        False, "--rapid-only", help="Keep only rapid or anomalous rotators in the ranking; the rest "
                                    "are written with status not_anomalous_rotator.")),
}


def chain_overrides(planet_mass=None, z_threshold=None, seed=None, reference=None, instrument=None,
                    tracks=None, rapid_only=False) -> dict:
    """The configuration overrides the :data:`CHAIN_OPTIONS` stand for (None = keep the config)."""
    masses = _planet_masses(planet_mass)
    return {"planet.mass_mjup": masses[0] if masses else None,
            "planet.extra_masses_mjup": masses[1:] if masses else None,
            "rotation.rapid_only": True if rapid_only else None,
            "run.tracks": str(tracks) if tracks else None,
            "thresholds.z_signature": z_threshold,
            "scoring.seed": seed, "observing.instrument": instrument,
            "baseline.source": "reference" if reference else None,
            "baseline.reference": str(reference) if reference else None}


def chain_options(command):
    """Give a command every option of :data:`CHAIN_OPTIONS`; it receives them as one
    ``overrides`` dict (:func:`chain_overrides`)."""
    signature = inspect.signature(command)
    own = [p for p in signature.parameters.values() if p.name != "overrides"]
    added = [inspect.Parameter(name, inspect.Parameter.KEYWORD_ONLY, default=option, annotation=kind)
             for name, (kind, option) in CHAIN_OPTIONS.items()]

    @functools.wraps(command)
    def wrapper(*args, **kwargs):
        chosen = {name: kwargs.pop(name, None) for name in CHAIN_OPTIONS}
        return command(*args, overrides=chain_overrides(**chosen), **kwargs)
    wrapper.__signature__ = signature.replace(parameters=own + added)
    return wrapper


def _cluster_context(cfg) -> dict:
    return {k: getattr(cfg.cluster, k) for k in ("age_gyr", "feh", "distance_pc", "ebv")}


def _metadata(cfg, catalog) -> dict:
    from datetime import datetime, timezone
    return {"tool": f"prioritize {__version__}", "input": str(catalog),
            "created_utc": datetime.now(timezone.utc).isoformat(timespec="seconds"),
            "config": cfg.to_dict(), "caution": CAUTION}


def _progress(unit: str = "star"):
    """A progress bar on stderr (tqdm) that advances per batch of stars (or map points);
    None when stderr is not a terminal."""
    if not sys.stderr.isatty():
        return None
    from tqdm import tqdm

    bar = {}

    def report(done, total):
        if "bar" not in bar:
            bar["bar"] = tqdm(total=total, unit=unit, file=sys.stderr, leave=False, dynamic_ncols=True)
        bar["bar"].update(done - bar["bar"].n)
        if done >= total:
            bar["bar"].close()
    return report


def _show_version(value: bool):
    if value:
        typer.echo(f"prioritize {__version__}")
        raise typer.Exit()


@app.callback()
def _main(version: bool = typer.Option(False, "--version", callback=_show_version, is_eager=True,
                                       help="Print the version and exit."),
          debug: bool = typer.Option(False, "--debug", help="On an internal error, print the full "
                                                            "traceback (for a bug report).")):
    """Rank planet-engulfment candidates for lithium follow-up."""
    DEBUG["on"] = debug


@app.command()
@friendly
@chain_options
def rank(
    catalog: Path = typer.Argument(..., exists=True, dir_okay=False, help="Candidate catalog "
                                   "(CSV, Parquet, FITS, ECSV or VOTable)."),
    output: Optional[Path] = typer.Option(None, "--output", "-o",
                                          help="Ranked table; format from the extension "
                                               "(default: <catalog>_ranked.csv here)."),
    config: Optional[Path] = ConfigOpt,
    columns: Optional[list[str]] = ColumnsOpt,
    top: Optional[int] = typer.Option(None, "--top", min=0, help="Rows shown in the terminal."),
    workers: Optional[int] = typer.Option(None, "--workers", min=1,
                                          help="Processes that rank batches in parallel (default: the "
                                               "cores available); the result does not depend on it."),
    report: bool = typer.Option(False, "--report", help="Also write the HTML report "
                                                        "(<output stem>_report.html and its figures)."),
    overrides: Optional[dict] = None,
):
    """Rank a candidate catalog: enrichment significance, lifetime and priority per star.

    Example: prioritize rank candidates.csv -o ranked.parquet --planet-mass 5
    """
    from .catalog.formats import catalog_stem, check_output_path

    output = check_output_path(output or Path(f"{catalog_stem(catalog)}_ranked.csv"),
                               [catalog] + ([config] if config else []))
    cfg, table, messages = _load(catalog, config, columns, {**overrides, "run.top": top})
    from .catalog.io import write_table
    from .engine import available_cores, rank_table   # heavy: imported once the inputs are known to be usable
    from .report.terminal import status_summary, top_table
    for m in messages:
        typer.echo(f"  {m}", err=True)
    ranked = rank_table(table, cfg, progress=_progress(), workers=workers or available_cores())
    write_table(ranked, output, _metadata(cfg, catalog))
    typer.echo(top_table(ranked, cfg.run.top))
    typer.echo("")
    typer.echo(status_summary(ranked))
    typer.echo(f"Ranked table written to {output}")
    if report:
        _write_report(ranked, cfg, catalog, output)


def _write_report(ranked, cfg, catalog, output: Path) -> None:
    """The HTML report of a ranked table just written (``<stem>_report.html`` beside it)."""
    from .catalog.io import catalog_stem
    from .report.command import report_paths_text
    from .report.proposal import build_report, write_report

    html = output.with_name(f"{catalog_stem(output)}_report.html")
    meta = _metadata(cfg, catalog)
    typer.echo(report_paths_text(write_report(build_report(ranked, meta, str(output)), html)))


@app.command()
@friendly
@chain_options
def explain(
    catalog: Path = typer.Argument(..., exists=True, dir_okay=False),
    star_id: str = typer.Argument(..., help="The star's id as in the catalog."),
    config: Optional[Path] = ConfigOpt,
    columns: Optional[list[str]] = ColumnsOpt,
    overrides: Optional[dict] = None,
):
    """Show one star's whole chain with intermediate values and sources.

    The star is computed inside its catalog, with the same options, exactly as
    ``prioritize rank`` computes it (its batch and that batch's random stream), so
    every number shown is the one in the ranked table.

    Example: prioritize explain candidates.csv "Star 42" --seed 7
    """
    import numpy as np

    from .engine import rank_row
    from .report.explain import explain_text

    cfg, table, _ = _load(catalog, config, columns, overrides)
    ids = table["star_id"].astype(str)
    hit = np.flatnonzero(ids.to_numpy() == star_id)
    if hit.size == 0:
        near = [s for s in ids if star_id.lower() in s.lower()][:5]
        raise PrioritizeError(f"star '{star_id}' is not in {catalog}"
                              + (f"; did you mean: {', '.join(near)}" if near else ""))
    typer.echo(explain_text(table.iloc[hit[0]], rank_row(table, cfg, int(hit[0])), cfg))


@app.command()
@friendly
def check(
    catalog: Path = typer.Argument(..., exists=True, dir_okay=False),
    config: Optional[Path] = ConfigOpt,
    columns: Optional[list[str]] = ColumnsOpt,
):
    """Validate a catalog: every problem, and what each star can be computed from.

    Example: prioritize check candidates.csv
    """
    from .catalog.validate import check_report, computable_from

    cfg, table, messages = _load(catalog, config, columns)
    for m in messages:
        typer.echo(m)
    context = _cluster_context(cfg)
    table = table.assign(computable_from=computable_from(table, cluster_context=context))
    typer.echo(check_report(table, cluster_context=context))


@app.command()
@friendly
def demo(
    output_dir: Path = typer.Option(Path("demo_output"), "--output-dir",
                                    help="Where the demo writes its ranked lists."),
):
    """Run the main job on the bundled sample catalogs (an invented cluster and field)."""
    from .catalog.io import write_table
    from .config import load_config, with_overrides
    from .engine import rank_table
    from .report.terminal import status_summary, top_table
    from .catalog.io import read_catalog
    from .catalog.validate import validate_catalog

    runs = [("Cluster (invented) — members of the sample cluster", "cluster_members.csv", {}),
            ("Field sample (invented)", "field_stars.csv", {})]
    output_dir.mkdir(parents=True, exist_ok=True)
    for title, name, overrides in runs:
        path = SAMPLE_DIR / name
        if not path.exists():
            raise PrioritizeError(f"sample catalog {path} is missing; run "
                                  "`python sample_catalogs/make_samples.py` to regenerate it")
        cfg = with_overrides(load_config(), overrides)
        table, _ = read_catalog(path)
        ranked = rank_table(validate_catalog(table, path=str(path), cluster_context=_cluster_context(cfg)),
                            cfg, progress=_progress())
        out = output_dir / f"{path.stem}_ranked.csv"
        write_table(ranked, out, _metadata(cfg, path))
        typer.echo(f"== {title}: {path.name}")
        typer.echo(top_table(ranked, 10))
        typer.echo(status_summary(ranked))
        typer.echo(f"Ranked table written to {out}")
        _write_report(ranked, cfg, path, out)
        typer.echo("")


app.command("map")(map_command)
app.command("night")(night_command)
app.command("season")(season_command)
app.command("report")(report_command)


def main():
    """Console entry point."""
    app()


if __name__ == "__main__":
    main()
