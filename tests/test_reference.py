"""The reference-population baseline: the censored estimator against a hand-worked
example and scipy, the scatter against 1.4826 × MAD, recovery of known bin medians
with upper limits, the fallback chain, and reading a reference file."""

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from prioritize.errors import CatalogError, ConfigError, PrioritizeError
from prioritize.lithium.reference import (GAUSSIAN_IQR_IN_SIGMA, SOURCE_BIN, SOURCE_LIMITS,
                                          SOURCE_NONE, ReferenceBaseline, censored_quantiles,
                                          load_reference, scatter_from_quartiles)

SAMPLE_REFERENCE = Path(__file__).resolve().parents[1] / "sample_catalogs" / "reference_lithium.csv"

# Exact arithmetic in the hand-worked examples: only float rounding separates the answers.
EXACT_TOL = 1e-12
# A step of the distribution function this close to q is taken as equal to q (scipy's
# products carry ~1e-15 rounding per factor).
STEP_TOL = 1e-9
# Normal quantile table: Phi^-1(0.75) = 0.6745 to 4 decimals (from memory of any
# statistics handbook's table; scipy's norm.ppf checks it below).
NORMAL_TABLE_TOL = 5e-5
# 1.4826 × MAD and IQR / 1.349 on the same Gaussian sample of 4000 differ by 0.3% of
# sigma rms (measured over 200 seeds, largest 1.0%); 1.5% is 5 rms.
SCATTER_VS_MAD_TOL = 0.015
# Kaplan–Meier median of 1500 stars, sigma 0.3 dex, ~32% limits: 0.011 dex rms error
# (measured over 300 seeds, largest 0.040); 0.04 dex is ~3.7 rms.  The scatter: 0.011
# dex rms (largest 0.031).
MEDIAN_TOL_DEX = 0.04
SCATTER_TOL_DEX = 0.04


def _worked_example():
    """Six detections and three upper limits, A(Li) in dex.

    Sorted: 1.0, 1.5, <1.8, 2.0, <2.2, 2.5, <2.8, 3.0, 3.5 (n = 9).  At each detection
    x_j, r_j counts the values (limits included) <= x_j, and
    F(x) = prod_{x_j > x} (1 - 1/r_j):

    ====  ===  ========  ===================================
    x_j   r_j  1 - 1/r   F(x_j) = product of factors above
    ====  ===  ========  ===================================
    3.5   9    8/9       1
    3.0   8    7/8       8/9        = 0.889
    2.5   6    5/6       8/9 · 7/8  = 7/9   = 0.778
    2.0   4    3/4       7/9 · 5/6  = 35/54 = 0.648
    1.5   2    1/2       35/54 · 3/4 = 35/72 = 0.486
    1.0   1    0         35/72 · 1/2 = 35/144 = 0.243
    ====  ===  ========  ===================================

    Smallest x with F >= q: q25 = 1.5, median = 2.0, q75 = 2.5, so the scatter is
    (2.5 - 1.5) / 1.349 = 0.741 dex.  Treating the limits as detections gives the
    median 2.2; dropping them, 2.25.
    """
    values = np.array([1.0, 1.5, 1.8, 2.0, 2.2, 2.5, 2.8, 3.0, 3.5])
    return values, np.isin(values, [1.8, 2.2, 2.8])


def test_kaplan_meier_matches_the_hand_worked_example():
    values, limits = _worked_example()
    np.testing.assert_allclose(censored_quantiles(values, limits), [1.5, 2.0, 2.5], atol=EXACT_TOL)
    assert np.isclose(np.median(values), 2.2) and np.isclose(np.median(values[~limits]), 2.25)
    np.testing.assert_allclose(scatter_from_quartiles(1.5, 2.0, 2.5), 1.0 / 1.349, rtol=1e-3)


def test_kaplan_meier_matches_scipy_on_the_flipped_variable():
    """scipy.stats.ecdf on CensoredData (scipy 1.17 supports right-censoring only):
    -A(Li) with the limits as right-censored times.  Its survival function at the
    event time -x_j is P(X < x_j) = F(x_j-), so F(x_j) is the value at the next
    larger detection (1 at the largest); the quantile is the smallest detection with
    F >= q, or the midpoint with the next detection where F = q on a flat step (as
    happens here at q = 0.9, above the highest limit)."""
    rng = np.random.default_rng(11)
    truth = rng.normal(2.0, 0.4, 300)
    threshold = 2.0 + rng.uniform(-0.9, 0.4, truth.size)
    limits = truth < threshold
    values = np.where(limits, threshold, truth)
    result = stats.ecdf(stats.CensoredData(uncensored=-values[~limits], right=-values[limits]))
    detected = -result.sf.quantiles[::-1]                 # ascending A(Li)
    cdf_below = result.sf.probabilities[::-1]             # F(x_j-)
    cdf_at = np.append(cdf_below[1:], 1.0)                # F(x_j)
    q = np.array([0.1, 0.25, 0.5, 0.75, 0.9])
    expected = []
    for p in q:
        i = np.argmax(cdf_at >= p - STEP_TOL)
        flat = abs(cdf_at[i] - p) < STEP_TOL
        expected.append(np.nan if cdf_below[0] >= p else
                        0.5 * (detected[i] + detected[i + 1]) if flat else detected[i])
    np.testing.assert_allclose(censored_quantiles(values, limits, q), expected, atol=EXACT_TOL)


def test_groups_give_the_same_answer_as_separate_calls():
    rng = np.random.default_rng(3)
    values = rng.normal(1.5, 0.5, 400).round(2)           # rounding makes ties
    limits = rng.random(400) < 0.3
    groups = rng.integers(0, 6, 400)
    groups[groups == 4] = 5                               # label 4 left empty
    together = censored_quantiles(values, limits, groups=groups)
    for label in range(6):
        alone = censored_quantiles(values[groups == label], limits[groups == label])
        np.testing.assert_array_equal(together[label], alone)
    assert np.isnan(together[4]).all()


@pytest.mark.parametrize("n", [101, 100])
def test_without_limits_the_median_is_numpys(n):
    values = np.random.default_rng(n).normal(2.0, 0.5, n).round(1)    # with ties
    no_limits = np.zeros(n, dtype=bool)
    assert censored_quantiles(values, no_limits, q=[0.5])[0] == np.median(values)
    np.testing.assert_array_equal(censored_quantiles(values, no_limits),
                                  np.quantile(values, [0.25, 0.5, 0.75], method="averaged_inverted_cdf"))


def test_limits_below_every_detection_leave_the_lower_quantiles_undefined():
    """<0.5, <0.8, 1.0, 2.0, 3.0: F(3.0) = 1, F(2.0) = 4/5, F(1.0) = 4/5 · 3/4 = 3/5 and
    F_0 = 3/5 · 2/3 = 2/5 lies somewhere below 1.0.  q25 <= F_0 is undefined; the
    median is 1.0 and q75 is 2.0; the scatter falls back to (q75 - q50) / 0.6745."""
    values = np.array([0.5, 0.8, 1.0, 2.0, 3.0])
    limits = np.array([True, True, False, False, False])
    quartiles = censored_quantiles(values, limits)
    assert np.isnan(quartiles[0])
    np.testing.assert_allclose(quartiles[1:], [1.0, 2.0], atol=EXACT_TOL)
    np.testing.assert_allclose(scatter_from_quartiles(*quartiles), 1.0 / 0.6745, rtol=NORMAL_TABLE_TOL)
    assert np.isnan(censored_quantiles(values, np.ones(5, dtype=bool))).all()


def test_scatter_from_quartiles_is_the_mad_scatter_for_a_gaussian():
    assert abs(GAUSSIAN_IQR_IN_SIGMA - 2 * 0.6745) < 2 * NORMAL_TABLE_TOL
    assert GAUSSIAN_IQR_IN_SIGMA == pytest.approx(2 * stats.norm.ppf(0.75), abs=EXACT_TOL)
    sample = np.random.default_rng(7).normal(0.0, 1.0, 4000)
    scatter = scatter_from_quartiles(*censored_quantiles(sample, np.zeros(sample.size, dtype=bool)))
    mad = stats.median_abs_deviation(sample, scale="normal")          # 1.4826 × MAD
    assert abs(scatter - mad) < SCATTER_VS_MAD_TOL


def test_bad_arguments_raise_package_errors():
    with pytest.raises(PrioritizeError, match="strictly between 0 and 1"):
        censored_quantiles([1.0, 2.0], [False, False], q=[0.0])
    with pytest.raises(PrioritizeError, match="one flag per value"):
        censored_quantiles([1.0, 2.0], [False])
    with pytest.raises(PrioritizeError, match="true/false"):
        censored_quantiles([1.0, 2.0], [np.nan, 0.0])
    with pytest.raises(ConfigError, match="teff_step"):
        ReferenceBaseline.from_table(_table([5000.0], [3.0], [1.0]), teff_step=0.0)
    with pytest.raises(ConfigError, match="min_count"):
        ReferenceBaseline.from_table(_table([5000.0], [3.0], [1.0]), min_count=0)


def _table(teff, logg, a_li, limit=None, feh=None):
    table = pd.DataFrame({"teff_k": teff, "logg": logg, "a_li": a_li})
    if limit is not None:
        table["a_li_is_limit"] = limit
    if feh is not None:
        table["feh"] = feh
    return table


def _censored_population(rng, medians, n_per_bin, sigma=0.3):
    """Stars in 100 K × 0.25 dex bins at logg 3.0-3.25, Teff 4600, 5000, ...; true A(Li)
    Gaussian about each bin's median; each star has its own detection threshold
    (median - 0.9 to median + 0.4 dex, like varying S/N), below which only the
    threshold is reported as an upper limit (~32% of the stars)."""
    teff_lo = 4600.0 + 400.0 * np.arange(len(medians))
    bin_of = np.repeat(np.arange(len(medians)), n_per_bin)
    truth = rng.normal(np.asarray(medians)[bin_of], sigma)
    threshold = np.asarray(medians)[bin_of] + rng.uniform(-0.9, 0.4, truth.size)
    limit = truth < threshold
    table = _table(teff_lo[bin_of] + rng.uniform(0, 100, truth.size), rng.uniform(3.0, 3.25, truth.size),
                   np.where(limit, threshold, truth), limit)
    return table, teff_lo + 50.0


def test_known_bin_medians_are_recovered_and_limits_matter():
    medians = [1.0, 1.6, 2.2, 2.8]
    table, centres = _censored_population(np.random.default_rng(2024), medians, 1500)
    assert 0.25 < table["a_li_is_limit"].mean() < 0.4
    found = ReferenceBaseline.from_table(table).lookup(centres, 3.1)
    assert (found["baseline_source"] == SOURCE_BIN).all() and (found["baseline_n"] == 1500).all()
    np.testing.assert_allclose(found["a_li_base"], medians, atol=MEDIAN_TOL_DEX)
    np.testing.assert_allclose(found["a_li_scatter"], 0.3, atol=SCATTER_TOL_DEX)

    as_detections = ReferenceBaseline.from_table(table.drop(columns="a_li_is_limit")).lookup(centres, 3.1)
    assert (as_detections["a_li_base"] - np.asarray(medians) > 2 * MEDIAN_TOL_DEX).all()
    dropped = ReferenceBaseline.from_table(table[~table["a_li_is_limit"]]).lookup(centres, 3.1)
    assert (dropped["a_li_base"] - np.asarray(medians) > MEDIAN_TOL_DEX).all()


def test_fallback_chain_own_bin_then_merged_then_no_coverage():
    """25 stars in the bin 5000-5100 K × logg 3.0-3.25 (A(Li) 1.0 ... 3.4), 5 in
    6000-6100 K; min_count = 20."""
    a_li = np.linspace(1.0, 3.4, 25)
    table = _table(np.r_[np.full(25, 5050.0), np.full(5, 6050.0)], np.full(30, 3.1),
                   np.r_[a_li, np.full(5, 2.0)])
    baseline = ReferenceBaseline.from_table(table, min_count=20)
    found = baseline.lookup([5050.0, 5150.0, 5250.0, 5450.0, 6050.0, 9000.0, np.nan], 3.1)
    assert list(found["baseline_source"]) == [
        SOURCE_BIN, "reference, merged 3x3", "reference, merged 5x5", SOURCE_NONE, SOURCE_NONE,
        SOURCE_NONE, SOURCE_NONE]
    assert list(found["baseline_n"]) == [25, 25, 25, 0, 5, 0, 0]
    assert (found["a_li_base"][:3] == np.median(a_li)).all()
    assert np.isnan(found["a_li_base"][3:]).all() and np.isnan(found["a_li_scatter"][3:]).all()
    # logg is binned too: two logg bins (0.5 dex) away is outside the 3x3 block.
    assert baseline.lookup(5050.0, 3.6)["baseline_source"] == "reference, merged 5x5"
    assert baseline.lookup(5050.0, 4.1)["baseline_source"] == SOURCE_NONE


def test_reference_covering_none_of_the_stars_region():
    table, _ = _censored_population(np.random.default_rng(5), [2.0], 100)
    found = ReferenceBaseline.from_table(table).lookup(np.array([[3500.0, 7000.0], [4650.0, 4650.0]]),
                                                      np.array([[2.0, 4.0], [1.0, 4.5]]))
    assert found["a_li_base"].shape == (2, 2)
    assert np.isnan(found["a_li_base"]).all() and (found["baseline_source"] == SOURCE_NONE).all()


def test_bin_dominated_by_low_limits_gives_no_baseline():
    """15 limits below 10 detections: F_0 = 15/25 > 0.5, the median is undefined."""
    a_li = np.r_[np.linspace(0.0, 0.5, 15), np.linspace(1.0, 2.0, 10)]
    limit = np.r_[np.ones(15, dtype=bool), np.zeros(10, dtype=bool)]
    baseline = ReferenceBaseline.from_table(_table(np.full(25, 5050.0), np.full(25, 3.1), a_li, limit))
    found = baseline.lookup(5050.0, 3.1)
    assert found["baseline_source"] == SOURCE_LIMITS and found["baseline_n"] == 25
    assert np.isnan(found["a_li_base"])
    row = baseline.bin_table().iloc[0]
    assert (row["teff_lo_k"], row["teff_hi_k"], row["n"], row["n_limits"]) == (5000.0, 5100.0, 25, 15)


def test_metallicity_bins_separate_populations():
    rng = np.random.default_rng(9)
    table = _table(np.full(60, 5050.0), np.full(60, 3.1), np.r_[rng.normal(1.0, 0.1, 30),
                                                                rng.normal(2.0, 0.1, 30)],
                   feh=np.r_[np.full(30, -0.75), np.full(30, 0.15)])
    baseline = ReferenceBaseline.from_table(table, feh_step=0.1)
    found = baseline.lookup(5050.0, 3.1, [-0.75, 0.15])
    np.testing.assert_allclose(found["a_li_base"], [1.0, 2.0], atol=0.1)   # 0.1 = the spread drawn
    assert list(found["baseline_n"]) == [30, 30]
    assert baseline.lookup(5050.0, 3.1, -0.55)["baseline_source"] == "reference, merged 5x5x5"
    assert baseline.lookup(5050.0, 3.1, -0.35)["baseline_source"] == SOURCE_NONE
    with pytest.raises(PrioritizeError, match="feh"):
        baseline.lookup(5050.0, 3.1)


def test_sample_reference_file_is_read_and_covers_giants():
    raw = pd.read_csv(SAMPLE_REFERENCE)
    baseline = load_reference(SAMPLE_REFERENCE)
    # Rows outside the catalog's A(Li) range (-1 to 5 dex) are left out and said so.
    kept = raw["a_li"].between(-1.0, 5.0)
    assert baseline.n_stars == kept.sum() and baseline.n_limits == raw["a_li_is_limit"][kept].sum()
    assert any("left out" in m for m in baseline.messages) == (not kept.all())
    found = baseline.lookup([4750.0, 4850.0], [2.6, 2.4])
    assert np.isfinite(found["a_li_base"]).all() and (found["baseline_n"] >= 20).all()


def test_survey_spellings_limit_markers_and_parquet(tmp_path):
    """VizieR-style columns: Teff, logg, ALi and l_ALi with '<' for a limit, blank otherwise."""
    table = pd.DataFrame({"Teff": [5050.0, 5060.0, 5070.0, 5080.0], "logg": 3.1,
                          "ALi": [0.8, 1.2, 1.5, 2.0], "l_ALi": ["<", "", "<", ""]})
    path = tmp_path / "survey.parquet"
    table.to_parquet(path)
    baseline = load_reference(path, min_count=4)
    assert baseline.n_stars == 4 and baseline.n_limits == 2
    # By hand: r = 2 at 1.2 (factor 1/2), 4 at 2.0 (3/4): F(1.2) = 3/4, so the median is 1.2.
    assert baseline.lookup(5050.0, 3.1)["a_li_base"] == pytest.approx(1.2, abs=EXACT_TOL)


def test_missing_columns_and_missing_flag(tmp_path):
    path = tmp_path / "no_logg.csv"
    pd.DataFrame({"teff_k": [5000.0], "a_li": [1.0]}).to_csv(path, index=False)
    with pytest.raises(CatalogError, match="no column logg") as info:
        load_reference(path)
    assert str(path) in str(info.value)
    path = tmp_path / "no_flag.csv"
    pd.DataFrame({"teff_k": [5000.0, 5010.0], "logg": [3.1, 3.1], "a_li": [1.0, 2.0]}).to_csv(path, index=False)
    baseline = load_reference(path, min_count=2)
    assert baseline.n_limits == 0 and any("detection" in m for m in baseline.messages)
    with pytest.raises(CatalogError, match="feh"):
        load_reference(path, feh_step=0.2)
