"""Sky geometry, Sun and Moon events, sites, offline settings and the season table.

References used here:

- astropy's full ICRS -> AltAz transform (``pressure=0``: geometric altitude) and
  ``get_body`` as the independent reference for altitudes;
- offline check values for Mauna Kea on the night of 2027-03-15, measured with
  astropy 6-8 and cross-checked with an independent ephemeris library;
- sec z and Hardie's (1962) polynomial for the air mass (the SLALIB ``sla_AIRMAS``
  routine's published form: accurate to 0.1% of Bemporad's table up to X = 6.8);
- Kasten & Young (1989, Appl. Opt. 28, 4735) air-mass formula (coefficients from memory).
"""

from __future__ import annotations

import datetime as dt
import warnings

import astropy.units as u
import numpy as np
import pytest
from astropy.coordinates import AltAz, SkyCoord, get_body
from astropy.time import Time
from typer.testing import CliRunner

import prioritize.sky  # noqa: F401  (configures astropy for offline work)
from prioritize.errors import ConfigError, ModelRangeError, PrioritizeError, PrioritizeWarning
from prioritize.sky import observability as ob
from prioritize.sky.offline import (bundled_table_end_mjd, check_supported_dates, datetime_to_mjd,
                                    mjd_to_datetime)
from prioritize.sky.season import season_hours, semester_dates
from prioritize.sky.sites import Site, list_sites, load_site

# Measured: the fast method is within 0.6" of astropy's full AltAz transform.
FAST_ALTITUDE_TOL_ARCSEC = 1.0
# Sun and Moon via splined geocentric positions + our topocentric shift, vs astropy AltAz
# (measured 0.16" and 0.35"; the Moon's diurnal aberration and polar motion are left out).
SUN_MOON_ALTITUDE_TOL_ARCSEC = 1.0
# The astropy check values are quoted to the second; 1 minute is allowed.
EVENT_TOL_S = 60.0
# Measured with astropy: "Moon 0.56-0.59 illuminated", two decimals.
ILLUMINATION_TOL = 0.01
# Measured: Pickering within 0.34% of sec z above 30 deg altitude (two figures: < 0.345%).
PICKERING_VS_SECZ_REL_TOL = 0.00345
# Hardie 1962 vs Bemporad: 0.1% up to X = 6.8; Pickering vs Bemporad is of the same order.
# 0.5% covers both fits' errors for X <= 6 (altitude >= ~9.5 deg).
PICKERING_VS_HARDIE_REL_TOL = 0.005
# Kasten & Young 1989 vs Pickering 2002, both fits to refraction-integrated air mass; each
# claims a few tenths of a percent above 5 deg altitude (from memory), hence 0.5%.
PICKERING_VS_KASTEN_YOUNG_REL_TOL = 0.005
# Inverse air mass by root finding (xtol 1e-9 deg).
AIRMASS_INVERSE_TOL_DEG = 1e-6

MAUNA_KEA_SCIENCE = Site("Mauna Kea (check values)", 19.8, -155.5, 4200.0, "Pacific/Honolulu")
NIGHT = dt.date(2027, 3, 15)


def _hst_seconds(mjd: float) -> float:
    """Seconds after local midnight (HST) of the evening date, for comparing clock times."""
    local = mjd_to_datetime(mjd, MAUNA_KEA_SCIENCE.zone)
    midnight = dt.datetime.combine(NIGHT, dt.time(0, 0), tzinfo=MAUNA_KEA_SCIENCE.zone)
    return (local - midnight).total_seconds()


def _clock(text: str, next_day: bool = False) -> float:
    h, m, s = (int(v) for v in text.split(":"))
    return (24 * 3600 if next_day else 0) + 3600 * h + 60 * m + s


@pytest.fixture(scope="module")
def events():
    return ob.night_events(MAUNA_KEA_SCIENCE, NIGHT)


# ----------------------------------------------------------------------------- geometry

def test_fast_altitude_matches_astropy_altaz_over_a_night(events):
    """Fast method vs astropy ICRS->AltAz (pressure 0), 300 targets x 11 h every 10 min."""
    rng = np.random.default_rng(20270315)
    ra = rng.uniform(0, 360, 300)
    dec = np.degrees(np.arcsin(rng.uniform(-1, 1, 300)))
    start, end = events.dark_window("nautical")
    mjd = ob.time_grid(start, end, 600.0)
    directions = ob.apparent_directions(ra, dec, 0.5 * (mjd[0] + mjd[-1]))
    zenith = ob.zenith_vectors(ob.apparent_sidereal_time_rad(mjd, MAUNA_KEA_SCIENCE),
                               MAUNA_KEA_SCIENCE.latitude_deg)
    fast = ob.altitude_deg(directions, zenith)
    frame = AltAz(obstime=Time(mjd, format="mjd")[None, :], location=MAUNA_KEA_SCIENCE.location)
    full = SkyCoord(ra[:, None] * u.deg, dec[:, None] * u.deg).transform_to(frame).alt.deg
    assert np.max(np.abs(fast - full)) * 3600 <= FAST_ALTITUDE_TOL_ARCSEC


def test_sun_and_moon_altitudes_match_astropy(events):
    mjd = ob.time_grid(events.noon_mjd, events.next_noon_mjd, 1800.0)
    track = ob.sun_moon_track(MAUNA_KEA_SCIENCE, mjd)
    times = Time(mjd, format="mjd")
    frame = AltAz(obstime=times, location=MAUNA_KEA_SCIENCE.location)
    sun = get_body("sun", times, MAUNA_KEA_SCIENCE.location).transform_to(frame).alt.deg
    moon = get_body("moon", times, MAUNA_KEA_SCIENCE.location).transform_to(frame).alt.deg
    assert np.max(np.abs(track.sun_altitude_deg - sun)) * 3600 <= SUN_MOON_ALTITUDE_TOL_ARCSEC
    assert np.max(np.abs(track.moon_altitude_deg - moon)) * 3600 <= SUN_MOON_ALTITUDE_TOL_ARCSEC


def test_separation_matches_astropy():
    rng = np.random.default_rng(3)
    ra, dec = rng.uniform(0, 360, (2, 50)), rng.uniform(-90, 90, (2, 50))
    ours = ob.separation_deg(ob.unit_vectors(ra[0], dec[0]), ob.unit_vectors(ra[1], dec[1]))
    theirs = SkyCoord(ra[0][:, None] * u.deg, dec[0][:, None] * u.deg).separation(
        SkyCoord(ra[1][None, :] * u.deg, dec[1][None, :] * u.deg)).deg
    assert np.max(np.abs(ours - theirs)) * 3600 <= FAST_ALTITUDE_TOL_ARCSEC


# ----------------------------------------------------------------------------- air mass

def test_pickering_close_to_secant_above_30_deg():
    altitude = np.linspace(30, 90, 601)
    sec_z = 1 / np.sin(np.radians(altitude))
    assert np.max(np.abs(ob.airmass_pickering(altitude) / sec_z - 1)) <= PICKERING_VS_SECZ_REL_TOL


def test_pickering_matches_hardie_polynomial():
    """Hardie (1962) as published in SLALIB sla_AIRMAS: X = 1 + s(0.9981833 - s(0.002875 + 0.0008083 s)),
    s = sec z - 1, valid to X ~ 6.8."""
    altitude = np.linspace(9.6, 90, 500)
    s = 1 / np.sin(np.radians(altitude)) - 1
    hardie = 1 + s * (0.9981833 - s * (0.002875 + 0.0008083 * s))
    assert np.max(np.abs(ob.airmass_pickering(altitude) / hardie - 1)) <= PICKERING_VS_HARDIE_REL_TOL


def test_pickering_matches_kasten_young_down_to_5_deg():
    """Kasten & Young 1989: X = 1 / (cos z + 0.50572 (96.07995 - z)^-1.6364), z in degrees (from memory)."""
    altitude = np.linspace(5, 90, 500)
    z = 90 - altitude
    kasten_young = 1 / (np.cos(np.radians(z)) + 0.50572 * (96.07995 - z) ** -1.6364)
    assert np.max(np.abs(ob.airmass_pickering(altitude) / kasten_young - 1)) <= PICKERING_VS_KASTEN_YOUNG_REL_TOL


def test_airmass_below_horizon_is_infinite_and_inverse_round_trips():
    assert np.isinf(ob.airmass_pickering(-0.5))
    for x in (1.05, 1.5, 2.0, 3.0, 10.0):
        h = ob.altitude_for_airmass(x)
        assert abs(float(ob.airmass_pickering(h)) - x) < 1e-9
    near = ob.altitude_for_airmass(2.0)
    assert abs(float(ob.airmass_pickering(near + AIRMASS_INVERSE_TOL_DEG)) - 2.0) < 1e-6
    with pytest.raises(PrioritizeError):
        ob.altitude_for_airmass(0.9)


def test_illuminated_fraction_geometry():
    """Full Moon opposite the Sun -> 1, new Moon towards the Sun -> 0, quadrature -> ~1/2."""
    sun = np.array([1.496e8, 0.0, 0.0])
    assert ob.illuminated_fraction(sun, np.array([-3.84e5, 0, 0])) == pytest.approx(1.0)
    assert ob.illuminated_fraction(sun, np.array([3.84e5, 0, 0])) == pytest.approx(0.0)
    # At 90 deg elongation the phase angle is 90 deg minus the Sun's parallax from the Moon (~0.15 deg).
    assert ob.illuminated_fraction(sun, np.array([0, 3.84e5, 0])) == pytest.approx(0.5, abs=0.002)


# ------------------------------------------------------------------------------ astropy check values

@pytest.mark.parametrize("event, expected, next_day", [
    ("sunset", "18:31:39", False),
    ("astronomical_dusk", "19:44:43", False),
    ("astronomical_dawn", "05:16:28", True),
    ("sunrise", "06:29:28", True),
])
def test_sun_events_match_science_check_values(events, event, expected, next_day):
    """Astropy check values: Mauna Kea (19.8 N, 155.5 W, 4200 m), 2027-03-15 HST.  Sunset/sunrise:
    the Sun's centre at -0.833 deg geometric, no horizon dip."""
    value = {"sunset": events.sunset_mjd, "sunrise": events.sunrise_mjd,
             "astronomical_dusk": events.dusk_mjd["astronomical"],
             "astronomical_dawn": events.dawn_mjd["astronomical"]}[event]
    assert abs(_hst_seconds(value) - _clock(expected, next_day)) <= EVENT_TOL_S


def test_moon_sets_at_science_check_value_and_illumination(events):
    """Astropy check values: Moon sets 01:52 HST; 0.56-0.59 illuminated while up at night."""
    sets_at_night = [t for t in events.moonset_mjd if events.sunset_mjd < t < events.sunrise_mjd]
    assert len(sets_at_night) == 1
    assert abs(_hst_seconds(sets_at_night[0]) - _clock("01:52:00", True)) <= EVENT_TOL_S
    track = events.track
    up_at_night = track.moon_up & (track.mjd > events.sunset_mjd) & (track.mjd < events.sunrise_mjd)
    k = track.moon_illumination[up_at_night]
    assert abs(k.min() - 0.56) <= ILLUMINATION_TOL
    assert abs(k.max() - 0.59) <= ILLUMINATION_TOL


def test_twilights_are_ordered(events):
    order = [events.sunset_mjd, events.dusk_mjd["civil"], events.dusk_mjd["nautical"],
             events.dusk_mjd["astronomical"], events.dawn_mjd["astronomical"], events.dawn_mjd["nautical"],
             events.dawn_mjd["civil"], events.sunrise_mjd]
    assert np.all(np.diff(order) > 0)


def test_polar_summer_has_no_dark_window():
    site = Site("high arctic", 78.0, 15.0, 0.0, "Europe/Oslo")
    events = ob.night_events(site, dt.date(2027, 6, 21))
    with pytest.raises(ModelRangeError, match="does not reach"):
        events.dark_window("nautical")


# ----------------------------------------------------------------------------- offline settings

def test_astropy_configured_for_offline_work():
    from astropy.utils import data, iers

    assert iers.conf.auto_download is False
    assert iers.conf.auto_max_age is None
    assert data.conf.allow_internet is False


def test_date_rule_warns_past_table_and_refuses_absurd_dates():
    past_table = bundled_table_end_mjd() + 400
    with pytest.warns(PrioritizeWarning, match="UT1-UTC is held"):
        check_supported_dates([past_table])
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        check_supported_dates([bundled_table_end_mjd() - 30])
    for year in (1950, 2150):
        with pytest.raises(ModelRangeError, match="1962-01-01 and 2099-12-31"):
            check_supported_dates([datetime_to_mjd(dt.datetime(year, 1, 1, tzinfo=dt.timezone.utc))])


def test_far_future_night_still_computes_with_one_warning():
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        events = ob.night_events(MAUNA_KEA_SCIENCE, dt.date(2045, 3, 15))
    messages = [str(w.message) for w in caught]
    assert any("UT1-UTC is held" in m for m in messages)
    assert not any("dubious year" in m or "polar motion" in m for m in messages)
    assert events.dusk_mjd["astronomical"] < events.dawn_mjd["astronomical"]


def test_mjd_datetime_round_trip():
    moment = dt.datetime(2027, 3, 16, 4, 31, 39, tzinfo=dt.timezone.utc)
    assert mjd_to_datetime(datetime_to_mjd(moment)) == moment
    assert datetime_to_mjd(moment) == pytest.approx(Time(moment).mjd, abs=1e-9)


# ----------------------------------------------------------------------------- sites

def test_presets_load_and_are_sane():
    names = list_sites()
    assert {"mauna-kea", "la-silla", "paranal", "la-palma", "kitt-peak", "siding-spring"} <= set(names)
    for name in names:
        site = load_site(name)
        assert site.source
        assert -90 <= site.latitude_deg <= 90 and -180 < site.longitude_deg <= 180
        assert 0 < site.height_m < 5000


def test_site_file_errors_name_the_key(tmp_path):
    good = ('name = "Here"\nlatitude_deg = 10\nlongitude_deg = 350\nheight_m = 100\n'
            'timezone = "UTC"\n')
    path = tmp_path / "here.toml"
    path.write_text(good)
    site = load_site(path)
    assert site.longitude_deg == pytest.approx(-10.0)
    for text, key in [(good + "elevation = 3\n", "elevation"),
                      (good.replace("latitude_deg = 10", "latitude_deg = 100"), "latitude_deg"),
                      (good.replace('"UTC"', '"Mars/Olympus"'), "timezone"),
                      (good.replace("height_m = 100\n", ""), "height_m"),
                      (good.replace("longitude_deg = 350", 'longitude_deg = "east"'), "longitude_deg")]:
        path.write_text(text)
        with pytest.raises(ConfigError, match=key):
            load_site(path)
    with pytest.raises(ConfigError, match="unknown site 'atlantis'"):
        load_site("atlantis")


# ----------------------------------------------------------------------------- season

def test_semester_boundaries():
    assert semester_dates("2027A") == (dt.date(2027, 2, 1), dt.date(2027, 7, 31))
    assert semester_dates("2027b") == (dt.date(2027, 8, 1), dt.date(2028, 1, 31))
    assert semester_dates("2027A", "04-01", "10-01") == (dt.date(2027, 4, 1), dt.date(2027, 9, 30))
    for bad in ("2027C", "27A", "A2027"):
        with pytest.raises(PrioritizeError, match="2027A"):
            semester_dates(bad)


@pytest.mark.parametrize("moon_ok", [0.0, 1.0])
def test_season_hours_match_brute_force_astropy(moon_ok):
    """Three nights at Paranal sampled every 10 min: hours from our vectorised table vs astropy
    AltAz for the Sun, the Moon and each target at every sample (illumination from astropy's
    geocentric Sun-Moon elongation)."""
    site = load_site("paranal")
    first, last, step = dt.date(2027, 3, 30), dt.date(2027, 4, 1), 10.0
    ra = np.array([150.0, 200.0, 250.0, 10.0, 330.0])
    dec = np.array([-60.0, -20.0, 10.0, -30.0, 40.0])
    table = season_hours(site, first, last, ra, dec, airmass_max=1.5, moon_ok_illumination=moon_ok,
                         step_minutes=step)

    dates = [first + dt.timedelta(days=k) for k in range(3)]
    noon = ob.local_noon_mjd(site, dates)
    mjd = (noon[:, None] + np.arange(144)[None, :] * step / 1440).ravel()
    months = np.repeat([f"{d:%Y-%m}" for d in dates], 144)
    times = Time(mjd, format="mjd")
    frame = AltAz(obstime=times, location=site.location)
    sun = get_body("sun", times, site.location).transform_to(frame).alt.deg
    moon = get_body("moon", times, site.location).transform_to(frame).alt.deg
    sun_geo, moon_geo = get_body("sun", times), get_body("moon", times)
    elongation = sun_geo.separation(moon_geo).rad
    phase = np.arctan2(sun_geo.distance.km * np.sin(elongation),
                       moon_geo.distance.km - sun_geo.distance.km * np.cos(elongation))
    illumination = (1 + np.cos(phase)) / 2
    dark = (sun < -18) & ((moon <= 0) | (illumination <= moon_ok))
    alt = SkyCoord(ra[:, None] * u.deg, dec[:, None] * u.deg).transform_to(
        AltAz(obstime=times[None, :], location=site.location)).alt.deg
    limit = ob.altitude_for_airmass(1.5)
    tolerance_h = 2 * step / 60   # two samples on a threshold, out of ~430
    for j, month in enumerate(table.months):
        in_month = months == month
        expected = ((alt >= limit) & dark & in_month).sum(axis=1) * step / 60
        assert np.all(np.abs(table.hours[:, j] - expected) <= tolerance_h)
        assert abs(table.dark_hours[j] - (dark & in_month).sum() * step / 60) <= tolerance_h


def test_season_hours_invalid_coordinates_are_nan_and_limits_checked():
    site = load_site("la-silla")
    table = season_hours(site, dt.date(2027, 8, 1), dt.date(2027, 8, 2), [np.nan, 100.0], [0.0, -30.0])
    assert np.all(np.isnan(table.hours[0])) and np.all(np.isfinite(table.hours[1]))
    with pytest.raises(PrioritizeError, match="airmass"):
        season_hours(site, dt.date(2027, 8, 1), dt.date(2027, 8, 2), [0.0], [0.0], airmass_max=0.5)
    with pytest.raises(PrioritizeError, match="nights"):
        season_hours(site, dt.date(2027, 8, 2), dt.date(2027, 8, 1), [0.0], [0.0])


# ----------------------------------------------------------------------------- season command

def _app():
    import typer

    from prioritize.sky.commands import season_command

    app = typer.Typer()
    app.command("season")(season_command)
    app.command("unused")(lambda: None)
    return app


def test_season_command_end_to_end(tmp_path):
    import pandas as pd

    table = pd.DataFrame({"star_id": ["a", "b", "c", "d"], "ra_deg": [100.0, 200.0, np.nan, 300.0],
                          "dec_deg": [-30.0, -10.0, 0.0, 20.0], "priority": [0.9, 0.5, 0.4, 0.1],
                          "status": ["ok", "ok", "ok", "out_of_model_range"]})
    source = tmp_path / "ranked.csv"
    table.to_csv(source, index=False)
    out = tmp_path / "season.parquet"
    result = CliRunner().invoke(_app(), ["season", str(source), "--site", "paranal", "--start", "2027-04-28",
                                         "--end", "2027-05-03", "-o", str(out)])
    assert result.exit_code == 0, result.output
    assert out.exists() and (tmp_path / "season.png").stat().st_size > 0
    written = pd.read_parquet(out)
    assert list(written.columns) == ["star_id", "priority", "2027-04_hours", "2027-05_hours", "total_hours",
                                     "reason"]
    assert list(written["reason"]) == ["ok", "ok", "no_coordinates", "status_not_ok"]
    assert written.loc[0, "total_hours"] == pytest.approx(written.loc[0, "2027-04_hours"]
                                                          + written.loc[0, "2027-05_hours"], abs=0.02)


def test_season_table_ordered_by_priority_and_every_target_in_the_figure_pages(tmp_path):
    import pandas as pd

    rng = np.random.default_rng(4)
    n = 7
    table = pd.DataFrame({"star_id": [f"V5-{i}" for i in range(n)], "ra_deg": rng.uniform(0, 360, n),
                          "dec_deg": rng.uniform(-60, 20, n), "priority": rng.random(n)})
    source = tmp_path / "ranked.csv"
    table.to_csv(source, index=False)
    out = tmp_path / "season.csv"
    result = CliRunner().invoke(_app(), ["season", str(source), "--site", "paranal", "--start", "2027-04-28",
                                         "--end", "2027-04-30", "--figure-rows", "3", "-o", str(out)])
    assert result.exit_code == 0, result.output
    written = pd.read_csv(out)
    assert list(written["star_id"]) == list(table.sort_values("priority", ascending=False)["star_id"])
    assert np.allclose(written["priority"], np.sort(table["priority"])[::-1])
    pages = sorted(p.name for p in tmp_path.glob("season*.png"))
    assert pages == ["season.png", "season_2.png", "season_3.png"]      # 7 targets, 3 per page


def test_season_command_one_line_errors(tmp_path):
    source = tmp_path / "t.csv"
    source.write_text("star_id,ra_deg,dec_deg\na,1,2\n")
    for args, words in [(["--site", "atlantis", "--semester", "2027A"], "unknown site"),
                        (["--site", "paranal"], "--semester"),
                        (["--site", "paranal", "--semester", "2027Q"], "2027A"),
                        (["--site", "paranal", "--start", "2027-13-01", "--end", "2027-12-02"], "--start")]:
        result = CliRunner().invoke(_app(), ["season", str(source), *args])
        assert result.exit_code == 1
        lines = result.stderr.strip().splitlines()
        assert len(lines) == 1 and lines[0].startswith("error:") and words in lines[0]
