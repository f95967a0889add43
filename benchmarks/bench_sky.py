"""Time the night plan (each solver) and the semester table for 10^3 and 10^4 targets.

Run:  .venv/bin/python benchmarks/bench_sky.py [--targets 1000 10000] [--time-limit 60] [--repeat 1]

Targets are uniform on the sky (seeded), with invented priorities, expected detections,
S/N needed and R_C magnitudes; exposures are recomputed for each slot on the
``echelle-4m`` preset.  The site is Mauna Kea, the night 2027-03-15 and the semester
2027A.  A small warm-up call first loads astropy's IERS table and ephemeris.  For each
size the plan runs with ``--solver greedy`` and ``--solver milp`` (the MILP with a start
stride chosen so that it has at most 20,000 variables, and the time limit given); the
wall time, the objective (expected detections), the number planned, the median air
mass and, for the MILP, its status and gap are printed.
"""

from __future__ import annotations

import argparse
import datetime as dt
import time

import numpy as np

from prioritize.instruments import load_instrument
from prioritize.sky.schedule import plan_night
from prioritize.sky.season import season_hours, semester_dates
from prioritize.sky.sites import load_site


def _best_of(repeat: int, func) -> tuple[float, object]:
    best, result = float("inf"), None
    for _ in range(repeat):
        started = time.perf_counter()
        result = func()
        best = min(best, time.perf_counter() - started)
    return best, result


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--targets", type=int, nargs="+", default=[1_000, 10_000])
    parser.add_argument("--time-limit", type=float, default=60.0)
    parser.add_argument("--repeat", type=int, default=1)
    parser.add_argument("--skip-season", action="store_true", help="do not time the semester table")
    args = parser.parse_args()

    site = load_site("mauna-kea")
    night = dt.date(2027, 3, 15)
    inst = load_instrument("echelle-4m")
    for n in args.targets:
        rng = np.random.default_rng(20270315)
        ra = rng.uniform(0, 360, n)
        dec = np.degrees(np.arcsin(rng.uniform(-1, 1, n)))
        priority = rng.lognormal(-5.0, 1.0, n)
        detections = priority * rng.uniform(0.1, 0.3, n)
        snr_needed = rng.uniform(50, 150, n)
        r_c = rng.uniform(7, 11.5, n)
        common = dict(overhead_s=340.0, detections=detections, instrument=inst, snr_needed=snr_needed,
                      r_c_mag=r_c)
        plan_night(site, night, ra[:10], dec[:10], priority[:10], np.full(10, 600.0), solver="greedy",
                   **{k: (v[:10] if isinstance(v, np.ndarray) else v) for k, v in common.items()})
        for solver in ("greedy", "milp"):
            seconds, plan = _best_of(args.repeat, lambda: plan_night(
                site, night, ra, dec, priority, np.full(n, 600.0), solver=solver,
                time_limit_s=args.time_limit, **common))
            run = {r.solver: r for r in plan.runs}[solver]
            gap = f", {run.status}, gap {run.gap:.2%}, {run.note}" if solver == "milp" else ""
            print(f"night plan, {n} targets, {plan.grid_mjd.size} one-minute steps, solver {solver}: "
                  f"{seconds:.1f} s wall (solver {run.seconds:.1f} s), objective {run.objective:.5g} "
                  f"expected detections, {run.planned} planned, median air mass {run.median_airmass:.3f}{gap}")
    if not args.skip_season:
        n = max(args.targets)
        rng = np.random.default_rng(20270315)
        ra = rng.uniform(0, 360, n)
        dec = np.degrees(np.arcsin(rng.uniform(-1, 1, n)))
        first, last = semester_dates("2027A")
        season_hours(site, first, first, ra[:10], dec[:10])
        seconds, table = _best_of(args.repeat, lambda: season_hours(site, first, last, ra, dec))
        print(f"season table, {n} targets, {int(table.nights.sum())} nights x 144 ten-minute samples: "
              f"{seconds:.2f} s")


if __name__ == "__main__":
    main()
