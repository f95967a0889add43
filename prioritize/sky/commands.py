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

FIGURE_ROWS = 40          # targets per page of the season heat map (pages follow until all are shown)
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


def _beside(output: Path, ending: str) -> Path:
    """``plan.csv`` -> ``plan<ending>`` (e.g. ``plan_log.txt``), in the same folder."""
    from ..catalog.formats import companion_path

    stem = companion_path(output, ".x")
    return stem.with_name(stem.name[:-2] + ending)


def _local(mjd: float, zone) -> str:
    import numpy as np
    from .offline import mjd_to_datetime

    return "" if not np.isfinite(mjd) else f"{mjd_to_datetime(mjd, zone):%Y-%m-%d %H:%M:%S %Z}"


def _utc(mjd: float) -> str:
    import numpy as np
    from .offline import mjd_to_datetime

    return "" if not np.isfinite(mjd) else f"{mjd_to_datetime(mjd):%Y-%m-%dT%H:%M:%S}"


# ----------------------------------------------------------------------------- night

class Solver(str, Enum):
    """Which scheduler plans the night."""

    auto = "auto"
    milp = "milp"
    greedy = "greedy"


def _ranked_inputs(table, priority_column, exposure_default, overhead_option, instrument_option):
    """Per-row priority, expected detections, exposure, overhead, S/N needed, R_C and the instrument.

    Expected detections when the S/N is reached: the ranked priority x the ranked time on
    target / the ranked fraction of the S/N reached (i.e. P(engulfed) x P(detect) x the
    cool-star factor of the ranking); without those columns, the priority itself.
    """
    import numpy as np

    from ..instruments import load_instrument

    n = len(table)
    priority = _numeric(table, priority_column)
    exposure_s = _numeric(table, "exposure_s") if "exposure_s" in table.columns else np.full(n, np.nan)
    exposure_s = np.where(np.isnan(exposure_s), exposure_default, exposure_s)
    instrument = None
    name = instrument_option
    if name is None and "instrument" in table.columns:
        names = {str(v) for v in table["instrument"].dropna() if str(v).strip()}
        name = next(iter(names)) if len(names) == 1 else None
    instrument_note = ""
    if name is not None:
        try:
            instrument = load_instrument(name)
        except PrioritizeError:
            if instrument_option is not None:
                raise
            instrument_note = (f"the table's instrument {name!r} is not a preset: exposures as given "
                               "(pass its TOML file with --instrument to recompute them per slot)")
    columns = set(table.columns)
    snr_needed = _numeric(table, "snr_needed") if "snr_needed" in columns else np.full(n, np.nan)
    r_c = _numeric(table, "r_c_mag") if "r_c_mag" in columns else np.full(n, np.nan)
    if overhead_option is not None:
        overhead = np.full(n, float(overhead_option))
        overhead_source = f"--overhead {overhead_option:g} s"
    elif "overhead_s" in columns and np.isfinite(_numeric(table, "overhead_s")).any():
        fallback = (instrument.readout_overhead_s + instrument.acquisition_overhead_s) if instrument else 300.0
        overhead = np.where(np.isfinite(_numeric(table, "overhead_s")), _numeric(table, "overhead_s"), fallback)
        overhead_source = "the table's overhead_s"
    elif instrument is not None:
        overhead = np.full(n, instrument.readout_overhead_s + instrument.acquisition_overhead_s)
        overhead_source = f"{instrument.name} readout + acquisition"
    else:
        overhead = np.full(n, 300.0)
        overhead_source = "300 s (no overhead_s column, no instrument)"
    detections = priority.copy()
    if priority_column == "priority" and {"time_on_target_s", "snr_at_exposure"} <= columns:
        fraction = np.clip((_numeric(table, "snr_at_exposure") / snr_needed) ** 2, 0.0, 1.0)
        per_visit = priority * _numeric(table, "time_on_target_s") / 3600.0
        with np.errstate(divide="ignore", invalid="ignore"):
            converted = np.where(fraction > 0, per_visit / fraction, 0.0)
        detections = np.where(np.isfinite(converted), converted, detections)
    return dict(priority=priority, detections=detections, exposure_s=exposure_s, overhead_s=overhead,
                overhead_source=overhead_source, snr_needed=snr_needed, r_c_mag=r_c, instrument=instrument,
                instrument_note=instrument_note)


def night_command(
    ranked: Annotated[Path, typer.Argument(
        help=f"{_TABLE_HELP} and a priority column; optional exposure_s, overhead_s, snr_needed, "
             "r_c_mag, time_on_target_s, snr_at_exposure, instrument and status (a ranked table has them).")],
    site: SiteOption,
    date: Annotated[str, typer.Option("--date", help="Local date of the (first) evening, YYYY-MM-DD.")],
    nights: Annotated[int, typer.Option(
        "--nights", min=1, max=366, help="Number of consecutive nights to plan.")] = 1,
    end: Annotated[Optional[str], typer.Option(
        "--end", help="Last evening (YYYY-MM-DD) of a range, instead of --nights.")] = None,
    airmass_max: Annotated[float, typer.Option(
        "--airmass-max", min=1.0, help="Air-mass limit for the whole slot (Pickering 2002).")] = 2.0,
    moon_min_sep: Annotated[float, typer.Option(
        "--moon-min-sep", min=0.0, max=180.0,
        help="Minimum Moon separation in degrees, applied while the Moon is up.")] = 30.0,
    moon_max_illum: Annotated[float, typer.Option(
        "--moon-max-illum", min=0.0, max=1.0,
        help="No observing while the Moon is up and more illuminated than this (1: no limit).")] = 1.0,
    overhead: Annotated[Optional[float], typer.Option(
        "--overhead", min=0.0, help="Slew, acquisition and readout per target, seconds "
                                    "(default: the table's overhead_s, else the instrument's).")] = None,
    exposure: Annotated[float, typer.Option(
        "--exposure", min=1.0, help="Exposure in seconds for rows without exposure_s.")] = 600.0,
    instrument: Annotated[Optional[str], typer.Option(
        "--instrument", help="Instrument preset or TOML file for the exposure of each slot "
                             "(default: the table's instrument column).")] = None,
    twilight: Annotated[Twilight, typer.Option(
        "--twilight", help="Twilight that bounds the night (nautical: Sun below -12 deg, "
                           "astronomical: -18 deg).")] = Twilight.nautical,
    solver: Annotated[Solver, typer.Option(
        "--solver", help="auto: exact (MILP) where the list fits, else greedy; or force one.")] = Solver.auto,
    time_limit: Annotated[float, typer.Option(
        "--time-limit", min=1.0, help="Seconds the exact solver may take per night.")] = 60.0,
    include_zero_priority: Annotated[bool, typer.Option(
        "--include-zero-priority", help="Also plan stars of priority 0 in time nothing else can use.")] = False,
    priority_column: Annotated[str, typer.Option(
        "--priority-column", help="Column holding the priority (larger first).")] = "priority",
    output: Annotated[Optional[Path], typer.Option(
        "--output", "-o", help="Plan table (format by extension: .csv, .ecsv, ...); also writes "
                               "<stem>.txt (summary), <stem>_log.txt (telescope log list) and "
                               "<stem>.png (figure; <stem>_<date>.png per night for several).")] = None,
) -> None:
    """Plan one or several nights for the largest expected number of detections.

    The plan maximises the sum over planned stars of their expected detections x
    P(the exposure reaches its S/N in that slot).  Each slot keeps the star within
    the air-mass limit from start to end and, while the Moon is up, the Moon limits;
    its exposure is recomputed for the slot's air mass (the site's extinction at
    6708 A) and sky (Moon: Krisciunas & Schaefer 1991).  The exact solver (a
    time-slot MILP, scipy/HiGHS) runs where the list fits; greedy by priority plus
    swaps otherwise or when it does better within the time limit.  Stars of
    priority 0 are left out (zero_priority) unless --include-zero-priority.  Over
    several nights a star is planned until its S/N is reached; leftovers carry over.

    The table lists every input row: the planned visits (night, order 1, 2, ...),
    then the others with their reason (status_not_ok, no_coordinates, no_priority,
    zero_priority, invalid_exposure, longer_than_dark_window,
    never_above_airmass_limit, too_close_to_moon, no_time_left).

    Example: prioritize night ranked.parquet --site mauna-kea --date 2027-03-15 --nights 3 -o plan.ecsv

    Times and exposures are planning estimates; the observatory's own tools, rules
    and safety practice prevail.
    """
    import numpy as np
    from ..catalog.formats import companion_path
    with one_line_errors():
        from .sites import load_site

        the_site = load_site(site)
        first = _parse_date(date, "--date")
        last = _parse_date(end, "--end") if end else None
        if last is not None and last < first:
            raise PrioritizeError(f"--end {last} is before --date {first}")
        if last is not None and (last - first).days >= 366:
            raise PrioritizeError(f"{(last - first).days + 1} nights asked for; plan at most 366 at a time")
        if output is not None:
            from ..catalog.formats import check_output_path

            check_output_path(output, [ranked])        # a bad output fails before the plan is made
        from .nights import night_dates, plan_nights
        from .schedule import SCHEDULED, STATUS_NOT_OK

        dates = night_dates(first, nights, last)
        table, numbers, skip = _read_targets(ranked, priority_column)
        inputs = _ranked_inputs(table, priority_column, exposure, overhead, instrument)
        keep = np.flatnonzero(skip == "")
        pick = {k: (v[keep] if isinstance(v, np.ndarray) else v) for k, v in inputs.items()}
        result = plan_nights(the_site, dates, numbers["ra_deg"][keep], numbers["dec_deg"][keep],
                             pick["priority"], pick["exposure_s"], detections=pick["detections"],
                             snr_needed=pick["snr_needed"], r_c_mag=pick["r_c_mag"],
                             instrument=pick["instrument"], overhead_s=pick["overhead_s"],
                             airmass_max=airmass_max, moon_min_sep_deg=moon_min_sep,
                             moon_max_illumination=moon_max_illum, twilight=twilight.value,
                             solver=solver.value, time_limit_s=time_limit,
                             include_zero_priority=include_zero_priority)
        plan_table = _night_table(table, numbers, inputs, keep, result, the_site, SCHEDULED, STATUS_NOT_OK)
        settings = dict(airmass_max=airmass_max, moon_min_sep=moon_min_sep, moon_max_illum=moon_max_illum,
                        overhead_source=inputs["overhead_source"],
                        instrument=inputs["instrument"].name if inputs["instrument"] else None,
                        instrument_note=inputs["instrument_note"])
        text = _night_text(plan_table, result, the_site, settings, SCHEDULED)
        typer.echo(text)
        if output is not None:
            from ..catalog.io import provenance_metadata, write_table

            meta = provenance_metadata(None, command="night", input=str(ranked), site=the_site.name,
                                       nights=[d.isoformat() for d in result.dates], airmass_max=airmass_max,
                                       moon_min_sep_deg=moon_min_sep, moon_max_illumination=moon_max_illum,
                                       overhead=inputs["overhead_source"], default_exposure_s=exposure,
                                       twilight=twilight.value, solver=[p.solver for p in result.plans],
                                       objective=[p.objective for p in result.plans],
                                       extinction_6708=the_site.extinction_6708)
            write_table(plan_table, output, meta)
            written = [output.name]
            _atomic_write(companion_path(output, ".txt"), lambda p: p.write_text(text + "\n", encoding="utf-8"))
            written.append(companion_path(output, ".txt").name)
            log_path = _beside(output, "_log.txt")
            log = _telescope_log(plan_table, the_site, SCHEDULED)
            _atomic_write(log_path, lambda p: p.write_text(log, encoding="utf-8"))
            written.append(log_path.name)
            for k, plan in enumerate(result.plans):
                rows = keep[result.rows[k]]
                figure = _night_figure(plan, the_site, numbers["ra_deg"][rows], numbers["dec_deg"][rows],
                                       table["star_id"].astype(str).to_numpy()[rows],
                                       inputs["priority"][rows], airmass_max)
                suffix = ".png" if len(result.plans) == 1 else f"_{result.dates[k].isoformat()}.png"
                _atomic_write(_beside(output, suffix), lambda p, f=figure: f.savefig(p, format="png", dpi=110))
                written.append(_beside(output, suffix).name)
            typer.echo("wrote " + ", ".join(written))


def _sexagesimal(ra_deg, dec_deg):
    """RA as hh:mm:ss.ss and Dec as +dd:mm:ss.s (ICRS), empty where unknown."""
    import astropy.units as u
    import numpy as np
    from astropy.coordinates import Angle

    ra = np.asarray(ra_deg, dtype=float)
    dec = np.asarray(dec_deg, dtype=float)
    good = np.isfinite(ra) & np.isfinite(dec) & (ra >= 0) & (ra < 360) & (np.abs(dec) <= 90)
    ra_text = np.full(ra.size, "", dtype=object)
    dec_text = np.full(ra.size, "", dtype=object)
    if good.any():
        ra_text[good] = Angle(ra[good] * u.deg).to_string(unit=u.hourangle, sep=":", precision=2, pad=True)
        dec_text[good] = Angle(dec[good] * u.deg).to_string(unit=u.deg, sep=":", precision=1, pad=True,
                                                             alwayssign=True)
    return ra_text, dec_text


def _night_table(table, numbers, inputs, keep, result, site, scheduled, status_not_ok):
    """One row per planned visit (night, order), then every row never planned, with its reason."""
    import numpy as np

    import pandas as pd

    zone = site.zone
    ids = table["star_id"].astype(str).to_numpy()
    ra_text, dec_text = _sexagesimal(numbers["ra_deg"], numbers["dec_deg"])
    visits = []
    last_reason = np.full(len(table), status_not_ok, dtype=object)
    for date, plan, rows in zip(result.dates, result.plans, result.rows):
        where = keep[rows]
        last_reason[where] = plan.reason
        planned = np.flatnonzero(plan.order > 0)
        planned = planned[np.argsort(plan.order[planned])]
        for j in planned:
            i = where[j]
            visits.append({
                "night": date.isoformat(), "order": int(plan.order[j]), "star_id": ids[i],
                "ra_icrs": ra_text[i], "dec_icrs": dec_text[i],
                "start_utc": _utc(plan.start_mjd[j]), "end_utc": _utc(plan.end_mjd[j]),
                "start_local": _local(plan.start_mjd[j], zone),
                "airmass_start": round(float(plan.airmass_start[j]), 3),
                "airmass_end": round(float(plan.airmass_end[j]), 3),
                "airmass_mid": round(float(plan.airmass_mid[j]), 3),
                "moon_sep_deg": round(float(plan.moon_sep_deg[j]), 1),
                "sky_mag_6708": round(float(plan.sky_mag[j]), 2),
                "exposure_s": round(float(plan.exposure_s[j]), 1),
                "overhead_s": float(plan.overhead_s[j]),
                "snr_expected": round(float(plan.snr_expected[j]), 1),
                "snr_needed": float(inputs["snr_needed"][i]),
                "p_snr": round(float(plan.p_snr[j]), 4),
                "expected_detections": float(plan.value[j]),
                "priority": float(inputs["priority"][i]),
                "solver": plan.solver, "reason": scheduled})
    planned_ever = {v["star_id"] for v in visits}
    others = []
    for i in range(len(table)):
        if ids[i] in planned_ever:
            continue
        others.append({"night": "", "order": None, "star_id": ids[i], "ra_icrs": ra_text[i],
                       "dec_icrs": dec_text[i], "exposure_s": float(inputs["exposure_s"][i]),
                       "overhead_s": float(inputs["overhead_s"][i]),
                       "snr_needed": float(inputs["snr_needed"][i]),
                       "priority": float(inputs["priority"][i]), "reason": last_reason[i]})
    columns = ["night", "order", "star_id", "ra_icrs", "dec_icrs", "start_utc", "end_utc", "start_local",
               "airmass_start", "airmass_end", "airmass_mid", "moon_sep_deg", "sky_mag_6708", "exposure_s",
               "overhead_s", "snr_expected", "snr_needed", "p_snr", "expected_detections", "priority",
               "solver", "reason"]
    rest = pd.DataFrame(others, columns=columns)
    rest = rest.sort_values("priority", ascending=False, na_position="last", kind="stable")
    out = pd.concat([pd.DataFrame(visits, columns=columns), rest], ignore_index=True)
    out["order"] = pd.array(out["order"], dtype="Int64")
    for column in ("night", "star_id", "ra_icrs", "dec_icrs", "start_utc", "end_utc", "start_local",
                   "solver", "reason"):
        out[column] = out[column].fillna("").astype(str)
    return out


def _night_text(plan_table, result, site, settings, scheduled) -> str:
    import numpy as np

    zone = site.zone

    def hm(mjd):
        return _local(mjd, zone)[11:16] if np.isfinite(mjd) else "--:--"

    lines = [f"Night plan for {site.name} ({site.timezone}; times local unless marked UTC), "
             f"{len(result.plans)} night(s)",
             f"Limits: air mass <= {settings['airmass_max']:g} from start to end of each slot, Moon >= "
             f"{settings['moon_min_sep']:g} deg while up"
             + (f" and no observing with the Moon up above {settings['moon_max_illum']:g} illuminated"
                if settings["moon_max_illum"] < 1 else "")
             + f"; overheads from {settings['overhead_source']}",
             f"Exposures for each slot: {settings['instrument'] or 'as given (no instrument known)'}, "
             f"extinction {site.extinction_6708:g} mag/air mass at 6708 A ({site.extinction_source}); "
             "Moon sky from Krisciunas & Schaefer 1991"]
    if settings["instrument_note"]:
        lines.append(f"Note: {settings['instrument_note']}")
    for date, plan in zip(result.dates, result.plans):
        ev = plan.events
        track = ev.track
        night = (track.mjd >= ev.sunset_mjd) & (track.mjd <= ev.sunrise_mjd)
        up = night & track.moon_up
        illum = (f"{track.moon_illumination[up].min():.2f}-{track.moon_illumination[up].max():.2f} "
                 "illuminated while up at night" if up.any() else "below the horizon all night")
        lines += ["", f"== night of {date.isoformat()}",
                  f"Sunset {hm(ev.sunset_mjd)}, {plan.twilight} twilight ends {hm(plan.window_start_mjd)}, "
                  f"begins {hm(plan.window_end_mjd)}, sunrise {hm(ev.sunrise_mjd)}",
                  f"Moon: rises {', '.join(hm(t) for t in ev.moonrise_mjd) or '-'}, sets "
                  f"{', '.join(hm(t) for t in ev.moonset_mjd) or '-'}; {illum}"]
        for run in plan.runs:
            gap = f", gap {run.gap:.2%}" if np.isfinite(run.gap) else ""
            lines.append(f"  {run.solver}: {run.status}{gap}, expected detections {run.objective:.4g}, "
                         f"{run.planned} planned, median air mass {run.median_airmass:.3f}, "
                         f"{run.seconds:.1f} s" + (f" ({run.note})" if run.note else ""))
        lines.append(f"  plan from: {plan.solver}")
        rows = plan_table[(plan_table["night"] == date.isoformat()) & (plan_table["reason"] == scheduled)]
        window_h = (plan.window_end_mjd - plan.window_start_mjd) * 24
        used_h = np.nansum(plan.duration_s) / 3600.0
        lines.append(f"{len(rows)} targets planned, {used_h:.2f} h of {window_h:.2f} h of dark time:")
        lines.append(f"{'#':>3}  {'start':5}  {'UTC':8}  {'star_id':18} {'exp_s':>6} {'S/N':>5}  "
                     f"{'airmass':>11}  {'moon':>4}  {'priority':>9}")
        for row in rows.itertuples(index=False):
            lines.append(f"{int(row.order):>3}  {row.start_local[11:16]:5}  {row.start_utc[11:19]:8}  "
                         f"{str(row.star_id)[:18]:18} {row.exposure_s:>6.0f} {row.snr_expected:>5.0f}  "
                         f"{row.airmass_start:>5.2f}-{row.airmass_end:<5.2f}  "
                         f"{'' if not np.isfinite(row.moon_sep_deg) else f'{row.moon_sep_deg:.0f}':>4}  "
                         f"{row.priority:>9.3g}")
    others = plan_table[plan_table["reason"] != scheduled]
    if len(others):
        counts = others["reason"].value_counts()
        lines += ["", f"{len(others)} never planned: " + ", ".join(f"{k} {v}" for k, v in counts.items())]
        for row in others.head(TEXT_LEFT_OUT_ROWS).itertuples(index=False):
            lines.append(f"     {str(row.star_id)[:24]:24} {row.reason}")
        if len(others) > TEXT_LEFT_OUT_ROWS:
            lines.append(f"     ... and {len(others) - TEXT_LEFT_OUT_ROWS} more (see the table)")
    lines += ["", CAUTION]
    return "\n".join(lines)


def _telescope_log(plan_table, site, scheduled) -> str:
    """Plain list for the night log: one line per planned visit, UT order, J2000/ICRS coordinates."""
    import numpy as np

    rows = plan_table[plan_table["reason"] == scheduled]
    lines = [f"# {site.name}: planned targets (planning estimate; coordinates ICRS ~ J2000, "
             "catalog epoch, no proper motion)",
             f"# {'night':10} {'#':>3} {'UT start':8} {'star_id':20} {'RA':>11} {'Dec':>11} {'exp_s':>6} "
             f"{'airmass':>7} {'S/N':>5}"]
    for row in rows.itertuples(index=False):
        snr = "" if not np.isfinite(row.snr_expected) else f"{row.snr_expected:.0f}"
        lines.append(f"{row.night:12} {int(row.order):>3} {row.start_utc[11:19]:8} {str(row.star_id)[:20]:20} "
                     f"{row.ra_icrs:>11} {row.dec_icrs:>11} {row.exposure_s:>6.0f} {row.airmass_start:>7.2f} "
                     f"{snr:>5}")
    return "\n".join(lines) + "\n"


MAX_CURVES_PER_PANEL = 12   # altitude curves per panel; longer plans are split into panels by time


def _night_figure(plan, site, ra_deg, dec_deg, star_ids, priority, airmass_max):
    """Altitude against UT (local time on top, air mass on the right) of the planned stars.

    Panels hold at most MAX_CURVES_PER_PANEL consecutive slots each; every slot is
    drawn thick over its star's altitude curve, coloured by priority (cividis), and
    labelled with the star's identifier where the label does not collide with another.
    Twilight is shaded, the Moon's altitude dashed.
    """
    import numpy as np

    import datetime as _dt

    from matplotlib import colormaps
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.cm import ScalarMappable
    from matplotlib.colors import Normalize
    from matplotlib.dates import AutoDateLocator, DateFormatter, date2num
    from matplotlib.figure import Figure

    from .observability import (altitude_deg, altitude_for_airmass, apparent_directions,
                                sun_moon_track, time_grid)
    from .offline import mjd_to_datetime

    ev = plan.events
    grid = time_grid(ev.sunset_mjd - 0.01, ev.sunrise_mjd + 0.01, 300.0)
    track = sun_moon_track(site, grid)
    utc = _dt.timezone.utc
    x = date2num([mjd_to_datetime(t, utc) for t in grid])
    planned = np.flatnonzero(plan.order > 0)
    planned = planned[np.argsort(plan.order[planned])]
    chunks = [planned[k:k + MAX_CURVES_PER_PANEL] for k in range(0, planned.size, MAX_CURVES_PER_PANEL)] or [planned]
    fig = Figure(figsize=(11, 3.4 * len(chunks) + 1.2), layout="constrained")
    FigureCanvasAgg(fig)
    prio = priority[planned] if planned.size else np.array([0.0, 1.0])
    finite = prio[np.isfinite(prio)]
    norm = Normalize(vmin=float(finite.min()) if finite.size else 0.0,
                     vmax=float(finite.max()) if finite.size and finite.max() > finite.min() else
                     (float(finite.min()) + 1e-9 if finite.size else 1.0))
    cmap = colormaps["cividis"]
    altitudes = (altitude_deg(apparent_directions(ra_deg[planned], dec_deg[planned], 0.5 * (grid[0] + grid[-1])),
                              track.zenith) if planned.size else np.zeros((0, grid.size)))
    row_of = {i: r for r, i in enumerate(planned)}
    offset_days = mjd_to_datetime(0.5 * (grid[0] + grid[-1]), site.zone).utcoffset().total_seconds() / 86400.0
    limit_alt = float(altitude_for_airmass(airmass_max))
    axes = fig.subplots(len(chunks), 1, squeeze=False)[:, 0]
    renderer = fig.canvas.get_renderer()

    def to_x(mjd):
        return date2num(mjd_to_datetime(mjd, utc))

    for ax, chunk in zip(axes, chunks):
        ax.axvspan(to_x(ev.sunset_mjd), to_x(plan.window_start_mjd), color="0.85", zorder=0)
        ax.axvspan(to_x(plan.window_end_mjd), to_x(ev.sunrise_mjd), color="0.85", zorder=0,
                   label=f"twilight (to {plan.twilight})")
        ax.axhline(limit_alt, color="0.35", ls=":", lw=1, label=f"air mass {airmass_max:g}")
        up = track.moon_altitude_deg > 0
        if up.any():
            ax.plot(x, np.where(up, track.moon_altitude_deg, np.nan), color="0.3", ls="--", lw=1,
                    label=f"Moon ({np.nanmean(track.moon_illumination[up]):.0%} lit)")
        if chunk.size:
            lo = max(plan.start_mjd[chunk].min() - 0.5 / 24, grid[0])
            hi = min(plan.end_mjd[chunk].max() + 0.5 / 24, grid[-1])
            ax.set_xlim(to_x(lo), to_x(hi))
        else:
            ax.set_xlim(x[0], x[-1])
        ax.set_ylim(10, 90)
        ax.set_autoscale_on(False)
        placed = []
        for i in chunk:
            r = row_of[i]
            colour = cmap(norm(priority[i])) if np.isfinite(priority[i]) else "0.5"
            ax.plot(x, altitudes[r], color=colour, lw=0.8, alpha=0.6)
            inside = (grid >= plan.start_mjd[i]) & (grid <= plan.end_mjd[i])
            slot_t = np.array([plan.start_mjd[i], *grid[inside], plan.end_mjd[i]])
            slot_alt = np.interp(slot_t, grid, altitudes[r])
            ax.plot([to_x(t) for t in slot_t], slot_alt, color=colour, lw=3.5, solid_capstyle="butt")
            middle = 0.5 * (plan.start_mjd[i] + plan.end_mjd[i])
            label = ax.annotate(str(star_ids[i]), (to_x(middle), float(np.interp(middle, grid, altitudes[r]))),
                                xytext=(0, 5), textcoords="offset points", ha="center", fontsize=7)
            box = label.get_window_extent(renderer)
            if any(box.overlaps(other) for other in placed):
                label.remove()
            else:
                placed.append(box)
        ax.set_ylabel("altitude (deg)")
        ax.xaxis.set_major_locator(AutoDateLocator(tz=utc, minticks=4, maxticks=9))
        ax.xaxis.set_major_formatter(DateFormatter("%H:%M", tz=utc))
        ax.set_xlabel("UT", fontsize=8)
        top = ax.secondary_xaxis("top", functions=(lambda v: v + offset_days, lambda v: v - offset_days))
        top.xaxis.set_major_locator(AutoDateLocator(tz=utc, minticks=4, maxticks=9))
        top.xaxis.set_major_formatter(DateFormatter("%H:%M", tz=utc))
        top.set_xlabel(f"local time ({site.timezone})", fontsize=8)
        right = ax.twinx()
        right.set_ylim(ax.get_ylim())
        ticks = [1.0, 1.2, 1.5, 2.0, 3.0]
        right.set_yticks([float(altitude_for_airmass(t)) for t in ticks], [f"{t:g}" for t in ticks])
        right.set_ylabel("air mass")
        if ax is axes[0]:
            ax.legend(loc="upper left", fontsize=7, framealpha=0.85)
    mappable = fig.colorbar(ScalarMappable(norm, cmap), ax=list(axes), location="bottom",
                            fraction=0.03 if len(chunks) > 1 else 0.06, aspect=50)
    mappable.set_label("priority (expected detections per hour)")
    fig.suptitle(f"{site.name}, night of {ev.date.isoformat()}: {planned.size} planned ({plan.solver}; "
                 "thick: slot; planning estimate)", fontsize=10)
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
    figure_rows: Annotated[int, typer.Option(
        "--figure-rows", min=0, help="Targets per heat-map page (0: all on one page); pages "
                                     "<stem>.png, <stem>_2.png, ... until every target is shown.")] = FIGURE_ROWS,
    output: Annotated[Optional[Path], typer.Option(
        "--output", "-o", help="Season table (format by extension); also writes a heat map "
                               "<stem>.png beside it.")] = None,
) -> None:
    """Hours each target is observable per month of a semester, in dark time.

    Dark time: the Sun below -18 deg and the Moon below the horizon (or up with an
    illuminated fraction at most --moon-ok-illum).  A target counts the time its
    air mass is at most --airmass-max, sampled every --step-minutes through every
    night; nights belong to the month of their evening.  Columns: star_id,
    priority (when the table has one), <YYYY-MM>_hours for each month, total_hours,
    reason (ok, status_not_ok or no_coordinates; skipped rows have empty hours).
    Rows are ordered by priority (highest first), then the rest in input order; the
    heat map shows every computed target in that order, --figure-rows per page.

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
        has_priority = priority_column in table.columns
        if has_priority:
            result["priority"] = _numeric(table, priority_column)
        for j, month in enumerate(season.months):
            result[f"{month}_hours"] = np.round(hours[:, j], 2)
        result["total_hours"] = np.round(np.where(np.isfinite(hours).all(axis=1), hours.sum(axis=1), np.nan), 2)
        result["reason"] = reason
        if has_priority:
            result = result.sort_values("priority", ascending=False, na_position="last", kind="stable",
                                        ignore_index=True)
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
            computed = result[result["reason"] == OK]
            size = figure_rows if figure_rows > 0 else max(len(computed), 1)
            pages = [computed.iloc[k:k + size] for k in range(0, max(len(computed), 1), size)]
            written = []
            for number, page in enumerate(pages, start=1):
                figure = _season_figure(page, season, the_site, first, last, airmass_max, has_priority,
                                        number, len(pages))
                path = companion_path(output, ".png") if number == 1 else _beside(output, f"_{number}.png")
                _atomic_write(path, lambda p, f=figure: f.savefig(p, format="png", dpi=110))
                written.append(path.name)
            typer.echo(f"wrote {output}, {', '.join(written)}")


def _season_figure(shown, season, site, first, last, airmass_max, has_priority, page, pages):
    """Heat map of one page of targets (rows in priority order), with the dark hours on top."""
    import numpy as np

    from matplotlib.figure import Figure

    columns = [f"{m}_hours" for m in season.months]
    values = np.vstack([season.dark_hours[None, :], shown[columns].to_numpy(dtype=float)]) \
        if len(shown) else season.dark_hours[None, :]
    if has_priority:
        labels = ["dark time"] + [f"{str(s)[:18]}  {p:.3g}" if np.isfinite(p) else f"{str(s)[:18]}  -"
                                  for s, p in zip(shown["star_id"], shown["priority"])]
    else:
        labels = ["dark time"] + [str(s)[:20] for s in shown["star_id"]]
    fig = Figure(figsize=(2.4 + 0.9 * len(columns), 1.6 + 0.22 * len(labels)), layout="constrained")
    ax = fig.add_subplot()
    image = ax.imshow(values, aspect="auto", cmap="magma", vmin=0)
    for (r, c), v in np.ndenumerate(values):
        ax.text(c, r, f"{v:.0f}", ha="center", va="center", fontsize=6,
                color="white" if v < 0.6 * np.nanmax(values) else "black")
    ax.set_xticks(range(len(season.months)), season.months, fontsize=8)
    ax.set_yticks(range(len(labels)), labels, fontsize=7, family="monospace")
    ax.axhline(0.5, color="white", lw=2)
    fig.colorbar(image, ax=ax, label="hours")
    order = "by priority (shown beside each name)" if has_priority else "in table order"
    ax.set_title(f"{site.name} {first} to {last}: dark hours at air mass <= {airmass_max:g}\n"
                 f"targets {order}; page {page} of {pages}; planning estimate", fontsize=9)
    return fig
