"""Shared test set-up: matplotlib's non-interactive Agg backend, caches in a temporary folder.

The environment variables are set at import time, before any test imports matplotlib
or astropy, so that no test writes into the user's home directory; the folder is
removed when the session ends.
"""

from __future__ import annotations

import os
import shutil
import tempfile
from pathlib import Path

_CACHE_ROOT = Path(tempfile.mkdtemp(prefix="prioritize-tests-"))
for _variable, _folder in (("MPLCONFIGDIR", "matplotlib"), ("XDG_CACHE_HOME", "cache"),
                           ("XDG_CONFIG_HOME", "config")):
    (_CACHE_ROOT / _folder).mkdir()
    os.environ[_variable] = str(_CACHE_ROOT / _folder)
for _folder in ("cache/astropy", "config/astropy"):      # astropy uses them only if they exist
    (_CACHE_ROOT / _folder).mkdir()

import matplotlib  # noqa: E402  (after MPLCONFIGDIR is set)

matplotlib.use("Agg", force=True)


def pytest_unconfigure(config):
    """Remove the temporary cache folder at the end of the session."""
    shutil.rmtree(_CACHE_ROOT, ignore_errors=True)
