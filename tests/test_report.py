"""The proposal report: HTML structure, embedded figures, totals, and the plotted data.

Structure is checked with html5lib's strict parser (it raises on any HTML5 parse
error; html5lib implements the WHATWG parsing algorithm) and the standard library's
html.parser; images are decoded with matplotlib.  Summary numbers are recomputed here
with pandas directly from the ranked table.  Figure tests read the artists' data
(offsets, colours, lines), not pixels.  The ranked table is the invented sample
cluster "Valtra 5" (sample_catalogs/), ranked once for the module.
"""

from __future__ import annotations

import base64
import io
import re
from html.parser import HTMLParser
from pathlib import Path

import matplotlib
import numpy as np
import pandas as pd
import pytest
from typer.testing import CliRunner

from prioritize.catalog import status as st
from prioritize.catalog.io import read_catalog, write_table
from prioritize.catalog.validate import validate_catalog
from prioritize.cli import _cluster_context, _metadata, app
from prioritize.config import load_config
from prioritize.engine import rank_table
from prioritize.report import plots
from prioritize.report.proposal import (build_report, render_html, summary_numbers, write_report)
from prioritize.stars.tracks import load_grid

ROOT = Path(__file__).resolve().parents[1]
ROUNDING = {"hours_ranked": 0.05, "hours_usable": 0.05, "hours": 0.05}   # printed to 0.1 h


@pytest.fixture(scope="module")
def ranked():
    cfg = load_config()
    table, _ = read_catalog(ROOT / "sample_catalogs" / "cluster_members.csv")
    valid = validate_catalog(table, path="cluster", cluster_context=_cluster_context(cfg))
    return rank_table(valid, cfg), _metadata(cfg, "cluster_members.csv")


@pytest.fixture(scope="module")
def written(ranked, tmp_path_factory):
    table, meta = ranked
    # invented night plan (slots only, no site: drawn from the air masses) and season table
    order = table[table["rank"].notna()].head(3)
    plan = pd.DataFrame({"night": ["2027-03-15"] * 3 + [""], "star_id": list(order["star_id"]) + ["X"],
                         "start_utc": ["2027-03-16T06:00:00", "2027-03-16T06:30:00", "2027-03-16T07:00:00", ""],
                         "end_utc": ["2027-03-16T06:20:00", "2027-03-16T06:50:00", "2027-03-16T07:20:00", ""],
                         "airmass_start": [1.1, 1.2, 1.5, np.nan], "airmass_end": [1.15, 1.3, 1.7, np.nan]})
    season = pd.DataFrame({"star_id": list(order["star_id"]), "2027-02_hours": [10.0, 0.0, 3.5],
                           "2027-03_hours": [20.0, 5.0, 1.0], "total_hours": [30.0, 5.0, 4.5],
                           "reason": ["ok"] * 3})
    second = plan.iloc[:1].assign(night="2027-03-16", start_utc="2027-03-17T06:00:00",
                                  end_utc="2027-03-17T06:20:00")
    report = build_report(table, meta, "cluster_members_ranked.csv",
                          night=(pd.concat([plan, second], ignore_index=True), {}),
                          season=(season, {"dark_hours": {"2027-02": 100.0, "2027-03": 90.0}}))
    out = tmp_path_factory.mktemp("report") / "report.html"
    paths = write_report(report, out)
    return report, out, paths, plan, season


class _Collector(HTMLParser):
    def __init__(self):
        super().__init__()
        self.stack, self.images, self.keys, self.attrs, self._key = [], [], {}, [], None

    def handle_starttag(self, tag, attrs):
        attrs = dict(attrs)
        self.attrs.append((tag, attrs))
        if tag == "img":
            self.images.append(attrs)
        if "data-key" in attrs:
            self._key = attrs["data-key"]
            self.keys[self._key] = ""

    def handle_data(self, data):
        if self._key:
            self.keys[self._key] += data

    def handle_endtag(self, tag):
        self._key = None


def _parse(text):
    collector = _Collector()
    collector.feed(text)
    return collector


def test_html_is_valid_and_self_contained(written):
    html5lib = pytest.importorskip("html5lib")
    report, out, paths, *_ = written
    text = out.read_text(encoding="utf-8")
    html5lib.HTMLParser(strict=True).parse(text)          # raises on any parse error
    doc = _parse(text)
    for tag, attrs in doc.attrs:
        for name in ("src", "href", "action", "poster"):
            value = attrs.get(name)
            if value is not None:
                assert value.startswith(("data:image/png;base64,", "#")), (tag, name, value[:60])
    without_images = re.sub(r"data:image/png;base64,[A-Za-z0-9+/=]+", "", text)
    assert not re.search(r"https?:|//[a-z]|url\(|<script|<link|<iframe|@import", without_images)
    assert "planning estimates" in text.lower()


def test_every_figure_embedded_with_its_size(written):
    report, out, paths, *_ = written
    doc = _parse(out.read_text(encoding="utf-8"))
    names = [img["data-figure"] for img in doc.images]
    assert names == list(report.figures)
    for expected in ("hr_diagram", "kiel_diagram", "colour_magnitude", "rotation", "significance_lifetime",
                     "detectability_map", "budget", "night", "season"):
        assert expected in names
    for img in doc.images:
        data = base64.b64decode(img["src"].split(",", 1)[1])
        pixels = matplotlib.image.imread(io.BytesIO(data), format="png")
        fig = report.figures[img["data-figure"]][0]
        want = (round(fig.get_figheight() * plots.FIGURE_DPI), round(fig.get_figwidth() * plots.FIGURE_DPI))
        assert pixels.shape[:2] == want == (int(img["height"]), int(img["width"]))
        folder = out.with_name("report_figures")
        assert (folder / f"{img['data-figure']}.png").read_bytes() == data
        svg = (folder / f"{img['data-figure']}.svg").read_text(encoding="utf-8")
        assert svg.lstrip().startswith("<?xml") and "<svg" in svg
    assert len(paths) == 1 + 2 * len(report.figures)


def test_summary_numbers_equal_the_table(ranked, written):
    table, _ = ranked
    report, out, *_ = written
    keys = _parse(out.read_text(encoding="utf-8")).keys
    status = table["status"].value_counts()
    expected = {"rows": len(table), **{f"status.{k}": v for k, v in status.items()}}
    ok = table[table["status"] == st.OK]
    usable = ok[ok["priority"] > 0]
    expected["usable"] = len(usable)
    for stage, n in ok["stage"].value_counts().items():
        expected[f"stage.{stage}"] = n
        expected[f"stage_usable.{stage}"] = int((usable["stage"] == stage).sum())
    rk = table[table["rank"].notna()].sort_values("rank")
    for name, rows in rk.groupby("instrument"):
        use = rows[rows["priority"] > 0]
        expected.update({f"instruments.{name}.ranked": len(rows),
                         f"instruments.{name}.hours_ranked": rows["time_on_target_s"].sum() / 3600,
                         f"instruments.{name}.usable": len(use),
                         f"instruments.{name}.hours_usable": use["time_on_target_s"].sum() / 3600,
                         f"instruments.{name}.detections_usable":
                             (use["priority"] * use["time_on_target_s"] / 3600).sum()})
    for n in (10, 25, 50, 100, len(usable)):
        if n <= len(usable):
            head = rk.head(n)
            expected[f"budget.{n}.targets"] = n
            expected[f"budget.{n}.hours"] = head["time_on_target_s"].sum() / 3600
            expected[f"budget.{n}.detections"] = (head["priority"] * head["time_on_target_s"] / 3600).sum()
    for k, row in enumerate(rk.head(15).itertuples()):
        expected[f"top.{k + 1}.star_id"] = row.star_id
        expected[f"top.{k + 1}.z_enrich"] = row.z_enrich
        expected[f"top.{k + 1}.priority"] = row.priority
    for key, value in expected.items():
        shown = keys[key].strip()
        if isinstance(value, str):
            assert shown == value, key
        elif isinstance(value, (int, np.integer)):
            assert int(shown) == value, key
        else:   # printed with 3 significant figures (or 0.1 h / 0.1 sigma)
            assert float(shown) == pytest.approx(value, rel=6e-3, abs=0.051), key
    assert set(expected) <= set(keys)
    assert summary_numbers(table)["status"] == {k: int(v) for k, v in status.items()}


def test_text_at_least_8_pt(written):
    from matplotlib.text import Text

    report = written[0]
    for name, (fig, _) in report.figures.items():
        for text in fig.findobj(Text):
            if text.get_text().strip() and text.get_visible():
                assert text.get_fontsize() >= plots.MIN_FONT_PT, (name, text.get_text())


def _gid(fig, gid):
    found = [a for a in fig.findobj(lambda a: a.get_gid() == gid)]
    assert found, gid
    return found[0]


def test_hr_and_kiel_plot_the_table(ranked):
    table, _ = ranked
    grid = load_grid()
    tracks = plots.track_points(grid, 0.02)
    cand = table[(table["status"] == st.OK) & (table["priority"] > 0)].sort_values("priority")
    hr = plots.hr_diagram(table, tracks, 0.0)
    ax = hr.axes[0]
    assert ax.xaxis_inverted() and not ax.yaxis_inverted()
    points = _gid(hr, "candidates")
    np.testing.assert_allclose(points.get_offsets(), cand[["teff_k", "logl_lsun"]].to_numpy())
    np.testing.assert_allclose(points.get_array(), np.maximum(np.log10(cand["priority"]), plots.LOG_PRIORITY_FLOOR))
    assert np.all(np.diff(points.get_sizes()) >= 0)        # sorted by priority: sizes grow
    kiel = plots.kiel_diagram(table, tracks, 0.0)
    ax = kiel.axes[0]
    assert ax.xaxis_inverted() and ax.yaxis_inverted()
    logg = 4.438 + np.log10(cand["mass_msun"]) - 2 * np.log10(cand["radius_rsun"])   # IAU 2015 nominal
    np.testing.assert_allclose(_gid(kiel, "candidates").get_offsets()[:, 1], logg)
    zero = table[(table["status"] == st.OK) & ~(table["priority"] > 0)]
    assert len(_gid(hr, "zero").get_offsets()) == len(zero.dropna(subset=["teff_k", "logl_lsun"]))


def test_cluster_figures_plot_the_table(ranked, written):
    table, _ = ranked
    report = written[0]
    cmd = report.figures["colour_magnitude"][0]
    assert cmd.axes[0].yaxis_inverted()
    cand = table[(table["status"] == st.OK) & (table["priority"] > 0)].sort_values("priority")
    np.testing.assert_allclose(_gid(cmd, "candidates").get_offsets(), cand[["bp_rp", "g_mag"]].to_numpy())
    iso = _gid(cmd, "isochrone")
    assert np.nanmin(iso.get_ydata()) < table["g_mag"].min()   # the isochrone reaches the brightest members
    rot = report.figures["rotation"][0]
    rapid = table[table["rapid_rotator"].astype(bool)]
    rings = _gid(rot, "anomalous").get_offsets()
    np.testing.assert_allclose(rings[:, 0], rapid["bp_rp"])
    np.testing.assert_allclose(rings[:, 1], np.where(rapid["veq_kms"].notna(), rapid["veq_kms"], rapid["vsini_kms"]))
    dwarfs = table[table["stage"] == "main_sequence"].dropna(subset=["prot_d", "bp_rp"])
    np.testing.assert_allclose(_gid(rot, "period:main_sequence").get_offsets(), dwarfs[["bp_rp", "prot_d"]].to_numpy())


def test_significance_budget_night_season(ranked, written):
    table, _ = ranked
    report, out, paths, plan, season = written
    sig = report.figures["significance_lifetime"][0]
    assert _gid(sig, "z_threshold").get_ydata()[0] == 3.0
    assert _gid(sig, "min_lifetime").get_xdata()[0] == 1.0
    ms = table[(table["status"] == st.OK) & (table["stage"] == "main_sequence") & (table["lifetime_myr"] > 0)]
    np.testing.assert_allclose(_gid(sig, "stage:main_sequence").get_offsets(), ms[["lifetime_myr", "z_enrich"]])
    budget = report.figures["budget"][0]
    rk = table[table["rank"].notna()].sort_values("rank")
    line = _gid(budget, f"hours:{rk['instrument'].iloc[0]}")
    np.testing.assert_allclose(line.get_ydata(), np.cumsum(rk["time_on_target_s"]) / 3600)
    night = report.figures["night"][0]
    slot = _gid(night, f"slot:{plan['star_id'][0]}")
    assert slot.get_ydata()[0] == pytest.approx(90 - np.degrees(np.arccos(1 / 1.1)))
    assert len(night.findobj(lambda a: str(a.get_gid()).startswith("slot:"))) == 3   # first night only
    assert "2027-03-15" in night.axes[0].get_title()
    heat = report.figures["season"][0].axes[0].images[0].get_array()
    np.testing.assert_allclose(heat[0], [100.0, 90.0])        # dark time first
    np.testing.assert_allclose(heat[1:], season[["2027-02_hours", "2027-03_hours"]].to_numpy())


def test_report_command(tmp_path, ranked):
    table, meta = ranked
    path = tmp_path / "ranked.csv"
    write_table(table, path, meta)
    runner = CliRunner()
    result = runner.invoke(app, ["report", str(path), "-o", str(tmp_path / "r.html")])
    assert result.exit_code == 0, result.output
    assert (tmp_path / "r.html").exists() and (tmp_path / "r_figures" / "hr_diagram.svg").exists()
    bad = runner.invoke(app, ["report", str(path), "-o", str(tmp_path / "r.txt")])
    assert bad.exit_code == 1 and "html" in bad.output
    plain = tmp_path / "plain.csv"
    pd.DataFrame({"a": [1]}).to_csv(plain, index=False)
    missing = runner.invoke(app, ["report", str(plain)])
    assert missing.exit_code == 1 and "star_id" in missing.output


def test_escaping_of_table_text(ranked):
    table, meta = ranked
    odd = table.copy()
    odd.loc[odd.index[0], "star_id"] = "<b>Valtra&5</b>"
    report = build_report(odd.head(40), meta, "x.csv")
    report.figures = {}
    html = render_html(report, {})
    assert "<b>Valtra" not in html and "&lt;b&gt;Valtra&amp;5" in html


def test_map_figure_explains_every_mark():
    """The detectability map (``prioritize map``): legend entries for the phase lines, the
    bump, the favourable outline, the threshold contours, the grey cells and the
    hatching; the caution not in the title; no cyan; text >= 8 pt; a readable size."""
    from matplotlib.colors import to_rgba
    from matplotlib.text import Text

    from prioritize.detectability import cluster_window, default_map_eeps, detectability_map
    from prioritize.report.figures import detectability_figure
    from prioritize import CAUTION

    grid, cfg = load_grid(), load_config()
    table = detectability_map(grid, cfg, 0.0, [0.8, 0.9, 1.0, 1.2], default_map_eeps(20))
    window = cluster_window(grid, cfg, 4.0, 0.0, 800.0, 0.05)
    fig = detectability_figure(table, 3.0, 1.0, window, "test map")
    legend_text = " ".join(t.get_text() for leg in fig.legends for t in leg.get_texts())
    for words in ("turn-off, subgiant branch, giant branch", "RGB bump", "favourable region",
                  "threshold contour", "no signature computed", "hatched: older than the Universe",
                  "isochrone"):
        assert words in legend_text
    assert CAUTION not in fig._suptitle.get_text()
    assert any(CAUTION in leg.get_title().get_text() for leg in fig.legends)
    cyan = to_rgba("cyan")
    for artist in fig.findobj(lambda a: hasattr(a, "get_edgecolor")):
        colours = np.atleast_2d(artist.get_edgecolor())
        assert not any(np.allclose(c, cyan) for c in colours if len(c) == 4)
    for text in fig.findobj(Text):
        if text.get_text().strip() and text.get_visible():
            assert text.get_fontsize() >= plots.MIN_FONT_PT, text.get_text()
    width, height = fig.get_size_inches()
    assert width <= 11.0 and width / height < 1.5            # no 2046 x 616 px strip


def test_rank_report_writes_the_report(tmp_path):
    catalog = tmp_path / "few.csv"
    pd.read_csv(ROOT / "sample_catalogs" / "field_stars.csv").head(60).to_csv(catalog, index=False)
    out = tmp_path / "ranked.csv"
    result = CliRunner().invoke(app, ["rank", str(catalog), "-o", str(out), "--report"])
    assert result.exit_code == 0, result.output
    html = tmp_path / "ranked_report.html"
    assert html.exists() and str(html) in result.output
    keys = _parse(html.read_text(encoding="utf-8")).keys
    table = pd.read_csv(out)
    assert int(keys["rows"]) == len(table) == 60
    assert int(keys["status.ok"]) == int((table["status"] == "ok").sum())
    assert "no metadata found" not in html.read_text(encoding="utf-8")   # assumptions from the run itself
