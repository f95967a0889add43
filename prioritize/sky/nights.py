"""Several nights in a row: each target is planned until its S/N is reached, leftovers carried on.

Night after night, :func:`prioritize.sky.schedule.plan_night` plans the targets still
open.  A target with a computed exposure accumulates S/N^2 over its visits (photon
statistics add in quadrature); it is done once the sum reaches the S/N needed, and
until then it is carried to the next night asking only for the S/N still missing,
sqrt(S/N_needed^2 - sum), and worth only the detections still open,
D (1 - sum / S/N_needed^2).  A target with a fixed exposure is done after one visit.
Targets the first night leaves out are tried again on the next.

Planning estimates; weather losses are not modelled (re-run the plan each night).
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass

import numpy as np

from .schedule import NightPlan, plan_night
from .sites import Site


@dataclass(frozen=True)
class NightsPlan:
    """The plans of consecutive nights.

    Attributes
    ----------
    dates : list of datetime.date
        Local evening dates.
    plans : list of NightPlan
        One per night, over the targets still open that night.
    rows : list of numpy.ndarray of int
        For each night, the input rows its plan's arrays refer to.
    done : numpy.ndarray of bool
        Targets whose S/N was reached (or whose single visit was planned).
    snr_sq_collected : numpy.ndarray
        S/N^2 collected per target over all nights (NaN for fixed exposures).
    """

    dates: list
    plans: list
    rows: list
    done: np.ndarray
    snr_sq_collected: np.ndarray

    @property
    def objective(self) -> float:
        """Expected detections over all nights."""
        return float(sum(p.objective for p in self.plans))


def plan_nights(site: Site, dates, ra_deg, dec_deg, priority, exposure_s, *, detections=None,
                snr_needed=None, r_c_mag=None, instrument=None, overhead_s=300.0, **limits) -> NightsPlan:
    """Plan ``dates`` in order, each night over the targets still open (module docstring).

    Parameters
    ----------
    site : Site
    dates : sequence of datetime.date
        Evening dates, in order.
    ra_deg, dec_deg, priority, exposure_s, detections, snr_needed, r_c_mag, instrument, overhead_s :
        As in :func:`prioritize.sky.schedule.plan_night` (arrays ``(n,)``).
    **limits
        Passed on to :func:`~prioritize.sky.schedule.plan_night` (air mass, Moon,
        twilight, solver, ...).

    Returns
    -------
    NightsPlan
    """
    ra = np.asarray(ra_deg, dtype=float)
    n = ra.size
    dec = np.asarray(dec_deg, dtype=float)
    prio = np.asarray(priority, dtype=float)
    exposure = np.asarray(exposure_s, dtype=float)
    worth = prio.copy() if detections is None else np.asarray(detections, dtype=float)
    need = np.full(n, np.nan) if snr_needed is None else np.asarray(snr_needed, dtype=float)
    r_c = np.full(n, np.nan) if r_c_mag is None else np.asarray(r_c_mag, dtype=float)
    overhead = np.broadcast_to(np.asarray(overhead_s, dtype=float), (n,)).astype(float)
    computed = (instrument is not None) & np.isfinite(need) & (need > 0) & np.isfinite(r_c)
    collected = np.where(computed, 0.0, np.nan)
    done = np.zeros(n, dtype=bool)
    plans, rows, nights = [], [], []
    for date in dates:
        open_rows = np.flatnonzero(~done)
        if open_rows.size == 0:
            break
        share = np.where(computed, 1.0 - np.nan_to_num(collected) / np.where(computed, need, 1.0) ** 2, 1.0)
        missing = np.where(computed, need * np.sqrt(np.clip(share, 0.0, 1.0)), need)
        plan = plan_night(site, date, ra[open_rows], dec[open_rows], prio[open_rows], exposure[open_rows],
                          overhead_s=overhead[open_rows], detections=(worth * share)[open_rows],
                          instrument=instrument, snr_needed=missing[open_rows], r_c_mag=r_c[open_rows],
                          **limits)
        planned = plan.order > 0
        got = open_rows[planned]
        fixed = ~computed[got]
        done[got[fixed]] = True
        collected[got[~fixed]] += plan.snr_expected[planned][~fixed] ** 2
        reached = computed & (collected >= need ** 2 * (1.0 - 1e-9))
        done |= reached
        plans.append(plan)
        rows.append(open_rows)
        nights.append(date)
    return NightsPlan(nights, plans, rows, done, collected)


def night_dates(first: dt.date, nights: int | None = None, last: dt.date | None = None) -> list:
    """The evening dates from ``first``: ``nights`` of them, or up to ``last`` included."""
    if last is not None:
        count = (last - first).days + 1
    else:
        count = 1 if nights is None else int(nights)
    return [first + dt.timedelta(days=k) for k in range(max(count, 0))]
