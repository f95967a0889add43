"""Benchmark: peak resident memory of each stage of one batch of the chain, in one process.

    .venv/bin/python benchmarks/bench_batch_memory.py [--rows 5000] [--chunks 1000,5000]

Runs :func:`prioritize.chain.run_batch` on a seeded synthetic batch (the catalog of
``bench_rank.py``) once per sub-chunk size (``chain.STAR_CHUNK``; a size >= the
batch is the batch in one pass) and prints, per stage, the resident memory at its
start and its peak (Linux: the peak is reset through ``/proc/self/clear_refs`` at
each stage, so stages do not see each other's peaks), the memory of the loaded
tables before the batch, and the wall time.  Linux only; nothing is asserted.
"""

from __future__ import annotations

import argparse
import functools
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))

STAGES = ("_place", "_deposition", "_giant_branch", "_envelope_and_lithium", "_lifetimes",
          "_lifetime_spread", "_engulfment_odds", "_other_planets", "_measured_lithium_columns",
          "_rotation_columns", "_observing_columns")


def _status_mb(key: str) -> float:
    with open("/proc/self/status") as f:
        for line in f:
            if line.startswith(key):
                return float(line.split()[1]) / 1024
    return float("nan")


def _reset_peak() -> None:
    with open("/proc/self/clear_refs", "w") as f:
        f.write("5")


def _instrument(chain, records: dict) -> None:
    depth = [0]
    for name in STAGES:
        func = getattr(chain, name)

        def wrapped(*args, _func=func, _name=name, **kwargs):
            if depth[0]:
                return _func(*args, **kwargs)
            depth[0] += 1
            start = _status_mb("VmRSS")
            _reset_peak()
            try:
                return _func(*args, **kwargs)
            finally:
                depth[0] -= 1
                peak = _status_mb("VmHWM")
                old = records.get(_name, (0.0, 0.0, 0))
                records[_name] = (max(old[0], peak - start), max(old[1], peak), old[2] + 1)
        setattr(chain, name, functools.wraps(func)(wrapped))


def main():
    parser = argparse.ArgumentParser()
    parser.add_argument("--rows", type=int, default=5000, help="rows in the batch")
    parser.add_argument("--chunks", default="1000,5000", help="sub-chunk sizes, comma-separated")
    args = parser.parse_args()
    from bench_rank import synthetic_catalog
    from prioritize import chain
    from prioritize.catalog.validate import validate_catalog
    from prioritize.config import Config
    from prioritize.runner import _release_free_memory, warm_up
    from prioritize.stars.tracks import load_grid

    grid = load_grid()
    warm_up(grid)
    table = validate_catalog(synthetic_catalog(args.rows))
    cfg = Config()
    print(f"loaded tables (grid, deepest-envelope table, dense placement grid): "
          f"RSS {_status_mb('VmRSS'):.0f} MB before the batch")
    for size in (int(x) for x in args.chunks.split(",") if x.strip()):
        chain.STAR_CHUNK = size
        records: dict = {}
        _instrument(chain, records)
        start = time.perf_counter()
        out = chain.run_batch(table, cfg, grid)
        wall = time.perf_counter() - start
        peak = max(r[1] for r in records.values())
        print(f"batch of {args.rows} rows, sub-chunks of {size}: {wall:.1f} s, peak RSS {peak:.0f} MB; "
              f"output frame {out.memory_usage(deep=True).sum() / 1e6:.0f} MB")
        for name in STAGES:
            if name in records:
                above, top, calls = records[name]
                print(f"    {name:28s} peak {top:6.0f} MB  (+{above:5.0f} MB over its start; {calls} call(s))")
        for name in STAGES:         # undo the wrappers, free the heap before the next size
            setattr(chain, name, getattr(chain, name).__wrapped__)
        _release_free_memory()


if __name__ == "__main__":
    sys.exit(main())
