"""Generated catalogs (hypothesis): whatever a catalog holds, ``check`` and ``rank``
finish without an unhandled exception, every row comes out once with a status, and
every writer's file reads back through the tool's own reader with the same rows.

Per example the catalogs are tiny (1-4 rows) and the chain carries 4 samples per star
so that the 1,000 examples stay within a few minutes; a larger run is
``benchmarks/bench_generated.py``.
"""

from __future__ import annotations

import math
import tempfile
from pathlib import Path

import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as hs

from prioritize.catalog import status as st
from prioritize.catalog.io import read_catalog, read_table, write_table
from prioritize.catalog.validate import check_report, computable_from, validate_catalog
from prioritize.config import load_config, with_overrides
from prioritize.engine import rank_table

EXAMPLES = 1000
# NaN and inf propagate through the chain by design (every row's status says why)
pytestmark = pytest.mark.filterwarnings("ignore::RuntimeWarning")
FORMATS = (".csv", ".tsv", ".ecsv", ".vot", ".fits", ".parquet")

# plausible values, the edges of the allowed ranges, and what users get wrong
_SPECIAL = hs.sampled_from([math.nan, math.inf, -math.inf, 0.0, -1.0, 1e-9, 1e9, 1e308, -0.0])


def _numbers(lo, hi):
    return hs.one_of(hs.floats(lo, hi), _SPECIAL, hs.floats(allow_nan=True, allow_infinity=True))


COLUMNS = {
    "teff_k": _numbers(3000, 12000), "teff_k_err": _numbers(0, 500), "logg": _numbers(0, 5),
    "feh": _numbers(-2.5, 0.6), "feh_err": _numbers(0, 0.5), "logl_lsun": _numbers(-1, 3.5),
    "mass_msun": _numbers(0.5, 4), "g_mag": _numbers(4, 18), "bp_rp": _numbers(-0.5, 3),
    "b_v": _numbers(0, 2), "v_mag": _numbers(4, 18), "parallax_mas": _numbers(-1, 20),
    "parallax_mas_err": _numbers(0, 1), "ebv": _numbers(0, 1), "prot_d": _numbers(0.1, 200),
    "vsini_kms": _numbers(0, 100), "a_li": _numbers(-1, 4), "ra_deg": _numbers(0, 360),
    "dec_deg": _numbers(-90, 90), "cluster_age_gyr": _numbers(0.1, 13),
    "cluster_distance_pc": _numbers(10, 5000),
}
TEXT = hs.text(alphabet=hs.characters(codec="utf-8", exclude_categories=("Cs",)), max_size=6)
STAGES = hs.sampled_from(["main_sequence", "subgiant", "RGB", "rc", "banana", "", " ", "upper_giant_branch"])
IDS = hs.one_of(hs.sampled_from(["a", "a", "b", "", "NaN", "x,y", 'q"q', "t\tab"]), TEXT)


@hs.composite
def catalogs(draw):
    n = draw(hs.integers(1, 4))
    names = draw(hs.lists(hs.sampled_from(sorted(COLUMNS)), min_size=1, max_size=8, unique=True))
    data = {}
    if draw(hs.booleans()):
        data["star_id"] = draw(hs.lists(IDS, min_size=n, max_size=n))
    for name in names:
        values = draw(hs.lists(COLUMNS[name], min_size=n, max_size=n))
        if draw(hs.integers(0, 9)) == 0:          # now and then text in a numeric column
            values[draw(hs.integers(0, n - 1))] = draw(TEXT)
        data[name] = values
    if draw(hs.booleans()):
        data["stage"] = draw(hs.lists(STAGES, min_size=n, max_size=n))
    return pd.DataFrame(data, dtype=object)


_CFG = with_overrides(load_config(), {"scoring.samples_per_star": 4})


def _user_file(folder: Path, catalog: pd.DataFrame) -> Path:
    path = folder / "cands.parquet"
    # stored as text, as a user's file would give it (mixed types in one column)
    catalog.astype(str).where(catalog.notna(), None).to_parquet(path)
    return path


@settings(max_examples=EXAMPLES, deadline=None, suppress_health_check=[HealthCheck.too_slow],
          derandomize=True)
@given(catalog=catalogs(), number=hs.integers(0, 2**31))
def test_generated_catalogs_through_check_and_rank(catalog, number):
    """check and rank in-process: no exception, every row once with a status, both
    agree on which rows cannot be placed; one ranked table in ten goes through a writer
    (cycling the formats) and back."""
    table = canonical(catalog)
    validated = validate_catalog(table, path="generated")
    assert len(validated) == len(catalog) and validated["status"].isin(st.ALL).all()
    routes = computable_from(validated)
    report = check_report(validated.assign(computable_from=routes))
    assert f"{len(catalog)} rows checked" in report

    ranked = rank_table(validated, _CFG)
    assert len(ranked) == len(catalog)                        # every row accounted for
    assert sorted(ranked["star_id"].astype(str)) == sorted(validated["star_id"].astype(str))
    assert ranked["status"].isin(st.ALL).all()
    # only computed rows are ranked (a computed star without a magnitude has no exposure)
    assert (ranked.loc[ranked["rank"].notna(), "status"] == st.OK).all()
    ids = validated["star_id"].astype(str)
    if ids.is_unique:                      # check and rank agree on what cannot be placed
        route = pd.Series(routes.to_numpy(), index=ids)
        got = ranked.set_index(ranked["star_id"].astype(str))["status"]
        for sid in ids[(validated["status"] == st.OK).to_numpy()]:
            assert (got[sid] == st.MISSING_INPUTS) == (route[sid] == "nothing"), sid

    if number % 10 == 0:
        fmt = FORMATS[(number // 10) % len(FORMATS)]
        with tempfile.TemporaryDirectory() as folder:
            path = write_table(ranked, Path(folder) / f"ranked{fmt}", {"seed": 1})
            back, meta = read_table(path)
        assert len(back) == len(ranked) and meta.get("seed") == 1
        assert list(back["status"]) == list(ranked["status"])


def canonical(catalog: pd.DataFrame) -> pd.DataFrame:
    """The generated table as the reader hands it on: canonical names, a star_id."""
    from prioritize.catalog.io import _ensure_star_id
    table = catalog.copy()
    _ensure_star_id(table)
    return table


@settings(max_examples=100, deadline=None, derandomize=True)
@given(catalog=catalogs())
def test_generated_catalogs_through_every_writer_and_back(catalog):
    """The raw generated table (text, numbers, gaps, control characters) through each
    writer and the tool's reader: same number of rows, the ids readable."""
    with tempfile.TemporaryDirectory() as folder:
        folder = Path(folder)
        table, _ = read_catalog(_user_file(folder, catalog))
        for fmt in FORMATS:
            path = write_table(table, folder / f"t{fmt}", {"k": "v"})
            back, meta = read_table(path)
            assert len(back) == len(table), fmt
            assert meta.get("k") == "v", fmt
            assert set(back.columns) >= {str(c) for c in table.columns if "\x00" not in str(c)}, fmt
