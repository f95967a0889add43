"""The runner: the same ranked table for any batch size and number of worker processes."""

from pathlib import Path

import pandas as pd

from prioritize.catalog.validate import validate_catalog
from prioritize.config import Config, with_overrides
from prioritize.engine import available_cores, rank_table

SAMPLES = Path(__file__).resolve().parents[1] / "sample_catalogs"


def test_workers_and_batch_sizes_give_the_same_table():
    """Field sample (no cluster column), 400 rows: one process with one batch against two
    processes with batches of 100 and of 150 rows (an uneven last batch)."""
    table = validate_catalog(pd.read_csv(SAMPLES / "field_stars.csv").head(400))
    one = rank_table(table, with_overrides(Config(), {"run.batch_size": 400}), workers=1)
    for size in (100, 150):
        seen = []
        two = rank_table(table, with_overrides(Config(), {"run.batch_size": size}), workers=2,
                         progress=lambda done, total: seen.append((done, total)))
        pd.testing.assert_frame_equal(one, two)
        assert seen[-1] == (400, 400) and [d for d, _ in seen] == sorted(d for d, _ in seen)
    assert len(one) == 400 and one["priority"].notna().sum() > 50


def test_available_cores_is_positive():
    assert available_cores() >= 1
