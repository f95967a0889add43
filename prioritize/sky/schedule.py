"""The night plan: which target to observe when, and why the others are left out.

Method
------
1. The dark window runs from the end of evening twilight to the start of morning
   twilight (nautical by default: bright stars at 6708 Å tolerate the sky of
   nautical twilight).  It is cut into steps of ``step_s`` seconds (60 s).
2. A slot starting at step s holds the target's overhead and then its exposure,
   rounded up to whole steps.  The exposure is recomputed for the slot
   (:mod:`prioritize.sky.slots`: the air mass with the site's extinction at 6708 Å,
   the Moon's sky by Krisciunas & Schaefer 1991) where the S/N needed and the
   magnitude are known; otherwise it is the given one.  A start is *feasible* when
   at every grid time from its start to its end (both included) the air mass is
   ≤ the limit and, whenever the Moon is up, the Moon is at least the minimum
   separation away and no brighter than the illumination limit.
3. The slot's value is the target's expected detections × P(the slot reaches its
   S/N) = min(1, (S/N reached / S/N needed)²).  The plan maximises the summed value.
4. Exact solver (:mod:`prioritize.sky.milp`): the time-slot assignment as a MILP
   solved by HiGHS within a time limit; for long lists its start grid is coarsened
   (to 8 steps at most) so that it keeps at most ``milp_max_variables`` variables,
   and beyond that it works on the targets with the most detections per slot
   minute plus those of the greedy plan.  The greedy plan's starts are always
   candidates, so its optimum is never below the greedy's.
   A bonus of at most 0.1% of the value breaks ties towards low air mass.
5. Greedy (always run; the plan when the MILP does not run or does worse): targets
   in decreasing priority (ties: input order) each take the earliest feasible slot
   not overlapping the slots already taken; then adjacent slots are swapped when
   both stay feasible, the value does not fall, the sum of the two targets' mean
   air masses falls, and no target left out for lack of time ranks between the two.

Guarantees (checked by the tests):

- no two slots overlap, and every slot lies inside the dark window;
- every planned target is within the limits for its whole slot;
- the exact solver's objective equals the optimum of exhaustive search on small
  problems, and is at least the greedy's;
- greedy plans: a target is left out for ``no_time_left`` only if, in the final plan, no
  feasible slot is free of the targets ranked above it: no lower-priority
  target takes time that a higher-priority one could have used; in
  particular no left-out target fits in any gap of the plan.

Reason codes for targets left out: ``no_coordinates``, ``no_priority``,
``invalid_exposure``, ``longer_than_dark_window``, ``never_above_airmass_limit``,
``too_close_to_moon`` (separation or illumination), ``zero_priority`` (unless
allowed), ``no_time_left`` (``status_not_ok`` is added by the
command for rows the ranking did not compute).  Planned targets carry
``scheduled``.

All times are planning estimates; the observatory's own tools and rules prevail.
"""

from __future__ import annotations

import datetime as dt
import time
from dataclasses import dataclass

import numpy as np

from ..errors import PrioritizeError
from .milp import solve_slot_milp
from .moonlight import phase_angle_from_illumination, sky_mag_6708
from .observability import (
    MOON_HORIZON_ALTITUDE_DEG,
    NightEvents,
    airmass_pickering,
    altitude_deg,
    altitude_for_airmass,
    apparent_directions,
    night_events,
    separation_deg,
    sun_moon_track,
    time_grid,
)
from .sites import Site
from .slots import at_fractional_step, slot_exposures

SCHEDULED = "scheduled"
NO_COORDINATES = "no_coordinates"
NO_PRIORITY = "no_priority"
INVALID_EXPOSURE = "invalid_exposure"
LONGER_THAN_WINDOW = "longer_than_dark_window"
NEVER_ABOVE_AIRMASS_LIMIT = "never_above_airmass_limit"
TOO_CLOSE_TO_MOON = "too_close_to_moon"
NO_TIME_LEFT = "no_time_left"
ZERO_PRIORITY = "zero_priority"
STATUS_NOT_OK = "status_not_ok"
SOLVERS = ("auto", "milp", "greedy")
MAX_AUTO_STRIDE = 8       # coarsest start grid of the MILP (steps); longer lists are cut to a subset
TIE_BONUS = 1e-3          # ties broken towards low air mass: at most 0.1% of the objective
ZERO_BONUS = 1e-6         # a zero-priority target (when allowed) is worth 1e-6 of the smallest value

_TARGET_CHUNK = 2048      # targets per block when building the (targets x steps) matrices


# ---------------------------------------------------------------------------
# scheduling on a grid (pure numpy)
# ---------------------------------------------------------------------------

def feasible_starts(ok, duration_steps) -> np.ndarray:
    """Which slot starts keep each target within its limits for its whole slot.

    A slot of d steps starting at step s covers grid times s, s+1, ..., s+d; it is
    feasible when ``ok`` is True at all of them (and s + d is on the grid).

    Parameters
    ----------
    ok : array_like of bool
        Shape ``(n, m)``: target i is within its limits at grid time k.
    duration_steps : array_like of int
        Slot length in steps, at least 1: one per target ``(n,)``, or one per target and
        start ``(n, m)`` when the exposure depends on the slot.

    Returns
    -------
    numpy.ndarray of bool
        Shape ``(n, m)``.
    """
    ok = np.asarray(ok, dtype=bool)
    n, m = ok.shape
    d = _per_start(duration_steps, n, m)
    bad_before = np.zeros((n, m + 1), dtype=np.int32)
    np.cumsum(~ok, axis=1, out=bad_before[:, 1:])
    start = np.arange(m)[None, :]
    end = start + d + 1
    inside = end <= m
    bad = np.take_along_axis(bad_before, np.minimum(end, m), axis=1) - bad_before[:, :m]
    return inside & (bad == 0)


def _per_start(duration_steps, n: int, m: int) -> np.ndarray:
    """Slot lengths as an ``(n, m)`` integer array (a per-target ``(n,)`` array is repeated)."""
    d = np.asarray(duration_steps, dtype=np.int64)
    return np.broadcast_to(d.reshape(n, 1) if d.ndim == 1 else d, (n, m))


def greedy_schedule(start_ok, duration_steps, priority) -> np.ndarray:
    """Place targets in decreasing priority, each in its earliest free feasible slot.

    Parameters
    ----------
    start_ok : array_like of bool
        ``(n, m)`` from :func:`feasible_starts`.
    duration_steps : array_like of int
        ``(n,)`` or ``(n, m)`` slot lengths in steps (:func:`feasible_starts`).
    priority : array_like of float
        ``(n,)``, larger first; NaN targets are never placed.  Ties keep input order.

    Returns
    -------
    numpy.ndarray of int
        Start step of each target, -1 when left out.
    """
    start_ok = np.asarray(start_ok, dtype=bool)
    n, m = start_ok.shape
    d = _per_start(duration_steps, n, m)
    priority = np.asarray(priority, dtype=float)
    start = np.full(n, -1, dtype=np.int64)
    busy = np.zeros(max(m - 1, 0), dtype=bool)              # step k: interval [t_k, t_k+1)
    busy_before = np.zeros(m, dtype=np.int64)
    steps = np.arange(m)
    rank = greedy_rank(priority)
    candidates = np.flatnonzero(start_ok.any(axis=1) & np.isfinite(priority))
    for i in candidates[np.argsort(rank[candidates])]:
        end = np.minimum(steps + d[i], m - 1)
        free = busy_before[end] == busy_before
        hits = np.flatnonzero(start_ok[i] & free)
        if hits.size:
            k = hits[0]
            start[i] = k
            busy[k:k + d[i, k]] = True
            busy_before[1:] = np.cumsum(busy)
    return start


def greedy_rank(priority) -> np.ndarray:
    """Position of each target in the greedy order (0 first): decreasing priority, ties by input order."""
    priority = np.asarray(priority, dtype=float)
    rank = np.empty(priority.size, dtype=np.int64)
    rank[np.argsort(-np.nan_to_num(priority, nan=-np.inf), kind="stable")] = np.arange(priority.size)
    return rank


def improve_by_swaps(start_step, duration_steps, start_ok, airmass, rank, blocked_ranks,
                     value=None) -> np.ndarray:
    """Swap adjacent slots while that lowers the summed mean air mass.

    Two slots that touch (the first ends where the second starts) exchange their
    targets, the second target moving to the first start, when both stay feasible,
    the pair still ends by the end of the second slot, the sum of the two targets'
    mean air masses over their slots falls by more than 1e-9, the summed ``value``
    does not fall, and no target left out for lack of time ranks between the two (so
    the time held by the targets ranked above any left-out target does not grow: the
    greedy guarantee survives).  The set of targets is unchanged; with per-target
    durations the occupied time is unchanged too.

    Parameters
    ----------
    start_step : array_like of int
        ``(n,)`` start steps, -1 for targets left out.
    duration_steps : array_like of int
        ``(n,)`` or ``(n, m)`` (:func:`feasible_starts`).
    start_ok : array_like of bool
        ``(n, m)`` feasibility of each start (:func:`feasible_starts`).
    airmass : array_like of float
        ``(n, m)`` air mass of each target at each grid time (rows of targets left
        out are not used and may hold anything).
    rank : array_like of int
        ``(n,)`` greedy order of the targets (:func:`greedy_rank`).
    blocked_ranks : array_like of int
        Greedy ranks of the targets left out for lack of time.
    value : array_like of float, optional
        ``(n, m)`` what each target yields when its slot starts at each step; a swap
        never lowers the summed value.  None: every start yields the same.

    Returns
    -------
    numpy.ndarray of int
        The improved start steps.
    """
    start = np.array(start_step, dtype=np.int64)
    start_ok = np.asarray(start_ok, dtype=bool)
    n, m = start_ok.shape
    d = _per_start(duration_steps, n, m)
    worth = np.zeros((n, m)) if value is None else np.nan_to_num(np.asarray(value, dtype=float))
    rank = np.asarray(rank, dtype=np.int64)
    blocked = np.sort(np.asarray(blocked_ranks, dtype=np.int64))
    x = np.where(np.isfinite(airmass), airmass, 1e6)
    cum = np.zeros((x.shape[0], x.shape[1] + 1))
    np.cumsum(x, axis=1, out=cum[:, 1:])

    def cost(i: int, s: int) -> float:
        return (cum[i, s + d[i, s] + 1] - cum[i, s]) / (d[i, s] + 1)

    def separated_by_blocked(a: int, b: int) -> bool:
        lo, hi = sorted((rank[a], rank[b]))
        return np.searchsorted(blocked, hi) > np.searchsorted(blocked, lo, side="right")

    planned = np.flatnonzero(start >= 0)
    for _ in range(planned.size ** 2 + 1):
        changed = False
        seq = planned[np.argsort(start[planned])]
        for a, b in zip(seq[:-1], seq[1:]):
            s = start[a]
            if start[b] != s + d[a, s] or separated_by_blocked(a, b):
                continue
            new_a = s + d[b, s]
            if new_a >= m or not (start_ok[b, s] and start_ok[a, new_a]):
                continue
            if new_a + d[a, new_a] > start[b] + d[b, start[b]]:
                continue
            if worth[b, s] + worth[a, new_a] < worth[a, s] + worth[b, start[b]] - 1e-12:
                continue
            if cost(b, s) + cost(a, new_a) < cost(a, s) + cost(b, start[b]) - 1e-9:
                start[b], start[a] = s, new_a
                changed = True
                break
        if not changed:
            break
    return start


# ---------------------------------------------------------------------------
# the whole night
# ---------------------------------------------------------------------------

@dataclass(frozen=True)
class SolverRun:
    """What one solver reached on a night.

    Attributes
    ----------
    solver : str
        ``"milp"`` or ``"greedy"``.
    status : str
        ``"optimal"``, ``"time_limit"``, ``"no_solution"`` or ``"heuristic"`` (greedy).
    objective : float
        Expected detections of the plan (sum over planned targets of value x P).
    gap : float
        Relative optimality gap (MILP only; NaN otherwise).
    planned : int
        Number of targets planned.
    median_airmass : float
        Median air mass at mid-exposure of the planned slots.
    seconds : float
        Wall time.
    note : str
        Size of the programme (and the subset of targets it worked on, if any).
    """

    solver: str
    status: str
    objective: float
    gap: float
    planned: int
    median_airmass: float
    seconds: float
    note: str = ""


@dataclass(frozen=True)
class NightPlan:
    """A planned night.  Per-target arrays follow the input order.

    Attributes
    ----------
    events : NightEvents
        Sun and Moon events of the night.
    twilight : str
        Which twilight bounds the dark window.
    window_start_mjd, window_end_mjd : float
        The dark window (UTC MJD).
    grid_mjd : numpy.ndarray
        The time grid (UTC MJD).
    duration_s : numpy.ndarray
        Slot length reserved for each planned target (whole steps; NaN when left out).
    start_mjd, end_mjd : numpy.ndarray
        Slot start (overhead begins) and end of the exposure; NaN when left out.
    order : numpy.ndarray of int
        1, 2, ... in time order; 0 when left out.
    airmass_start, airmass_end, airmass_mid : numpy.ndarray
        Air mass at the slot's start, at the end and at the middle of the exposure.
    moon_sep_deg : numpy.ndarray
        Smallest Moon separation during the slot (degrees).
    exposure_s : numpy.ndarray
        Exposure of the planned slot (recomputed for the slot when the S/N is known).
    snr_expected : numpy.ndarray
        S/N per pixel at 6708 A the slot reaches (NaN when not computed).
    p_snr : numpy.ndarray
        P(the slot reaches its S/N), min(1, (S/N / S/N needed)^2).
    value : numpy.ndarray
        Expected detections of the planned slot (detections x P).
    sky_mag : numpy.ndarray
        Sky brightness near 6708 A at mid-exposure (mag arcsec^-2).
    overhead_s : numpy.ndarray
        Overhead placed before each exposure.
    reason : numpy.ndarray of str
        ``"scheduled"`` or why the target is left out.
    slot_steps : numpy.ndarray of int
        ``(n, m)`` slot length in grid steps for each possible start.
    start_ok : numpy.ndarray of bool
        ``(n, m)``: slot starts within all limits for the whole slot.
    rank : numpy.ndarray of int
        Greedy order (0 first) among the targets that had a feasible slot.
    solver : str
        The solver whose plan this is.
    runs : tuple of SolverRun
        Every solver tried, with objective and (MILP) gap.
    objective : float
        Expected detections of the plan.
    """

    events: NightEvents
    twilight: str
    window_start_mjd: float
    window_end_mjd: float
    grid_mjd: np.ndarray
    duration_s: np.ndarray
    start_mjd: np.ndarray
    end_mjd: np.ndarray
    order: np.ndarray
    airmass_start: np.ndarray
    airmass_end: np.ndarray
    airmass_mid: np.ndarray
    moon_sep_deg: np.ndarray
    exposure_s: np.ndarray
    snr_expected: np.ndarray
    p_snr: np.ndarray
    value: np.ndarray
    sky_mag: np.ndarray
    overhead_s: np.ndarray
    reason: np.ndarray
    slot_steps: np.ndarray
    start_ok: np.ndarray
    rank: np.ndarray
    solver: str
    runs: tuple
    objective: float


def _check_limits(airmass_max, moon_min_sep_deg, overhead_s, step_s, moon_max_illumination, solver):
    if not np.isfinite(airmass_max) or airmass_max < 1.0:
        raise PrioritizeError(f"airmass limit must be >= 1, got {airmass_max!r}")
    if not np.isfinite(moon_min_sep_deg) or not 0.0 <= moon_min_sep_deg <= 180.0:
        raise PrioritizeError(f"Moon separation limit must be 0-180 degrees, got {moon_min_sep_deg!r}")
    overhead = np.asarray(overhead_s, dtype=float)
    if overhead.size and (not np.all(np.isfinite(overhead)) or np.any(overhead < 0.0)):
        raise PrioritizeError(f"overhead must be >= 0 seconds, got {overhead_s!r}")
    if not np.isfinite(step_s) or not 1.0 <= step_s <= 3600.0:
        raise PrioritizeError(f"time step must be 1-3600 seconds, got {step_s!r}")
    if not np.isfinite(moon_max_illumination) or not 0.0 <= moon_max_illumination <= 1.0:
        raise PrioritizeError(f"Moon illumination limit must be 0-1, got {moon_max_illumination!r}")
    if solver not in SOLVERS:
        raise PrioritizeError(f"solver must be one of {', '.join(SOLVERS)}, got {solver!r}")


def _median_airmass(airmass_mid, start) -> float:
    planned = np.flatnonzero(start >= 0)
    if planned.size == 0:
        return float("nan")
    return float(np.median(airmass_mid[planned, start[planned]]))


def _objective(value, start) -> float:
    planned = np.flatnonzero(start >= 0)
    return float(value[planned, start[planned]].sum())


def plan_night(site: Site, date: dt.date, ra_deg, dec_deg, priority, exposure_s, *,
               overhead_s=300.0, airmass_max: float = 2.0, moon_min_sep_deg: float = 30.0,
               moon_max_illumination: float = 1.0, twilight: str = "nautical", step_s: float = 60.0,
               detections=None, instrument=None, snr_needed=None, r_c_mag=None,
               include_zero_priority: bool = False, solver: str = "auto", time_limit_s: float = 60.0,
               milp_max_variables: int = 20_000, milp_stride: int | None = None) -> NightPlan:
    """Plan one night (module docstring): the exact solver where it fits, the greedy otherwise.

    Parameters
    ----------
    site : Site
    date : datetime.date
        Local date of the evening.
    ra_deg, dec_deg : array_like
        ICRS coordinates (degrees), ``(n,)``; NaN or out of range → ``no_coordinates``.
    priority : array_like
        The ranked priority (larger first): orders the greedy; NaN → ``no_priority``;
        ≤ 0 → ``zero_priority`` unless ``include_zero_priority``.
    exposure_s : array_like
        Exposure per target (seconds), used where the S/N needed or the magnitude is
        unknown; NaN or ≤ 0 there → ``invalid_exposure``.
    overhead_s : float or array_like
        Slew, acquisition and readout per target (seconds), placed before the exposure.
    airmass_max : float
        Air-mass limit (Pickering 2002), ≥ 1, at every grid time of the slot.
    moon_min_sep_deg : float
        Minimum Moon separation while the Moon is up (degrees).
    moon_max_illumination : float
        No slot while the Moon is up with a larger illuminated fraction (1: no limit).
    twilight : {"nautical", "astronomical", "civil"}
        Which twilight bounds the dark window.
    step_s : float
        Grid step (seconds); slots are whole steps.
    detections : array_like, optional
        Expected detections of each target when its S/N is reached (the value the
        plan maximises, times P(S/N)); default: the priority.
    instrument : Instrument, optional
        Spectrograph for the exposure of each slot (:mod:`prioritize.sky.slots`).
    snr_needed, r_c_mag : array_like, optional
        S/N per pixel to reach and Cousins R of each target.
    include_zero_priority : bool
        Plan targets of priority 0 in time nobody else can use.
    solver : {"auto", "milp", "greedy"}
        ``auto`` and ``milp``: the greedy, then the MILP (its plan kept unless it does
        worse); the MILP's start stride grows until it has at most ``milp_max_variables``
        variables; beyond a stride of :data:`MAX_AUTO_STRIDE` steps it keeps that stride
        and works on the targets with the most detections per slot minute plus the
        greedy's (the note of its run says so).  ``greedy``: the greedy only.
    time_limit_s : float
        Wall-time limit of the MILP.
    milp_max_variables : int
        Size above which the start stride of the MILP grows.
    milp_stride : int, optional
        Force the MILP's start stride (steps).

    Returns
    -------
    NightPlan

    Raises
    ------
    PrioritizeError
        Invalid limits; :class:`~prioritize.errors.ModelRangeError` for a night
        without the requested darkness or an unsupported date.

    Notes
    -----
    Planning estimates: times are good to about a minute (the grid step);
    weather, telescope limits and the observatory's rules are not modelled.
    """
    _check_limits(airmass_max, moon_min_sep_deg, overhead_s, step_s, moon_max_illumination, solver)
    ra = np.asarray(ra_deg, dtype=float)
    dec = np.asarray(dec_deg, dtype=float)
    n = ra.size
    prio = np.asarray(priority, dtype=float)
    exposure = np.asarray(exposure_s, dtype=float)
    overhead = np.broadcast_to(np.asarray(overhead_s, dtype=float), (n,)).astype(float)
    worth = prio.copy() if detections is None else np.asarray(detections, dtype=float)
    need = np.full(n, np.nan) if snr_needed is None else np.asarray(snr_needed, dtype=float)
    r_c = np.full(n, np.nan) if r_c_mag is None else np.asarray(r_c_mag, dtype=float)
    computed_exposure = (instrument is not None) & np.isfinite(need) & (need > 0) & np.isfinite(r_c)

    events = night_events(site, date)
    window_start, window_end = events.dark_window(twilight)
    first_step = np.ceil(window_start * 86400.0 / step_s - 1e-6) * step_s / 86400.0  # on whole steps
    grid = time_grid(first_step, window_end, step_s)
    m = grid.size
    track = sun_moon_track(site, grid)
    moon_up = track.moon_altitude_deg > MOON_HORIZON_ALTITUDE_DEG
    moon_allows = ~moon_up | (track.moon_illumination <= moon_max_illumination)
    min_altitude = float(altitude_for_airmass(airmass_max))
    phase = phase_angle_from_illumination(track.moon_illumination)

    reason = np.full(n, NO_TIME_LEFT, dtype=object)
    has_coords = np.isfinite(ra) & np.isfinite(dec) & (ra >= 0) & (ra < 360) & (np.abs(dec) <= 90)
    valid_exposure = computed_exposure | (np.isfinite(exposure) & (exposure > 0))
    reason[~valid_exposure] = INVALID_EXPOSURE
    if not include_zero_priority:
        reason[np.isfinite(prio) & (prio <= 0)] = ZERO_PRIORITY
    reason[~np.isfinite(prio) | ~np.isfinite(worth)] = NO_PRIORITY
    reason[~has_coords] = NO_COORDINATES
    candidates = np.flatnonzero(reason == NO_TIME_LEFT)
    fixed = np.where(np.isfinite(exposure) & (exposure > 0), exposure, 1.0)

    directions = np.zeros((n, 3))
    directions[has_coords] = apparent_directions(ra[has_coords], dec[has_coords], 0.5 * (grid[0] + grid[-1]))
    shape = (n, m)
    start_ok = np.zeros(shape, dtype=bool)
    steps_of = np.ones(shape, dtype=np.int32)
    airmass = np.full(shape, np.inf, dtype=np.float32)
    slot_exposure = np.full(shape, np.nan, dtype=np.float32)
    slot_snr = np.full(shape, np.nan, dtype=np.float32)
    slot_fraction = np.zeros(shape, dtype=np.float32)
    slot_airmass = np.full(shape, np.inf, dtype=np.float32)
    slot_sky = np.full(shape, np.nan, dtype=np.float32)
    for block in np.array_split(candidates, max(1, int(np.ceil(candidates.size / _TARGET_CHUNK)))):
        if block.size == 0:
            continue
        altitude = altitude_deg(directions[block], track.zenith)
        x = airmass_pickering(altitude)
        separation = separation_deg(directions[block], track.moon_direction)
        high_enough = altitude >= min_altitude
        moon_clear = ((separation >= moon_min_sep_deg) | ~moon_up) & moon_allows
        if instrument is not None:
            sky = sky_mag_6708(instrument.sky_rc_mag_per_arcsec2, separation, 90.0 - np.maximum(altitude, 0.0),
                               np.where(moon_up, 90.0 - track.moon_altitude_deg, 90.0), phase,
                               site.extinction_6708)
        else:
            sky = np.full(x.shape, np.nan)
        slots = slot_exposures(instrument, need[block], r_c[block], overhead[block], fixed[block], x, sky,
                               step_s, site.extinction_6708)
        d = np.maximum(np.ceil((overhead[block, None] + slots.exposure_s) / step_s - 1e-9), 1)
        d = np.minimum(np.nan_to_num(d, nan=m), m).astype(np.int32)
        within_airmass = feasible_starts(high_enough, d).any(axis=1)
        ok = feasible_starts(high_enough & moon_clear, d)
        start_ok[block] = ok
        steps_of[block] = d
        airmass[block] = x
        slot_exposure[block] = slots.exposure_s
        slot_snr[block] = slots.snr
        slot_fraction[block] = slots.fraction
        slot_airmass[block] = slots.airmass_mid
        slot_sky[block] = slots.sky_mag
        too_long = (d >= m - 1).all(axis=1)
        moon_blocked = within_airmass & ~ok.any(axis=1)
        reason[block[~within_airmass]] = NEVER_ABOVE_AIRMASS_LIMIT
        reason[block[too_long]] = LONGER_THAN_WINDOW
        reason[block[moon_blocked]] = TOO_CLOSE_TO_MOON

    eligible = reason == NO_TIME_LEFT
    start_ok &= eligible[:, None]
    value = np.where(start_ok, np.maximum(worth, 0.0)[:, None] * slot_fraction, 0.0)
    positive = value[value > 0]
    reference = float(positive.min()) if positive.size else 1.0
    with np.errstate(divide="ignore", invalid="ignore"):
        bonus = np.where(start_ok, (TIE_BONUS * value + ZERO_BONUS * reference)
                         / np.maximum(slot_airmass, 1.0), 0.0)

    runs = []
    began = time.perf_counter()
    order_key = np.where(eligible, prio, np.nan)
    greedy = greedy_schedule(start_ok, steps_of, order_key)
    rank = greedy_rank(order_key)
    planned = np.flatnonzero(greedy >= 0)
    blocked = rank[eligible & (greedy < 0) & start_ok.any(axis=1)]
    greedy[planned] = improve_by_swaps(greedy[planned], steps_of[planned], start_ok[planned],
                                       airmass[planned], rank[planned], blocked, value[planned])
    runs.append(SolverRun("greedy", "heuristic", _objective(value, greedy), float("nan"),
                          int((greedy >= 0).sum()), _median_airmass(slot_airmass, greedy),
                          time.perf_counter() - began))
    start, used = greedy, "greedy"
    if solver in ("auto", "milp"):
        pairs = int(start_ok.sum())
        subset_note = ""
        milp_ok = start_ok
        stride = milp_stride or max(1, int(np.ceil(pairs / max(1, milp_max_variables))))
        if milp_stride is None and stride > MAX_AUTO_STRIDE:
            # long list: the exact solver works on the most promising targets (detections per
            # minute of slot) plus every target of the greedy plan, at a stride of MAX_AUTO_STRIDE
            stride = MAX_AUTO_STRIDE
            with np.errstate(divide="ignore", invalid="ignore"):
                density = np.where(start_ok, value / steps_of, 0.0).max(axis=1)
            preference = np.lexsort((-density, ~(greedy >= 0)))
            per_target = np.ceil(start_ok.sum(axis=1) / stride)[preference]
            take = preference[np.cumsum(per_target) <= milp_max_variables]
            take = np.union1d(take, np.flatnonzero(greedy >= 0))
            milp_ok = np.zeros_like(start_ok)
            milp_ok[take] = start_ok[take]
            subset_note = (f"; restricted to {take.size} of {int(start_ok.any(axis=1).sum())} targets "
                           "(best detections per slot minute, and the greedy's): the gap is within that set")
        result = solve_slot_milp(milp_ok, steps_of, value, bonus, stride=stride, extra_starts=greedy,
                                 time_limit_s=time_limit_s)
        runs.append(SolverRun("milp", result.status, result.objective, result.gap,
                              int((result.start >= 0).sum()), _median_airmass(slot_airmass, result.start),
                              result.seconds, f"{result.variables} variables, {result.rows} rows, "
                                              f"start stride {result.stride} step(s){subset_note}"))
        if result.status != "no_solution" and result.objective >= runs[0].objective - 1e-12:
            start, used = result.start, "milp"
    objective = _objective(value, start)

    planned = np.flatnonzero(start >= 0)
    reason[planned] = SCHEDULED
    nan = np.full(n, np.nan)
    start_mjd, end_mjd, duration_s = nan.copy(), nan.copy(), nan.copy()
    airmass_start, airmass_end, airmass_mid = nan.copy(), nan.copy(), nan.copy()
    moon_sep, exposure_out, snr_out, p_out, value_out, sky_out = (nan.copy() for _ in range(6))
    order = np.zeros(n, dtype=np.int64)
    if planned.size:
        s = start[planned]
        d = steps_of[planned, s].astype(np.int64)
        exposure_out[planned] = slot_exposure[planned, s]
        snr_out[planned] = slot_snr[planned, s]
        p_out[planned] = slot_fraction[planned, s]
        value_out[planned] = value[planned, s]
        sky_out[planned] = slot_sky[planned, s]
        airmass_mid[planned] = slot_airmass[planned, s]
        start_mjd[planned] = grid[s]
        duration_s[planned] = d * step_s
        end_mjd[planned] = grid[s] + (overhead[planned] + exposure_out[planned]) / 86400.0
        planned_airmass = airmass_pickering(altitude_deg(directions[planned], track.zenith))
        rows = np.arange(planned.size)
        airmass_start[planned] = planned_airmass[rows, s]
        end_position = s + (overhead[planned] + exposure_out[planned]) / step_s
        airmass_end[planned] = at_fractional_step(planned_airmass, end_position[:, None])[:, 0]
        sep = separation_deg(directions[planned], track.moon_direction)
        steps = np.arange(m)[None, :]
        in_slot = (steps >= s[:, None]) & (steps <= (s + d)[:, None])
        moon_sep[planned] = np.where(in_slot & moon_up[None, :], sep, np.inf).min(axis=1)
        moon_sep[planned] = np.where(np.isfinite(moon_sep[planned]), moon_sep[planned], np.nan)
        order[planned[np.argsort(s, kind="stable")]] = np.arange(1, planned.size + 1)
    return NightPlan(events=events, twilight=twilight, window_start_mjd=window_start,
                     window_end_mjd=window_end, grid_mjd=grid, duration_s=duration_s,
                     start_mjd=start_mjd, end_mjd=end_mjd, order=order,
                     airmass_start=airmass_start, airmass_end=airmass_end, airmass_mid=airmass_mid,
                     moon_sep_deg=moon_sep, exposure_s=exposure_out, snr_expected=snr_out, p_snr=p_out,
                     value=value_out, sky_mag=sky_out, overhead_s=overhead, reason=reason,
                     slot_steps=steps_of, start_ok=start_ok, rank=rank, solver=used, runs=tuple(runs),
                     objective=objective)
