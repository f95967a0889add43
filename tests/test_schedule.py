"""The night plan: scheduler properties on seeded random sets, limits checked against astropy,
and the ``night`` command end to end.

The limits of every planned slot are re-checked with astropy's full AltAz transform
(``pressure=0``) and ``get_body`` for the Moon: an independent implementation of the
geometry the planner takes from its fast method (:mod:`prioritize.sky.observability`).
"""

from __future__ import annotations

import datetime as dt

import astropy.units as u
import numpy as np
import pandas as pd
import pytest
import typer
from astropy.coordinates import AltAz, SkyCoord, get_body
from astropy.time import Time
from typer.testing import CliRunner

from prioritize.errors import PrioritizeError
from prioritize.sky import schedule as sc
from prioritize.sky.observability import airmass_pickering
from prioritize.sky.sites import load_site

# The fast altitude is within 1" of astropy (0.6" measured in tests/test_sky.py); 1" changes the
# air mass by < 2e-5 near X = 2, so 1e-4 is a safe margin on the air-mass limit.
AIRMASS_LIMIT_TOL = 1e-4
# The Moon's separation from astropy (target ICRS vs topocentric Moon) differs from ours by
# the aberration of the Moon's apparent place (< 25"); 0.01 deg covers it.
MOON_SEP_TOL_DEG = 0.01
# One second, in days, for comparing times on the minute grid.
ONE_SECOND_D = 1.0 / 86400.0

SITE = load_site("mauna-kea")
NIGHT = dt.date(2027, 3, 15)     # Moon 0.56-0.59 illuminated, up until ~01:52 HST (astropy, tests/test_sky.py)


# ----------------------------------------------------------------------------- helpers

def _random_instance(seed: int, n: int = 60, m: int = 200):
    """Each target is within limits over one random stretch of the grid, with a random hole."""
    rng = np.random.default_rng(seed)
    ok = np.zeros((n, m), dtype=bool)
    for i in range(n):
        a = rng.integers(0, m - 5)
        b = rng.integers(a + 1, m + 1)
        ok[i, a:b] = True
        if rng.random() < 0.3:
            hole = rng.integers(a, b)
            ok[i, hole:hole + rng.integers(1, 20)] = False
    duration = rng.integers(2, 25, n)
    priority = np.round(rng.random(n), 1)          # ties on purpose
    return ok, duration, priority


def _length(duration, i, s) -> int:
    """Slot length of target i starting at s, for per-target (n,) or per-start (n, m) durations."""
    d = np.asarray(duration)
    return int(d[i, s] if d.ndim == 2 else d[i])


def _occupied(start, duration, m, which) -> np.ndarray:
    busy = np.zeros(m - 1, dtype=bool)
    for i in which:
        if start[i] >= 0:
            busy[start[i]:start[i] + _length(duration, i, start[i])] = True
    return busy


def _fits_somewhere(i, start_ok, duration, busy) -> bool:
    m = start_ok.shape[1]
    return any(start_ok[i, s] and not busy[s:s + _length(duration, i, s)].any() for s in range(m - 1))


def _assert_no_overlap_and_feasible(start, duration, start_ok):
    planned = np.flatnonzero(start >= 0)
    assert np.all(start_ok[planned, start[planned]])
    order = planned[np.argsort(start[planned])]
    ends = start[order] + duration[order]
    assert np.all(start[order][1:] >= ends[:-1])
    assert np.all(ends <= start_ok.shape[1] - 1)


def _assert_priority_rule(start, duration, start_ok, rank, left_out):
    """No target left out for lack of time fits in the time not held by the targets ranked above it."""
    m = start_ok.shape[1]
    planned = np.flatnonzero(start >= 0)
    for i in left_out:
        above = planned[rank[planned] < rank[i]]
        assert not _fits_somewhere(i, start_ok, duration, _occupied(start, duration, m, above))


# ----------------------------------------------------------------------------- grid scheduler

def test_feasible_starts_matches_brute_force():
    rng = np.random.default_rng(7)
    ok = rng.random((30, 40)) < 0.8
    duration = rng.integers(1, 8, 30)
    fast = sc.feasible_starts(ok, duration)
    for i in range(30):
        for s in range(40):
            expected = s + duration[i] <= 39 and ok[i, s:s + duration[i] + 1].all()
            assert fast[i, s] == expected


@pytest.mark.parametrize("seed", range(6))
def test_greedy_schedule_properties(seed):
    ok, duration, priority = _random_instance(seed)
    start_ok = sc.feasible_starts(ok, duration)
    start = sc.greedy_schedule(start_ok, duration, priority)
    _assert_no_overlap_and_feasible(start, duration, start_ok)
    rank = sc.greedy_rank(priority)
    left_out = np.flatnonzero((start < 0) & start_ok.any(axis=1))
    assert left_out.size > 0, "instance too easy to test the priority rule"
    _assert_priority_rule(start, duration, start_ok, rank, left_out)
    assert np.all(start[~start_ok.any(axis=1)] == -1)


@pytest.mark.parametrize("seed", range(6))
def test_swaps_keep_set_time_and_priority_rule_and_lower_airmass(seed):
    ok, duration, priority = _random_instance(seed)
    rng = np.random.default_rng(100 + seed)
    m = ok.shape[1]
    slope = rng.uniform(-1, 1, (ok.shape[0], 1))
    airmass = 1.5 + slope * (np.arange(m)[None, :] / m - 0.5)
    start_ok = sc.feasible_starts(ok, duration)
    greedy = sc.greedy_schedule(start_ok, duration, priority)
    rank = sc.greedy_rank(priority)
    left_out = np.flatnonzero((greedy < 0) & start_ok.any(axis=1))
    improved = sc.improve_by_swaps(greedy, duration, start_ok, airmass, rank, rank[left_out])
    assert np.array_equal(improved >= 0, greedy >= 0)
    all_targets = np.arange(ok.shape[0])
    assert np.array_equal(_occupied(improved, duration, m, all_targets), _occupied(greedy, duration, m, all_targets))
    _assert_no_overlap_and_feasible(improved, duration, start_ok)
    _assert_priority_rule(improved, duration, start_ok, rank, left_out)

    def total(start):
        planned = np.flatnonzero(start >= 0)
        return sum(airmass[i, start[i]:start[i] + duration[i] + 1].mean() for i in planned)
    assert total(improved) <= total(greedy) + 1e-12


def test_swap_puts_the_setting_target_first_unless_a_left_out_target_ranks_between():
    m, d = 21, 5
    ok = np.ones((2, m), dtype=bool)
    t = np.arange(m) / m
    airmass = np.vstack([2.0 - t, 1.0 + t])        # target 0 rising, target 1 setting
    start_ok = sc.feasible_starts(ok, [d, d])
    greedy = sc.greedy_schedule(start_ok, [d, d], [0.9, 0.8])
    assert list(greedy) == [0, d]
    assert list(sc.improve_by_swaps(greedy, [d, d], start_ok, airmass, [0, 2], [])) == [d, 0]
    assert list(sc.improve_by_swaps(greedy, [d, d], start_ok, airmass, [0, 2], [1])) == [0, d]


# ----------------------------------------------------------------------------- whole night

def _special_targets():
    """Rows that must be left out for a known reason."""
    moon = get_body("moon", Time("2027-03-16T06:30:00"), SITE.location)   # ~20:30 HST, topocentric GCRS
    return pd.DataFrame({
        "star_id": ["polar_south", "no_ra", "no_prio", "zero_exp", "too_long", "by_moon"],
        "ra_deg": [10.0, np.nan, 150.0, 150.0, 150.0, moon.ra.deg],
        "dec_deg": [-80.0, 10.0, 20.0, 20.0, 20.0, moon.dec.deg],
        "priority": [1.0, 1.0, np.nan, 1.0, 1.0, 1.0],
        "exposure_s": [600.0, 600.0, 600.0, 0.0, 15 * 3600.0, 600.0],
        "expected": ["never_above_airmass_limit", "no_coordinates", "no_priority", "invalid_exposure",
                     "longer_than_dark_window", "too_close_to_moon"],
    })


@pytest.fixture(scope="module")
def random_plan():
    rng = np.random.default_rng(20270315)
    n = 150
    targets = pd.DataFrame({"star_id": [f"r{i}" for i in range(n)], "ra_deg": rng.uniform(0, 360, n),
                            "dec_deg": np.degrees(np.arcsin(rng.uniform(-0.8, 1, n))),
                            "priority": rng.random(n), "exposure_s": rng.uniform(120, 1800, n),
                            "expected": ""})
    targets = pd.concat([targets, _special_targets()], ignore_index=True)
    plan = sc.plan_night(SITE, NIGHT, targets["ra_deg"], targets["dec_deg"], targets["priority"],
                         targets["exposure_s"], overhead_s=300.0, airmass_max=2.0, moon_min_sep_deg=30.0,
                         twilight="nautical", solver="greedy")
    return targets, plan


def test_plan_slots_do_not_overlap_and_fit_the_dark_window(random_plan):
    _targets, plan = random_plan
    planned = np.flatnonzero(plan.order > 0)
    assert planned.size > 10
    order = planned[np.argsort(plan.order[planned])]
    slot_end = plan.start_mjd[order] + plan.duration_s[order] / 86400.0
    assert np.all(np.diff(plan.start_mjd[order]) > 0)
    assert np.all(plan.start_mjd[order][1:] >= slot_end[:-1] - ONE_SECOND_D)
    assert plan.start_mjd[order][0] >= plan.window_start_mjd - ONE_SECOND_D
    assert slot_end[-1] <= plan.window_end_mjd + ONE_SECOND_D
    assert np.all(plan.end_mjd[order] <= slot_end + ONE_SECOND_D)
    assert plan.duration_s[order].sum() / 86400.0 <= plan.window_end_mjd - plan.window_start_mjd


def test_every_planned_slot_is_within_limits_by_astropy(random_plan):
    targets, plan = random_plan
    planned = np.flatnonzero(plan.order > 0)
    for i in planned:
        minutes = np.arange(int(plan.duration_s[i] // 60) + 1)
        times = Time(plan.start_mjd[i] + minutes / 1440.0, format="mjd")
        frame = AltAz(obstime=times, location=SITE.location)
        star = SkyCoord(targets["ra_deg"][i] * u.deg, targets["dec_deg"][i] * u.deg)
        altitude = star.transform_to(frame).alt.deg
        assert np.all(airmass_pickering(altitude) <= 2.0 + AIRMASS_LIMIT_TOL)
        moon = get_body("moon", times, SITE.location)
        moon_up = moon.transform_to(frame).alt.deg > 0.01
        separation = moon.separation(star.transform_to(moon.frame)).deg
        assert np.all(separation[moon_up] >= 30.0 - MOON_SEP_TOL_DEG)


def test_plan_keeps_the_priority_rule(random_plan):
    _targets, plan = random_plan
    start = np.full(plan.order.size, -1)
    planned = plan.order > 0
    start[planned] = np.rint((plan.start_mjd[planned] - plan.grid_mjd[0]) * 1440).astype(int)
    left_out = np.flatnonzero(plan.reason == sc.NO_TIME_LEFT)
    assert left_out.size > 0
    assert plan.solver == "greedy"
    _assert_priority_rule(start, plan.slot_steps, plan.start_ok, plan.rank, left_out)


def test_plan_reasons(random_plan):
    targets, plan = random_plan
    special = targets["expected"] != ""
    assert list(plan.reason[special]) == list(targets["expected"][special])
    allowed = {sc.SCHEDULED, sc.NO_TIME_LEFT, sc.NEVER_ABOVE_AIRMASS_LIMIT, sc.TOO_CLOSE_TO_MOON}
    assert set(plan.reason[~special]) <= allowed
    assert np.all((plan.order > 0) == (plan.reason == sc.SCHEDULED))


def test_plan_rejects_bad_limits():
    with pytest.raises(PrioritizeError, match="airmass"):
        sc.plan_night(SITE, NIGHT, [1.0], [1.0], [1.0], [60.0], airmass_max=0.8)
    with pytest.raises(PrioritizeError, match="twilight"):
        sc.plan_night(SITE, NIGHT, [1.0], [1.0], [1.0], [60.0], twilight="dusk")


# ----------------------------------------------------------------------------- the command

def _app():
    from prioritize.sky.commands import night_command

    app = typer.Typer()
    app.command("night")(night_command)
    app.command("unused")(lambda: None)
    return app


@pytest.fixture()
def small_table(tmp_path):
    rng = np.random.default_rng(11)
    n = 14
    table = pd.DataFrame({"star_id": [f"HD{1000 + i}" for i in range(n)], "ra_deg": rng.uniform(60, 260, n),
                          "dec_deg": rng.uniform(-30, 60, n), "score": rng.random(n),
                          "exposure_s": rng.uniform(300, 1200, n), "status": ["ok"] * n})
    table.loc[3, "status"] = "missing_inputs"
    table.loc[4, "ra_deg"] = np.nan
    table.loc[5, "exposure_s"] = np.nan          # falls back to --exposure
    path = tmp_path / "ranked.csv"
    table.to_csv(path, index=False)
    return path, table


def test_night_command_end_to_end(tmp_path, small_table):
    path, table = small_table
    out = tmp_path / "plan.csv"
    result = CliRunner().invoke(_app(), ["night", str(path), "--site", "mauna-kea", "--date", "2027-03-15",
                                         "--priority-column", "score", "--exposure", "900", "-o", str(out)])
    assert result.exit_code == 0, result.output
    for name in ("plan.csv", "plan.txt", "plan_log.txt", "plan.png"):
        assert (tmp_path / name).stat().st_size > 0
    written = pd.read_csv(out)
    assert list(written.columns[:8]) == ["night", "order", "star_id", "ra_icrs", "dec_icrs", "start_utc",
                                         "end_utc", "start_local"]
    assert {"airmass_start", "airmass_end", "exposure_s", "snr_expected", "priority"} <= set(written.columns)
    assert sorted(written["star_id"]) == sorted(table["star_id"])
    reasons = dict(zip(written["star_id"], written["reason"]))
    assert reasons["HD1003"] == "status_not_ok" and reasons["HD1004"] == "no_coordinates"
    planned = written[written["reason"] == "scheduled"]
    assert list(planned["order"]) == list(range(1, len(planned) + 1))
    assert written.loc[written["reason"] != "scheduled", "order"].isna().all()
    assert written.set_index("star_id").loc["HD1005", "exposure_s"] == 900
    text = (tmp_path / "plan.txt").read_text()
    assert "never planned" in text and "status_not_ok" in text and "nautical twilight ends 19:19" in text


def test_night_command_one_line_errors(tmp_path, small_table):
    path, _table = small_table
    cases = [(["--site", "atlantis", "--date", "2027-03-15"], "unknown site"),
             (["--site", "mauna-kea", "--date", "15/03/2027"], "YYYY-MM-DD"),
             (["--site", "mauna-kea", "--date", "2027-03-15"], "missing column(s) priority"),
             (["--site", "mauna-kea", "--date", "2150-03-15", "--priority-column", "score"], "2099-12-31")]
    for args, words in cases:
        result = CliRunner().invoke(_app(), ["night", str(path), *args])
        assert result.exit_code == 1, result.output
        lines = result.stderr.strip().splitlines()
        assert len(lines) == 1 and lines[0].startswith("error:") and words in lines[0]
