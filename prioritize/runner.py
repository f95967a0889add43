"""The runner: the chain (:func:`prioritize.chain.run_batch`) mapped over batches and processes.

A batch's numbers depend only on its rows and their places in the catalog (the
placement draws are fixed per row, :class:`prioritize.stars.placement.RowUniforms`),
so the ranked table is the same for any number of worker processes.  Batches are
``[run] batch_size`` rows; the rotation sequences of cluster members are fitted per
batch, so keep one cluster's members in one batch (the default 5,000 rows usually do).

Worker processes are forked after the track grid, the tables of track-point physics
(:mod:`prioritize.track_tables`) and the dense placement grid are loaded, so they share
them read-only instead of rebuilding them; where ``fork`` is not available they are
started fresh and read the tables from the disk cache.
"""

from __future__ import annotations

import multiprocessing
import os
from concurrent.futures import ProcessPoolExecutor

import pandas as pd

from . import score
from .catalog import status as st
from .chain import deepest_envelope_table, run_batch
from .config import Config
from .errors import PrioritizeError
from .stars.tracks import TrackGrid, load_grid


def available_cores() -> int:
    """CPU cores this process may run on (its affinity mask where the system has one)."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except (AttributeError, OSError):
        return max(1, os.cpu_count() or 1)


def load_baseline_reference(cfg: Config):
    """The configured reference population (None for the built-in prior)."""
    if cfg.baseline.source != "reference":
        return None
    if not cfg.baseline.reference:
        raise PrioritizeError("baseline.source = 'reference' needs a table: set baseline.reference "
                              "in the config or pass --reference FILE")
    from .lithium.reference import load_reference
    b = cfg.baseline
    return load_reference(b.reference, teff_step=b.teff_step, logg_step=b.logg_step,
                          feh_step=b.feh_step or None, min_count=b.min_count)


def configured_grid(cfg: Config) -> TrackGrid:
    """The user's tracks when the config names them (``run.tracks``), else the built-in grid."""
    if cfg.run.tracks:
        from .stars.track_sources import load_tracks
        return load_tracks(cfg.run.tracks)
    return load_grid()


def warm_up(grid: TrackGrid) -> None:
    """Load (or build and cache) what every batch reads: the deepest-envelope table and
    the dense placement grid."""
    from .stars.placement import _dense_grid
    deepest_envelope_table(grid)
    _dense_grid(grid)
    _release_free_memory()


def _release_free_memory() -> None:
    """Give the C heap's free pages back to the system (glibc ``malloc_trim``), e.g. the
    temporaries of building the dense placement grid (~120 MB), before worker processes
    are forked; a no-op where the C library has no such call."""
    import ctypes
    import ctypes.util
    try:
        libc = ctypes.CDLL(ctypes.util.find_library("c") or "libc.so.6")
        libc.malloc_trim(0)
    except (OSError, AttributeError):
        pass


_WORKER: dict = {}


def _init_worker(cfg, grid, reference):
    _WORKER.update(cfg=cfg, grid=grid, reference=reference)


def _run_in_worker(task):
    start, chunk = task
    w = _WORKER
    return contained_batch(chunk, w["cfg"], w["grid"], w["reference"], first_row=start)


def contained_batch(df: pd.DataFrame, cfg: Config, grid: TrackGrid, reference=None,
                    first_row: int = 0) -> pd.DataFrame:
    """:func:`~prioritize.chain.run_batch`, with a failure kept to the rows that cause it.

    When the chain raises on a batch (anything but a package error, which concerns the
    whole run), the batch is split in halves and each half run again, down to single
    rows; a row that still fails is written with status ``computation_failed`` and the
    exception's message in its note, its inputs passed through, and the run goes on.
    Each row keeps its own placement draws (``first_row``), so the other rows' numbers
    do not change, except that cluster rotation sequences are then fitted per part."""
    try:
        return run_batch(df, cfg, grid, None, reference, first_row=first_row)
    except PrioritizeError:
        raise
    except Exception as exc:  # noqa: BLE001 - confined to the failing rows below
        if len(df) <= 1:
            failed = df.copy()
            failed["status"] = st.COMPUTATION_FAILED
            message = " ".join(f"{type(exc).__name__}: {exc}".split())[:300]
            failed["note"] = (f"computation failed ({message}); this is a fault of the tool, "
                              "please report it with this row")
            return run_batch(failed, cfg, grid, None, reference, first_row=first_row)
        half = len(df) // 2
        return pd.concat([contained_batch(df.iloc[:half], cfg, grid, reference, first_row),
                          contained_batch(df.iloc[half:], cfg, grid, reference, first_row + half)],
                         ignore_index=True)


def _batches(df: pd.DataFrame, size: int):
    for start in range(0, len(df), size):
        yield start, df.iloc[start:start + size]


def map_batches(df: pd.DataFrame, cfg: Config, grid: TrackGrid, reference=None, workers: int = 1,
                progress=None):
    """Yield the chain's output of each batch of ``df``, in catalog order.

    ``workers`` > 1 runs the batches in that many processes, with at most two batches
    per worker in flight (bounded memory)."""
    size = cfg.run.batch_size
    total = len(df)
    n_batches = -(-total // size)
    workers = max(1, min(int(workers), n_batches))
    done = 0
    if workers == 1:
        for start, chunk in _batches(df, size):
            out = contained_batch(chunk, cfg, grid, reference, first_row=start)
            done += len(chunk)
            if progress is not None:
                progress(done, total)
            yield out
        return
    warm_up(grid)
    methods = multiprocessing.get_all_start_methods()
    ctx = multiprocessing.get_context("fork" if "fork" in methods else "spawn")
    with ProcessPoolExecutor(workers, mp_context=ctx, initializer=_init_worker,
                             initargs=(cfg, grid, reference)) as pool:
        pending = []
        tasks = _batches(df, size)
        for task in tasks:
            pending.append((len(task[1]), pool.submit(_run_in_worker, task)))
            if len(pending) >= 2 * workers:
                rows, fut = pending.pop(0)
                done += rows
                out = fut.result()
                if progress is not None:
                    progress(done, total)
                yield out
        for rows, fut in pending:
            done += rows
            out = fut.result()
            if progress is not None:
                progress(done, total)
            yield out


def rank_table(df: pd.DataFrame, cfg: Config, grid: TrackGrid | None = None,
               progress=None, workers: int = 1) -> pd.DataFrame:
    """Run the chain over batches (in ``workers`` processes) and return the ranked
    table (every input row)."""
    grid = grid or configured_grid(cfg)
    reference = load_baseline_reference(cfg)
    parts = list(map_batches(df, cfg, grid, reference, workers=workers, progress=progress))
    out = pd.concat(parts, ignore_index=True) if parts else run_batch(df, cfg, grid, None, reference)
    del parts                       # the batches' frames: the table is held once from here
    return score.assign_ranks(out)


def rank_row(df: pd.DataFrame, cfg: Config, star_index: int, grid: TrackGrid | None = None) -> pd.Series:
    """The output row of ``df.iloc[star_index]`` exactly as :func:`rank_table` computes it.

    Runs only the batch that holds the row (the cluster sequences are fitted per
    batch) with the rows' own placement draws, so every number is that of the full
    ranking; ``rank`` is NaN (the rank number needs the whole catalog)."""
    size = cfg.run.batch_size
    start = (star_index // size) * size
    out = contained_batch(df.iloc[start:start + size], cfg, grid or configured_grid(cfg),
                          load_baseline_reference(cfg), first_row=start)
    return out.iloc[star_index - start]
