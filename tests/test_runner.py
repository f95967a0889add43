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


def _nan_aware_equal(a: pd.DataFrame, b: pd.DataFrame):
    """Every column identical, NaN where NaN (no tolerance: the sub-chunks must not
    change a bit)."""
    assert list(a.columns) == list(b.columns) and len(a) == len(b)
    pd.testing.assert_frame_equal(a, b, check_exact=True)


def test_sub_chunks_of_a_batch_give_the_same_table(monkeypatch):
    """The per-sample stages run in sub-chunks of ``chain.STAR_CHUNK`` stars inside a
    batch: forcing 37 stars (an uneven last sub-chunk) gives the table of one pass
    over the batch, for the field sample and for cluster members (whose rotation
    sequences are fitted on the whole batch, so a sub-chunk must not split the fit)."""
    from prioritize import chain

    field = validate_catalog(pd.read_csv(SAMPLES / "field_stars.csv").head(300))
    cluster = validate_catalog(pd.read_csv(SAMPLES / "cluster_members.csv"))
    for table in (field, cluster):
        cfg = with_overrides(Config(), {"run.batch_size": 400})
        monkeypatch.setattr(chain, "STAR_CHUNK", 10_000)
        whole = rank_table(table, cfg, workers=1)
        monkeypatch.setattr(chain, "STAR_CHUNK", 37)
        split = rank_table(table, cfg, workers=1)
        _nan_aware_equal(whole, split)
        assert whole["priority"].notna().sum() > 20
    # the cluster sample's rotation sequence is fitted (else the check above is empty)
    assert (whole["rot_expect_source"].astype(str).str.contains("cluster")).any()
