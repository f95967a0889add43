"""Benchmark: `rank` throughput on a 10^5-row synthetic catalog, peak memory, CLI start-up.

    .venv/bin/python benchmarks/bench_rank.py [--rows 100000]

Figures go into the issue notes; nothing here is asserted.
"""

from __future__ import annotations

import argparse
import resource
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd

ROOT = Path(__file__).resolve().parents[1]


def synthetic_catalog(n: int, seed: int = 1) -> pd.DataFrame:
    """Field-like stars drawn from the grid: a third each by Teff+L, Teff+logg, mass+stage."""
    from prioritize.stars.tracks import PHASE_EEPS, feh_to_z, load_grid

    rng = np.random.default_rng(seed)
    grid = load_grid()
    mass = rng.uniform(0.9, 2.5, n)
    feh = rng.uniform(-0.5, 0.15, n)
    eep = rng.uniform(PHASE_EEPS["main_sequence"][0], PHASE_EEPS["giant_branch"][1] - 1, n)
    cols = grid.interpolate(mass, feh_to_z(feh), eep, columns=["logteff", "logl", "logg"])
    route = rng.integers(0, 3, n)
    df = pd.DataFrame({"star_id": [f"S{i}" for i in range(n)], "feh": feh, "feh_err": 0.1})
    df["teff_k"] = np.where(route < 2, 10 ** cols["logteff"] + rng.normal(0, 80, n), np.nan)
    df["teff_k_err"] = 80.0
    df["logl_lsun"] = np.where(route == 0, cols["logl"] + rng.normal(0, 0.04, n), np.nan)
    df["logl_lsun_err"] = 0.04
    df["logg"] = np.where(route == 1, cols["logg"] + rng.normal(0, 0.1, n), np.nan)
    df["logg_err"] = 0.1
    stage = np.where(eep < PHASE_EEPS["subgiant"][0], "main_sequence",
                     np.where(eep < PHASE_EEPS["giant_branch"][0], "subgiant", "lower_giant_branch"))
    df["mass_msun"] = np.where(route == 2, mass, np.nan)
    df["mass_msun_err"] = 0.05
    df["stage"] = np.where(route == 2, stage, "")
    return df


def main():
    parser = argparse.ArgumentParser()
    parser.add_argument("--rows", type=int, default=100_000)
    parser.add_argument("--samples", type=int, default=None,
                        help="placement samples per star (the uncertainty propagation); default config")
    args = parser.parse_args()
    from prioritize.catalog.validate import validate_catalog
    from prioritize.config import Config, with_overrides
    from prioritize.engine import rank_table
    from prioritize.stars.tracks import load_grid

    cfg = Config() if args.samples is None else with_overrides(
        Config(), {"scoring.samples_per_star": args.samples})
    table = validate_catalog(synthetic_catalog(args.rows))
    t0 = time.perf_counter()
    load_grid()
    rank_table(table.head(200), cfg)              # warm caches (dense placement grid)
    t1 = time.perf_counter()
    out = rank_table(table, cfg)
    t2 = time.perf_counter()
    peak_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(f"rows: {args.rows}, ok: {(out['status'] == 'ok').sum()}, "
          f"samples per star: {cfg.scoring.samples_per_star}")
    print(f"warm-up (grid load + dense placement grid): {t1 - t0:.1f} s")
    print(f"rank: {t2 - t1:.1f} s  ->  {args.rows / (t2 - t1):.0f} stars/s")
    print(f"peak resident memory: {peak_mb:.0f} MB")
    exe = ROOT / ".venv" / "bin" / "prioritize"
    times = []
    for _ in range(5):
        s = time.perf_counter()
        subprocess.run([str(exe), "--help"], check=True, capture_output=True)
        times.append(time.perf_counter() - s)
    print(f"`prioritize --help` start-up: median {np.median(times):.2f} s over 5 runs")


if __name__ == "__main__":
    sys.exit(main())
