"""Time the night plan and the semester table for 10^4 targets.

Run:  .venv/bin/python benchmarks/bench_sky.py [--targets N] [--repeat R]

Targets are uniform on the sky (seeded); the site is Mauna Kea, the night 2027-03-15
and the semester 2027A.  A small warm-up call first loads astropy's IERS table and
ephemeris, so the figures are for the computation itself; the best of R runs is shown.
"""

from __future__ import annotations

import argparse
import datetime as dt
import time

import numpy as np

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
    parser.add_argument("--targets", type=int, default=10_000)
    parser.add_argument("--repeat", type=int, default=3)
    args = parser.parse_args()

    rng = np.random.default_rng(20270315)
    n = args.targets
    ra = rng.uniform(0, 360, n)
    dec = np.degrees(np.arcsin(rng.uniform(-1, 1, n)))
    priority = rng.random(n)
    exposure = rng.uniform(120, 1800, n)
    site = load_site("mauna-kea")
    night = dt.date(2027, 3, 15)
    first, last = semester_dates("2027A")

    plan_night(site, night, ra[:10], dec[:10], priority[:10], exposure[:10])
    season_hours(site, first, first, ra[:10], dec[:10])

    seconds, plan = _best_of(args.repeat, lambda: plan_night(site, night, ra, dec, priority, exposure))
    print(f"night plan, {n} targets, {plan.grid_mjd.size} one-minute steps: {seconds:.2f} s "
          f"({int((plan.order > 0).sum())} planned)")
    seconds, table = _best_of(args.repeat, lambda: season_hours(site, first, last, ra, dec))
    print(f"season table, {n} targets, {int(table.nights.sum())} nights x 144 ten-minute samples: "
          f"{seconds:.2f} s")


if __name__ == "__main__":
    main()
