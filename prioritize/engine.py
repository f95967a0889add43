"""The chain and its runner under one name.

The physics chain of a batch lives in :mod:`prioritize.chain`, the batch and process
runner in :mod:`prioritize.runner`; every name of both is importable from here.
"""

from __future__ import annotations

from . import chain as _chain
from .chain import *  # noqa: F401,F403  (the public names of the chain)
from .chain import (ENVELOPE_OUTPUT_COLUMNS, OUTPUT_COLUMNS, planet_composition, run_batch,  # noqa: F401
                    signature_at)
from .runner import (available_cores, configured_grid, load_baseline_reference, map_batches,  # noqa: F401
                     rank_row, rank_table)


def __getattr__(name):
    """Private helpers of the chain (``engine._lithium_at``, ...) stay reachable here."""
    try:
        return getattr(_chain, name)
    except AttributeError:
        raise AttributeError(f"module 'prioritize.engine' has no attribute {name!r}") from None
