"""Benchmark: `prioritize rank` on seeded synthetic Parquet catalogs, through the real CLI.

    .venv/bin/python benchmarks/bench_rank.py [--rows 100000[,1000000]] [--workers 1,2]

For each size and worker count: wall time, stars/s, peak resident memory summed over
the CLI process and its workers (sampled from /proc every 0.2 s), and rank / I/O
floor, the floor being pyarrow reading the input and writing as many float columns
as the ranked output has, measured in the same run.  Then the start-up of
``prioritize --help``.  The machine may be shared: the load average is printed with
the figures.  Figures go into notes; nothing here is asserted.
"""

from __future__ import annotations

import argparse
import os
import tempfile
import threading
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


def _tree_rss_mb(pid: int) -> tuple[float, float]:
    """Resident memory (MB) of ``pid`` and all its descendants (Linux /proc): the sum
    of RSS (shared pages counted in every process) and of PSS (shared pages split)."""
    total, pss, todo = 0.0, 0.0, [pid]
    while todo:
        p = todo.pop()
        try:
            with open(f"/proc/{p}/status") as f:
                for line in f:
                    if line.startswith("VmRSS:"):
                        total += float(line.split()[1]) / 1024
            with open(f"/proc/{p}/smaps_rollup") as f:
                for line in f:
                    if line.startswith("Pss:"):
                        pss += float(line.split()[1]) / 1024
            for task in os.listdir(f"/proc/{p}/task"):
                with open(f"/proc/{p}/task/{task}/children") as f:
                    todo.extend(int(c) for c in f.read().split())
        except (OSError, ValueError):
            continue
    return total, pss


def _run_sampled(cmd) -> tuple[float, tuple[float, float]]:
    """Run ``cmd``; wall time (s) and peak summed RSS and PSS (MB) of its process tree."""
    start = time.perf_counter()
    proc = subprocess.Popen(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
    peak = [(0.0, 0.0)]

    def sample():
        while proc.poll() is None:
            rss, pss = _tree_rss_mb(proc.pid)
            peak[0] = (max(peak[0][0], rss), max(peak[0][1], pss))
            time.sleep(0.2)
    thread = threading.Thread(target=sample, daemon=True)
    thread.start()
    _, err = proc.communicate()
    wall = time.perf_counter() - start
    thread.join()
    if proc.returncode != 0:
        raise SystemExit(f"{' '.join(map(str, cmd))} failed:\n{err}")
    return wall, peak[0]


def _io_floor(catalog: Path, n_columns: int, folder: Path) -> float:
    import pyarrow as pa
    import pyarrow.parquet as pq
    start = time.perf_counter()
    table = pq.read_table(catalog)
    n = table.num_rows
    floats = pa.table({f"c{i}": np.random.default_rng(i).random(n) for i in range(n_columns)})
    pq.write_table(floats, folder / "floor.parquet")
    return time.perf_counter() - start


def _ints(text: str) -> list[int]:
    return [int(float(x)) for x in text.split(",") if x.strip()]


def main():
    parser = argparse.ArgumentParser()
    parser.add_argument("--rows", default="100000", help="catalog sizes, comma-separated")
    parser.add_argument("--workers", default="1,2", help="worker counts, comma-separated")
    parser.add_argument("--samples", type=int, default=None,
                        help="placement samples per star (the uncertainty propagation); default config")
    args = parser.parse_args()
    exe = ROOT / ".venv" / "bin" / "prioritize"
    print(f"load average at start: {os.getloadavg()[0]:.2f} {os.getloadavg()[1]:.2f} "
          f"{os.getloadavg()[2]:.2f} on {os.cpu_count()} cores (shared machine: timings are noisy)")
    with tempfile.TemporaryDirectory(prefix="bench-rank-") as tmp:
        folder = Path(tmp)
        options = []
        if args.samples is not None:
            (folder / "samples.toml").write_text(f"[scoring]\nsamples_per_star = {args.samples}\n")
            options = ["--config", str(folder / "samples.toml")]
        warm = folder / "warm.parquet"
        synthetic_catalog(200).to_parquet(warm)
        wall, _ = _run_sampled([exe, "rank", warm, "-o", folder / "warm_out.parquet", "--workers", "1",
                                *options])
        print(f"warm-up (200 rows; builds the cached tables on first use): {wall:.1f} s")
        for rows in _ints(args.rows):
            catalog = folder / f"cat_{rows}.parquet"
            synthetic_catalog(rows).to_parquet(catalog)
            base = None
            for workers in _ints(args.workers):
                out = folder / f"out_{rows}_{workers}.parquet"
                wall, peak = _run_sampled([exe, "rank", catalog, "-o", out, "--workers", str(workers),
                                           *options])
                import pyarrow.parquet as pq
                n_cols = pq.read_metadata(out).num_columns
                floor = _io_floor(catalog, n_cols, folder)
                base = base or wall
                print(f"rows {rows:>9,}  workers {workers}: {wall:8.1f} s  {rows / wall:8.0f} stars/s  "
                      f"peak RSS {peak[0]:6.0f} MB (PSS {peak[1]:6.0f})  rank/IO floor {wall / floor:7.0f} (floor {floor:.2f} s)  "
                      f"speed-up {base / wall:.2f}x  load {os.getloadavg()[0]:.2f}", flush=True)
                out.unlink()
            catalog.unlink()
    times = []
    for _ in range(5):
        s = time.perf_counter()
        subprocess.run([str(exe), "--help"], check=True, capture_output=True)
        times.append(time.perf_counter() - s)
    print(f"`prioritize --help` start-up: median {np.median(times):.2f} s over 5 runs")
    times = []
    for _ in range(5):
        s = time.perf_counter()
        subprocess.run([str(exe), "check", "--help"], check=True, capture_output=True)
        times.append(time.perf_counter() - s)
    print(f"`prioritize check --help` start-up: median {np.median(times):.2f} s over 5 runs")


if __name__ == "__main__":
    sys.exit(main())
