"""The ``night`` and ``season`` commands (the file edge of :mod:`prioritize.sky`).

Plain functions with typer-annotated parameters; the application registers them
with ``app.command("night")(night_command)`` and ``app.command("season")(season_command)``.
Tables are read with :func:`prioritize.catalog.io.read_table` and written with
:func:`prioritize.catalog.io.write_table` (format by extension, atomic).  Every
user mistake ends as one line on stderr and exit code 2.
"""

from __future__ import annotations

import datetime as dt
from enum import Enum
from pathlib import Path
from typing import Annotated, Optional

import typer

from .. import CAUTION
from ..console import one_line_errors
from ..errors import CatalogError, PrioritizeError

FIGURE_ROWS = 40          # targets shown in the season heat map (the first rows of the table)
TEXT_LEFT_OUT_ROWS = 30   # left-out targets listed by name in the night's text file


_TABLE_HELP = ("Ranked list or any catalog (CSV, Parquet, ECSV, FITS, VOTable) with star_id, "
               "ra_deg and dec_deg (ICRS, degrees)")
SiteOption = Annotated[str, typer.Option(
    "--site", help="Site preset (mauna-kea, la-silla, paranal, la-palma, kitt-peak, siding-spring; "
                   "see configs/sites/) or a site TOML file.")]


class Twilight(str, Enum):
    """Which twilight bounds the night."""

    nautical = "nautical"
    astronomical = "astronomical"


# ----------------------------------------------------------------------------- shared edge helpers

def _parse_date(text: str, option: str) -> dt.date:
    try:
        return dt.date.fromisoformat(text.strip())
    except ValueError as exc:
        raise PrioritizeError(f"{option} must be a date YYYY-MM-DD, got {text!r}") from exc


def _read_targets(path: Path, priority_column: Optional[str]):
    """The table and its star_id, ra_deg, dec_deg, priority and skip reasons."""
    import numpy as np
    from ..catalog.status import OK
    from ..catalog.io import read_table

    table, _metadata = read_table(path)
    table = _canonical_positions(table)
    needed = ["star_id", "ra_deg", "dec_deg"] + ([priority_column] if priority_column else [])
    missing = [c for c in needed if c not in table.columns]
    if missing:
        raise CatalogError(f"missing column(s) {', '.join(missing)}; the table needs star_id, ra_deg, "
                           "dec_deg (degrees) and a priority column (--priority-column)", path=str(path))
    numbers = {column: _numeric(table, column) for column in needed[1:]}
    skip = np.full(len(table), "", dtype=object)
    if "status" in table.columns:
        status = table["status"].astype(str).str.strip().str.lower()
        skip[(status != OK).to_numpy()] = "status_not_ok"
    return table, numbers, skip


def _canonical_positions(table):
    """The identifier and coordinates under their canonical names when the table spells
    them as a catalog may (``source_id``, ``ra``, ``dec``, ...; the spellings ``rank``
    recognises, :func:`prioritize.catalog.columns.recognise`)."""
    from ..catalog.columns import INPUT_COLUMNS

    renames = {}
    for canonical in ("star_id", "ra_deg", "dec_deg"):
        if canonical in table.columns:
            continue
        spellings = [a.lower() for a in INPUT_COLUMNS[canonical].aliases]
        found = sorted((c for c in table.columns if str(c).strip().lower() in spellings),
                       key=lambda c: spellings.index(str(c).strip().lower()))
        if found:
            renames[found[0]] = canonical
    return table.rename(columns=renames) if renames else table


def _numeric(table, column: str) -> np.ndarray:
    """A column as floats; text that is not a number becomes NaN (reported per row downstream)."""
    import numpy as np
    import pandas as pd

    return pd.to_numeric(table[column], errors="coerce").to_numpy(dtype=float)


def _atomic_write(path: Path, write) -> None:
    """Call ``write(temporary_path)`` and rename the result onto ``path`` (never half-written)."""
    from ..catalog.io import atomic_target

    try:
        with atomic_target(path) as temporary:
            write(temporary)
    except OSError as exc:
        raise CatalogError(f"cannot be written: {exc}", path=str(path)) from exc


def _local(mjd: float, zone) -> str:
    import numpy as np
    from .offline import mjd_to_datetime

    return "" if not np.isfinite(mjd) else f"{mjd_to_datetime(mjd, zone):%Y-%m-%d %H:%M:%S %Z}"


def _utc(mjd: float) -> str:
    import numpy as np
    from .offline import mjd_to_datetime

    return "" if not np.isfinite(mjd) else f"{mjd_to_datetime(mjd):%Y-%m-%dT%H:%M:%S}"


# ----------------------------------------------------------------------------- night

def night_command(
    ranked: Annotated[Path, typer.Argument(
        help=f"{_TABLE_HELP} and a priority column; optional exposure_s and status.")],
    site: SiteOption,
    date: Annotated[str, typer.Option("--date", help="Local date of the evening, YYYY-MM-DD.")],
    airmass_max: Annotated[float, typer.Option(
        "--airmass-max", min=1.0, help="Air-mass limit for the whole slot (Pickering 2002).")] = 2.0,
    moon_min_sep: Annotated[float, typer.Option(
        "--moon-min-sep", min=0.0, max=180.0,
        help="Minimum Moon separation in degrees, applied while the Moon is up.")] = 30.0,
    overhead: Annotated[float, typer.Option(
        "--overhead", min=0.0, help="Slew, acquisition and readout per target, seconds.")] = 300.0,
    exposure: Annotated[float, typer.Option(
        "--exposure", min=1.0, help="Exposure in seconds for rows without exposure_s.")] = 600.0,
    twilight: Annotated[Twilight, typer.Option(
        "--twilight", help="Twilight that bounds the night (nautical: Sun below -12 deg, "
                           "astronomical: -18 deg).")] = Twilight.nautical,
    priority_column: Annotated[str, typer.Option(
        "--priority-column", help="Column holding the priority (larger first).")] = "priority",
    output: Annotated[Optional[Path], typer.Option(
        "--output", "-o", help="Plan table (format by extension); also writes <stem>.txt and "
                               "<stem>.png beside it.")] = None,
) -> None:
    """Plan one night: which targets to observe when, and why the others are left out.

    Greedy by priority: each target, highest priority first, takes the earliest
    slot (overhead + exposure, whole minutes) in which it stays within the
    air-mass limit and, while the Moon is up, the Moon-separation limit for the
    whole slot; then adjacent slots are swapped where that lowers the air mass.
    No lower-priority target takes time a higher-priority one could have used.
    Deterministic (no randomness).

    The table lists every input row once: planned targets first (order 1, 2, ...),
    then the others with an empty order and their reason (status_not_ok,
    no_coordinates, no_priority, invalid_exposure, longer_than_dark_window,
    never_above_airmass_limit, too_close_to_moon, no_time_left).

    Example: prioritize night ranked.parquet --site mauna-kea --date 2027-03-15 -o plan.csv

    Times are planning estimates (about a minute); the observatory's own tools,
    rules and safety practice prevail.
    """
    import numpy as np
    from ..catalog.formats import companion_path
    with one_line_errors():
        from .sites import load_site

        the_site = load_site(site)
        night = _parse_date(date, "--date")
        if output is not None:
            from ..catalog.formats import check_output_path
            check_output_path(output, [ranked])        # a bad output fails before the plan is made
        from .schedule import SCHEDULED, STATUS_NOT_OK, plan_night
        table, numbers, skip = _read_targets(ranked, priority_column)
        if "exposure_s" in table.columns:
            exposure_s = _numeric(table, "exposure_s")
            exposure_s = np.where(np.isnan(exposure_s), exposure, exposure_s)
        else:
            exposure_s = np.full(len(table), float(exposure))
        keep = np.flatnonzero(skip == "")
        plan = plan_night(the_site, night, numbers["ra_deg"][keep], numbers["dec_deg"][keep],
                          numbers[priority_column][keep], exposure_s[keep], overhead_s=overhead,
                          airmass_max=airmass_max, moon_min_sep_deg=moon_min_sep,
                          twilight=twilight.value)
        result = _night_table(table, numbers[priority_column], exposure_s, keep, plan, the_site,
                              SCHEDULED, STATUS_NOT_OK)
        text = _night_text(result, plan, the_site, airmass_max, moon_min_sep, overhead, SCHEDULED)
        typer.echo(text)
        if output is not None:
            from ..catalog.io import provenance_metadata, write_table

            meta = provenance_metadata(None, command="night", input=str(ranked), site=the_site.name,
                                       date=night.isoformat(), airmass_max=airmass_max,
                                       moon_min_sep_deg=moon_min_sep, overhead_s=overhead,
                                       default_exposure_s=exposure, twilight=twilight.value)
            write_table(result, output, meta)
            _atomic_write(companion_path(output, ".txt"),
                          lambda p: p.write_text(text + "\n", encoding="utf-8"))
            figure = _night_figure(plan, the_site, numbers["ra_deg"][keep], numbers["dec_deg"][keep],
                                   airmass_max)
            _atomic_write(companion_path(output, ".png"), lambda p: figure.savefig(p, format="png", dpi=110))
            typer.echo(f"wrote {output}, {companion_path(output, '.txt').name}, "
                       f"{companion_path(output, '.png').name}")


def _night_table(table, priority, exposure_s, keep, plan, site, scheduled, status_not_ok):
    import numpy as np
    import pandas as pd

    n = len(table)
    zone = site.zone

    def spread(values, fill):
        out = np.full(n, fill, dtype=np.asarray(values).dtype)
        out[keep] = values
        return out

    reason = np.full(n, status_not_ok, dtype=object)
    reason[keep] = plan.reason
    order = spread(plan.order, 0)
    start = spread(plan.start_mjd, np.nan)
    end = spread(plan.end_mjd, np.nan)
    result = pd.DataFrame({
        "order": pd.array(np.where(order > 0, order, None), dtype="Int64"),
        "star_id": table["star_id"].astype(str).to_numpy(),
        "start_utc": [_utc(t) for t in start],
        "end_utc": [_utc(t) for t in end],
        "start_local": [_local(t, zone) for t in start],
        "airmass_start": np.round(spread(plan.airmass_start, np.nan), 3),
        "airmass_end": np.round(spread(plan.airmass_end, np.nan), 3),
        "moon_sep_deg": np.round(spread(plan.moon_sep_deg, np.nan), 1),
        "exposure_s": exposure_s,
        "priority": priority,
        "reason": reason,
    })
    planned = result[reason == scheduled].sort_values("order")
    others = result[reason != scheduled].sort_values("priority", ascending=False, na_position="last",
                                                     kind="stable")
    return pd.concat([planned, others], ignore_index=True)


def _night_text(result, plan, site, airmass_max, moon_min_sep, overhead, scheduled) -> str:
    import numpy as np
    zone = site.zone
    ev = plan.events

    def hm(mjd):
        return _local(mjd, zone)[11:16] if np.isfinite(mjd) else "--:--"

    track = ev.track
    night = (track.mjd >= ev.sunset_mjd) & (track.mjd <= ev.sunrise_mjd)
    up = night & track.moon_up
    illum = (f"{track.moon_illumination[up].min():.2f}-{track.moon_illumination[up].max():.2f} "
             "illuminated while up at night" if up.any() else "below the horizon all night")
    lines = [
        f"Night plan for {site.name}, night of {ev.date.isoformat()} ({site.timezone}; times local "
        "unless marked UTC)",
        f"Sunset {hm(ev.sunset_mjd)}, {plan.twilight} twilight ends {hm(plan.window_start_mjd)}, "
        f"begins {hm(plan.window_end_mjd)}, sunrise {hm(ev.sunrise_mjd)}",
        f"Moon: rises {', '.join(hm(t) for t in ev.moonrise_mjd) or '-'}, sets "
        f"{', '.join(hm(t) for t in ev.moonset_mjd) or '-'}; {illum}",
        f"Limits: air mass <= {airmass_max:g} for the whole slot, Moon >= {moon_min_sep:g} deg while up; "
        f"overhead {overhead:g} s per target",
        "",
    ]
    planned = result[result["reason"] == scheduled]
    window_h = (plan.window_end_mjd - plan.window_start_mjd) * 24
    used_h = (planned["exposure_s"].sum() + overhead * len(planned)) / 3600.0
    lines.append(f"{len(planned)} targets planned, {used_h:.2f} h of {window_h:.2f} h of dark time:")
    lines.append(f"{'#':>3}  {'start':5}  {'UTC':8}  {'star_id':24} {'exp_s':>6}  {'airmass':>11}  "
                 f"{'moon':>5}  {'priority':>9}")
    for row in planned.itertuples(index=False):
        lines.append(f"{int(row.order):>3}  {row.start_local[11:16]:5}  {row.start_utc[11:19]:8}  "
                     f"{str(row.star_id)[:24]:24} {row.exposure_s:>6.0f}  "
                     f"{row.airmass_start:>5.2f}-{row.airmass_end:<5.2f}  {row.moon_sep_deg:>5.0f}  "
                     f"{row.priority:>9.3g}")
    others = result[result["reason"] != scheduled]
    if len(others):
        counts = others["reason"].value_counts()
        lines += ["", f"{len(others)} left out: " + ", ".join(f"{k} {v}" for k, v in counts.items())]
        for row in others.head(TEXT_LEFT_OUT_ROWS).itertuples(index=False):
            lines.append(f"     {str(row.star_id)[:24]:24} {row.reason}")
        if len(others) > TEXT_LEFT_OUT_ROWS:
            lines.append(f"     ... and {len(others) - TEXT_LEFT_OUT_ROWS} more (see the table)")
    lines += ["", CAUTION]
    return "\n".join(lines)


def _night_figure(plan, site, ra_deg, dec_deg, airmass_max):
    """Altitude against local time of the planned targets, their slots drawn thick."""
    import numpy as np
    from matplotlib import colormaps
    from matplotlib.dates import DateFormatter
    from matplotlib.figure import Figure

    from .observability import (altitude_deg, altitude_for_airmass, apparent_directions,
                                sun_moon_track, time_grid)
    from .offline import mjd_to_datetime

    zone = site.zone
    ev = plan.events
    grid = time_grid(ev.sunset_mjd, ev.sunrise_mjd, 300.0)
    track = sun_moon_track(site, grid)
    times = [mjd_to_datetime(t, zone) for t in grid]
    fig = Figure(figsize=(10, 5.5))
    ax = fig.add_subplot()
    ax.axvspan(mjd_to_datetime(plan.window_start_mjd, zone), mjd_to_datetime(plan.window_end_mjd, zone),
               color="0.92", zorder=0, label=f"{plan.twilight} night")
    ax.axhline(float(altitude_for_airmass(airmass_max)), color="0.4", ls=":",
               label=f"air mass {airmass_max:g}")
    ax.plot(times, track.moon_altitude_deg, color="goldenrod", ls="--", label="Moon")
    planned = np.flatnonzero(plan.order > 0)
    planned = planned[np.argsort(plan.order[planned])]
    directions = apparent_directions(ra_deg[planned], dec_deg[planned], 0.5 * (grid[0] + grid[-1]))
    altitudes = altitude_deg(directions, track.zenith)
    colours = colormaps["viridis"]
    for row, i in enumerate(planned):
        colour = colours(row / max(1, planned.size - 1))
        ax.plot(times, altitudes[row], color=colour, lw=0.7, alpha=0.5)
        inside = (grid >= plan.start_mjd[i]) & (grid <= plan.end_mjd[i])
        slot_times = [plan.start_mjd[i], *grid[inside], plan.end_mjd[i]]
        slot_alt = np.interp(slot_times, grid, altitudes[row])
        ax.plot([mjd_to_datetime(t, zone) for t in slot_times], slot_alt, color=colour, lw=3)
        ax.annotate(str(plan.order[i]), (mjd_to_datetime(plan.start_mjd[i], zone), slot_alt[0]),
                    fontsize=7, xytext=(0, 4), textcoords="offset points")
    ax.set_ylim(0, 90)
    ax.set_xlim(times[0], times[-1])
    ax.set_ylabel("altitude (deg)")
    ax.set_xlabel(f"local time ({site.timezone})")
    ax.xaxis.set_major_formatter(DateFormatter("%H:%M", tz=zone))
    ax.set_title(f"{site.name}, night of {ev.date.isoformat()}: {planned.size} targets planned "
                 "(thick: observing slot; planning estimate)", fontsize=10)
    ax.legend(loc="upper right", fontsize=8)
    fig.tight_layout()
    return fig


# ----------------------------------------------------------------------------- season

def season_command(
    ranked: Annotated[Path, typer.Argument(help=f"{_TABLE_HELP}; optional priority and status.")],
    site: SiteOption,
    semester: Annotated[Optional[str], typer.Option(
        "--semester", help="Semester such as 2027A (Feb-Jul) or 2027B (Aug-Jan).")] = None,
    start: Annotated[Optional[str], typer.Option(
        "--start", help="First night (local evening date YYYY-MM-DD), instead of --semester.")] = None,
    end: Annotated[Optional[str], typer.Option(
        "--end", help="Last night (local evening date YYYY-MM-DD), instead of --semester.")] = None,
    airmass_max: Annotated[float, typer.Option(
        "--airmass-max", min=1.0, help="Air-mass limit (Pickering 2002).")] = 2.0,
    moon_ok_illum: Annotated[float, typer.Option(
        "--moon-ok-illum", min=0.0, max=1.0,
        help="Count time with the Moon up when its illuminated fraction is at most this "
             "(0: the Moon must be below the horizon).")] = 0.0,
    semester_a_start: Annotated[str, typer.Option(
        "--semester-a-start", help="MM-DD on which A semesters begin (B ends the day before).")] = "02-01",
    semester_b_start: Annotated[str, typer.Option(
        "--semester-b-start", help="MM-DD on which B semesters begin (A ends the day before).")] = "08-01",
    priority_column: Annotated[str, typer.Option(
        "--priority-column", help="Column holding the priority, if any (orders the figure).")] = "priority",
    step_minutes: Annotated[float, typer.Option(
        "--step-minutes", min=1.0, max=60.0, help="Sampling step through each night.")] = 10.0,
    output: Annotated[Optional[Path], typer.Option(
        "--output", "-o", help="Season table (format by extension); also writes a heat map "
                               "<stem>.png beside it.")] = None,
) -> None:
    """Hours each target is observable per month of a semester, in dark time.

    Dark time: the Sun below -18 deg and the Moon below the horizon (or up with an
    illuminated fraction at most --moon-ok-illum).  A target counts the time its
    air mass is at most --airmass-max, sampled every --step-minutes through every
    night; nights belong to the month of their evening.  Columns: star_id,
    <YYYY-MM>_hours for each month, total_hours, reason (ok, status_not_ok or
    no_coordinates; skipped rows have empty hours).

    Example: prioritize season ranked.parquet --site paranal --semester 2027A -o season.csv

    Hours are planning estimates: weather, telescope limits and other programmes
    are not modelled; the observatory's own tools and rules prevail.
    """
    import numpy as np
    from ..catalog.status import OK
    from ..catalog.formats import companion_path
    with one_line_errors():
        from .sites import load_site

        the_site = load_site(site)
        if output is not None:
            from ..catalog.formats import check_output_path
            check_output_path(output, [ranked])        # a bad output fails before the season is computed
        import pandas as pd

        from .season import season_hours, semester_dates

        if semester is not None and (start or end):
            raise PrioritizeError("give either --semester or --start and --end, not both")
        if semester is not None:
            first, last = semester_dates(semester, semester_a_start, semester_b_start)
        elif start and end:
            first, last = _parse_date(start, "--start"), _parse_date(end, "--end")
        else:
            raise PrioritizeError("give --semester (e.g. 2027A) or both --start and --end")
        table, numbers, skip = _read_targets(ranked, None)
        keep = np.flatnonzero(skip == "")
        season = season_hours(the_site, first, last, numbers["ra_deg"][keep], numbers["dec_deg"][keep],
                              airmass_max=airmass_max, moon_ok_illumination=moon_ok_illum,
                              step_minutes=step_minutes)
        hours = np.full((len(table), len(season.months)), np.nan)
        hours[keep] = season.hours
        reason = np.where(skip == "", OK, skip).astype(object)
        reason[keep[~np.isfinite(season.hours).all(axis=1)]] = "no_coordinates"
        result = pd.DataFrame({"star_id": table["star_id"].astype(str).to_numpy()})
        for j, month in enumerate(season.months):
            result[f"{month}_hours"] = np.round(hours[:, j], 2)
        result["total_hours"] = np.round(np.where(np.isfinite(hours).all(axis=1), hours.sum(axis=1), np.nan), 2)
        result["reason"] = reason
        typer.echo(f"Season table for {the_site.name}, nights {first} to {last}, air mass <= {airmass_max:g}")
        typer.echo("dark hours per month: " + ", ".join(
            f"{m} {h:.1f} h" for m, h in zip(season.months, season.dark_hours)))
        typer.echo(f"{int((reason == OK).sum())} targets computed, {int((reason != OK).sum())} skipped")
        typer.echo(CAUTION)
        if output is not None:
            from ..catalog.io import provenance_metadata, write_table

            meta = provenance_metadata(None, command="season", input=str(ranked), site=the_site.name,
                                       first_night=first.isoformat(), last_night=last.isoformat(),
                                       airmass_max=airmass_max, moon_ok_illumination=moon_ok_illum,
                                       step_minutes=step_minutes,
                                       dark_hours={m: float(h) for m, h in zip(season.months,
                                                                               season.dark_hours)})
            write_table(result, output, meta)
            priority = _numeric(table, priority_column) if priority_column in table.columns else None
            figure = _season_figure(result, season, the_site, first, last, airmass_max, priority)
            _atomic_write(companion_path(output, ".png"), lambda p: figure.savefig(p, format="png", dpi=110))
            typer.echo(f"wrote {output}, {companion_path(output, '.png').name}")


def _season_figure(result, season, site, first, last, airmass_max, priority):
    import numpy as np
    from ..catalog.status import OK
    from matplotlib.figure import Figure

    computed = result[result["reason"] == OK]
    if priority is not None:
        order = np.argsort(-np.nan_to_num(priority[computed.index], nan=-np.inf), kind="stable")
        computed = computed.iloc[order]
    shown = computed.head(FIGURE_ROWS)
    columns = [f"{m}_hours" for m in season.months]
    values = np.vstack([season.dark_hours[None, :], shown[columns].to_numpy(dtype=float)]) \
        if len(shown) else season.dark_hours[None, :]
    labels = ["dark time"] + [str(s)[:20] for s in shown["star_id"]]
    fig = Figure(figsize=(1.6 + 0.9 * len(columns), 1.6 + 0.25 * len(labels)))
    ax = fig.add_subplot()
    image = ax.imshow(values, aspect="auto", cmap="magma", vmin=0)
    for (r, c), v in np.ndenumerate(values):
        ax.text(c, r, f"{v:.0f}", ha="center", va="center", fontsize=6,
                color="white" if v < 0.6 * np.nanmax(values) else "black")
    ax.set_xticks(range(len(season.months)), season.months, fontsize=8)
    ax.set_yticks(range(len(labels)), labels, fontsize=7)
    ax.axhline(0.5, color="white", lw=2)
    fig.colorbar(image, ax=ax, label="hours")
    ax.set_title(f"{site.name} {first} to {last}: dark hours at air mass <= {airmass_max:g}\n"
                 f"(first {len(shown)} targets; planning estimate)", fontsize=9)
    fig.tight_layout()
    return fig
