"""The night plan: which target to observe when, and why the others are left out.

Method
------
1. The dark window runs from the end of evening twilight to the start of morning
   twilight (nautical by default: bright stars at 6708 Å tolerate the sky of
   nautical twilight).  It is cut into steps of ``step_s`` seconds (60 s).
2. Each target needs a slot of ``overhead_s + exposure_s`` rounded up to whole
   steps.  A slot starting at step s is *feasible* for a target when at every
   grid time from its start to its end (both included) the target's air mass is
   ≤ the limit and, whenever the Moon is up, the Moon is at least the minimum
   separation away.
3. Greedy by priority: targets in decreasing priority (ties: input order) each
   take the earliest feasible slot not overlapping the slots already taken.
4. Local improvement: adjacent slots are swapped (each keeps its length, so the
   occupied time does not change) when both stay feasible, the sum of the two
   targets' mean air masses over their slots falls, and no target left out for
   lack of time ranks between the two; repeated until no swap helps.  The set
   of planned targets is that of step 3.

Guarantees (checked by the tests):

- no two slots overlap, and every slot lies inside the dark window;
- every planned target is within the limits for its whole slot;
- a target is left out for ``no_time_left`` only if, in the final plan, no
  feasible slot is free of the targets ranked above it: no lower-priority
  target takes time that a higher-priority one could have used; in
  particular no left-out target fits in any gap of the plan.

Reason codes for targets left out: ``no_coordinates``, ``no_priority``,
``invalid_exposure``, ``longer_than_dark_window``, ``never_above_airmass_limit``,
``too_close_to_moon``, ``no_time_left`` (``status_not_ok`` is added by the
command for rows the ranking did not compute).  Planned targets carry
``scheduled``.

All times are planning estimates; the observatory's own tools and rules prevail.
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass

import numpy as np

from ..errors import PrioritizeError
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

SCHEDULED = "scheduled"
NO_COORDINATES = "no_coordinates"
NO_PRIORITY = "no_priority"
INVALID_EXPOSURE = "invalid_exposure"
LONGER_THAN_WINDOW = "longer_than_dark_window"
NEVER_ABOVE_AIRMASS_LIMIT = "never_above_airmass_limit"
TOO_CLOSE_TO_MOON = "too_close_to_moon"
NO_TIME_LEFT = "no_time_left"
STATUS_NOT_OK = "status_not_ok"

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
        Slot length of each target in steps, ``(n,)``, at least 1.

    Returns
    -------
    numpy.ndarray of bool
        Shape ``(n, m)``.
    """
    ok = np.asarray(ok, dtype=bool)
    n, m = ok.shape
    d = np.asarray(duration_steps, dtype=np.int64).reshape(n, 1)
    bad_before = np.zeros((n, m + 1), dtype=np.int32)
    np.cumsum(~ok, axis=1, out=bad_before[:, 1:])
    start = np.arange(m)[None, :]
    end = start + d + 1
    inside = end <= m
    bad = np.take_along_axis(bad_before, np.minimum(end, m), axis=1) - bad_before[:, :m]
    return inside & (bad == 0)


def greedy_schedule(start_ok, duration_steps, priority) -> np.ndarray:
    """Place targets in decreasing priority, each in its earliest free feasible slot.

    Parameters
    ----------
    start_ok : array_like of bool
        ``(n, m)`` from :func:`feasible_starts`.
    duration_steps : array_like of int
        ``(n,)`` slot lengths in steps.
    priority : array_like of float
        ``(n,)``, larger first; NaN targets are never placed.  Ties keep input order.

    Returns
    -------
    numpy.ndarray of int
        Start step of each target, -1 when left out.
    """
    start_ok = np.asarray(start_ok, dtype=bool)
    n, m = start_ok.shape
    d = np.asarray(duration_steps, dtype=np.int64)
    priority = np.asarray(priority, dtype=float)
    start = np.full(n, -1, dtype=np.int64)
    busy = np.zeros(max(m - 1, 0), dtype=bool)              # step k: interval [t_k, t_k+1)
    busy_before = np.zeros(m, dtype=np.int64)
    rank = greedy_rank(priority)
    candidates = np.flatnonzero(start_ok.any(axis=1) & np.isfinite(priority))
    for i in candidates[np.argsort(rank[candidates])]:
        s = np.arange(m - d[i])
        free = busy_before[s + d[i]] == busy_before[s]
        hits = np.flatnonzero(start_ok[i, : m - d[i]] & free)
        if hits.size:
            k = hits[0]
            start[i] = k
            busy[k:k + d[i]] = True
            busy_before[1:] = np.cumsum(busy)
    return start


def greedy_rank(priority) -> np.ndarray:
    """Position of each target in the greedy order (0 first): decreasing priority, ties by input order."""
    priority = np.asarray(priority, dtype=float)
    rank = np.empty(priority.size, dtype=np.int64)
    rank[np.argsort(-np.nan_to_num(priority, nan=-np.inf), kind="stable")] = np.arange(priority.size)
    return rank


def improve_by_swaps(start_step, duration_steps, start_ok, airmass, rank, blocked_ranks) -> np.ndarray:
    """Swap adjacent slots while that lowers the summed mean air mass.

    Two slots that touch (the first ends where the second starts) exchange their
    targets, the second target moving to the first start, when both stay feasible,
    the sum of the two targets' mean air masses over their slots falls by more than
    1e-9, and no target left out for lack of time ranks between the two (so the
    time held by the targets ranked above any left-out target does not change:
    the greedy guarantee survives).  Occupied time and the set of targets are
    unchanged.

    Parameters
    ----------
    start_step : array_like of int
        ``(n,)`` start steps, -1 for targets left out.
    duration_steps : array_like of int
        ``(n,)``.
    start_ok : array_like of bool
        ``(n, m)`` feasibility of each start (:func:`feasible_starts`).
    airmass : array_like of float
        ``(n, m)`` air mass of each target at each grid time (rows of targets left
        out are not used and may hold anything).
    rank : array_like of int
        ``(n,)`` greedy order of the targets (:func:`greedy_rank`).
    blocked_ranks : array_like of int
        Greedy ranks of the targets left out for lack of time.

    Returns
    -------
    numpy.ndarray of int
        The improved start steps.
    """
    start = np.array(start_step, dtype=np.int64)
    d = np.asarray(duration_steps, dtype=np.int64)
    start_ok = np.asarray(start_ok, dtype=bool)
    rank = np.asarray(rank, dtype=np.int64)
    blocked = np.sort(np.asarray(blocked_ranks, dtype=np.int64))
    x = np.where(np.isfinite(airmass), airmass, 1e6)
    cum = np.zeros((x.shape[0], x.shape[1] + 1))
    np.cumsum(x, axis=1, out=cum[:, 1:])

    def cost(i: int, s: int) -> float:
        return (cum[i, s + d[i] + 1] - cum[i, s]) / (d[i] + 1)

    def separated_by_blocked(a: int, b: int) -> bool:
        lo, hi = sorted((rank[a], rank[b]))
        return np.searchsorted(blocked, hi) > np.searchsorted(blocked, lo, side="right")

    planned = np.flatnonzero(start >= 0)
    for _ in range(planned.size ** 2 + 1):
        changed = False
        seq = planned[np.argsort(start[planned])]
        for a, b in zip(seq[:-1], seq[1:]):
            s = start[a]
            if start[b] != s + d[a] or separated_by_blocked(a, b):
                continue
            new_a = s + d[b]
            if not (start_ok[b, s] and start_ok[a, new_a]):
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
        Slot length actually reserved (whole steps).
    start_mjd, end_mjd : numpy.ndarray
        Slot start (overhead begins) and end of the exposure; NaN when left out.
    order : numpy.ndarray of int
        1, 2, ... in time order; 0 when left out.
    airmass_start, airmass_end : numpy.ndarray
        Air mass at the slot's start and at the end of the exposure.
    moon_sep_deg : numpy.ndarray
        Smallest Moon separation during the slot (degrees).
    reason : numpy.ndarray of str
        ``"scheduled"`` or why the target is left out.
    duration_steps : numpy.ndarray of int
        Slot length in grid steps.
    start_ok : numpy.ndarray of bool
        ``(n, m)``: slot starts within all limits for the whole slot.
    rank : numpy.ndarray of int
        Greedy order (0 first) among the targets that had a feasible slot.
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
    moon_sep_deg: np.ndarray
    reason: np.ndarray
    duration_steps: np.ndarray
    start_ok: np.ndarray
    rank: np.ndarray


def _check_limits(airmass_max, moon_min_sep_deg, overhead_s, step_s):
    if not np.isfinite(airmass_max) or airmass_max < 1.0:
        raise PrioritizeError(f"airmass limit must be >= 1, got {airmass_max!r}")
    if not np.isfinite(moon_min_sep_deg) or not 0.0 <= moon_min_sep_deg <= 180.0:
        raise PrioritizeError(f"Moon separation limit must be 0-180 degrees, got {moon_min_sep_deg!r}")
    if not np.isfinite(overhead_s) or overhead_s < 0.0:
        raise PrioritizeError(f"overhead must be >= 0 seconds, got {overhead_s!r}")
    if not np.isfinite(step_s) or not 1.0 <= step_s <= 3600.0:
        raise PrioritizeError(f"time step must be 1-3600 seconds, got {step_s!r}")


def plan_night(site: Site, date: dt.date, ra_deg, dec_deg, priority, exposure_s, *,
               overhead_s: float = 300.0, airmass_max: float = 2.0, moon_min_sep_deg: float = 30.0,
               twilight: str = "nautical", step_s: float = 60.0) -> NightPlan:
    """Plan one night: greedy by priority, then adjacent swaps (module docstring).

    Parameters
    ----------
    site : Site
    date : datetime.date
        Local date of the evening.
    ra_deg, dec_deg : array_like
        ICRS coordinates (degrees), ``(n,)``; NaN or out of range → ``no_coordinates``.
    priority : array_like
        Larger is observed first; NaN → ``no_priority``.
    exposure_s : array_like
        Exposure time per target (seconds); NaN or ≤ 0 → ``invalid_exposure``.
    overhead_s : float
        Slew, acquisition and readout per target (seconds), placed before the exposure.
    airmass_max : float
        Air-mass limit (Pickering 2002), ≥ 1.
    moon_min_sep_deg : float
        Minimum Moon separation while the Moon is up (degrees).
    twilight : {"nautical", "astronomical", "civil"}
        Which twilight bounds the dark window.
    step_s : float
        Grid step (seconds); slots are whole steps.

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
    _check_limits(airmass_max, moon_min_sep_deg, overhead_s, step_s)
    ra = np.asarray(ra_deg, dtype=float)
    dec = np.asarray(dec_deg, dtype=float)
    prio = np.asarray(priority, dtype=float)
    exposure = np.asarray(exposure_s, dtype=float)
    n = ra.size
    events = night_events(site, date)
    window_start, window_end = events.dark_window(twilight)
    first_step = np.ceil(window_start * 86400.0 / step_s - 1e-6) * step_s / 86400.0  # on whole steps
    grid = time_grid(first_step, window_end, step_s)
    m = grid.size
    track = sun_moon_track(site, grid)
    moon_up = track.moon_altitude_deg > MOON_HORIZON_ALTITUDE_DEG
    min_altitude = float(altitude_for_airmass(airmass_max))

    reason = np.full(n, NO_TIME_LEFT, dtype=object)
    has_coords = np.isfinite(ra) & np.isfinite(dec) & (ra >= 0) & (ra < 360) & (np.abs(dec) <= 90)
    valid_exposure = np.isfinite(exposure) & (exposure > 0)
    duration = np.where(valid_exposure, np.ceil((np.where(valid_exposure, exposure, 0) + overhead_s)
                                                / step_s - 1e-9), 1).astype(np.int64)
    duration = np.maximum(duration, 1)
    reason[duration > m - 1] = LONGER_THAN_WINDOW
    reason[~valid_exposure] = INVALID_EXPOSURE
    reason[~np.isfinite(prio)] = NO_PRIORITY
    reason[~has_coords] = NO_COORDINATES
    candidates = np.flatnonzero(reason == NO_TIME_LEFT)

    directions = np.zeros((n, 3))
    directions[has_coords] = apparent_directions(ra[has_coords], dec[has_coords], 0.5 * (grid[0] + grid[-1]))
    start_ok = np.zeros((n, m), dtype=bool)
    for block in np.array_split(candidates, max(1, int(np.ceil(candidates.size / _TARGET_CHUNK)))):
        if block.size == 0:
            continue
        high_enough = altitude_deg(directions[block], track.zenith) >= min_altitude
        moon_clear = (separation_deg(directions[block], track.moon_direction) >= moon_min_sep_deg) | ~moon_up
        within_airmass = feasible_starts(high_enough, duration[block]).any(axis=1)
        start_ok[block] = feasible_starts(high_enough & moon_clear, duration[block])
        never = ~within_airmass
        moon_blocked = within_airmass & ~start_ok[block].any(axis=1)
        reason[block[never]] = NEVER_ABOVE_AIRMASS_LIMIT
        reason[block[moon_blocked]] = TOO_CLOSE_TO_MOON

    eligible = np.where(reason == NO_TIME_LEFT, prio, np.nan)
    start = greedy_schedule(start_ok, duration, eligible)
    rank = greedy_rank(eligible)
    planned = np.flatnonzero(start >= 0)
    reason[planned] = SCHEDULED
    planned_altitude = altitude_deg(directions[planned], track.zenith)
    planned_airmass = airmass_pickering(planned_altitude)
    start[planned] = improve_by_swaps(start[planned], duration[planned], start_ok[planned], planned_airmass,
                                      rank[planned], rank[reason == NO_TIME_LEFT])

    start_mjd = np.full(n, np.nan)
    end_mjd = np.full(n, np.nan)
    airmass_start = np.full(n, np.nan)
    airmass_end = np.full(n, np.nan)
    moon_sep = np.full(n, np.nan)
    order = np.zeros(n, dtype=np.int64)
    if planned.size:
        s = start[planned]
        start_mjd[planned] = grid[s]
        end_mjd[planned] = grid[s] + (overhead_s + exposure[planned]) / 86400.0
        rows = np.arange(planned.size)
        airmass_start[planned] = planned_airmass[rows, s]
        end_step = s + duration[planned]
        steps_to_end = (overhead_s + exposure[planned]) / step_s
        before_end = np.minimum(s + np.floor(steps_to_end).astype(np.int64), end_step)
        after_end = np.minimum(before_end + 1, end_step)
        weight = steps_to_end - np.floor(steps_to_end)
        airmass_end[planned] = ((1 - weight) * planned_airmass[rows, before_end]
                                + weight * planned_airmass[rows, after_end])
        sep = separation_deg(directions[planned], track.moon_direction)
        steps = np.arange(m)[None, :]
        in_slot = (steps >= s[:, None]) & (steps <= end_step[:, None])
        moon_sep[planned] = np.where(in_slot, sep, np.inf).min(axis=1)
        order[planned[np.argsort(s, kind="stable")]] = np.arange(1, planned.size + 1)
    return NightPlan(events=events, twilight=twilight, window_start_mjd=window_start,
                     window_end_mjd=window_end, grid_mjd=grid, duration_s=duration * step_s,
                     start_mjd=start_mjd, end_mjd=end_mjd, order=order,
                     airmass_start=airmass_start, airmass_end=airmass_end, moon_sep_deg=moon_sep,
                     reason=reason, duration_steps=duration, start_ok=start_ok, rank=rank)
