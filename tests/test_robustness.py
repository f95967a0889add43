"""Bad input across every command: exit code 0 (ok), 1 (user mistake, one line) or 2
(internal error, one line asking for a report); never a traceback; every input row in
the output with a status.  Written files read back; a killed writer leaves the old or
the new file with its own provenance; no command opens a socket.

(Exit-code conventions and atomic writes are common practice for a command-line tool;
the catalogs are invented.)
"""

from __future__ import annotations

import json
import os
import signal
import socket
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from typer.testing import CliRunner

from prioritize.catalog import status as st
from prioritize.cli import app

runner = CliRunner()
FAST = "[scoring]\nsamples_per_star = 8\n"
HEADER = "star_id,ra_deg,dec_deg,teff_k,logg,feh,g_mag,bp_rp,parallax_mas,prot_d,vsini_kms"
GOOD = "150.0,20.0,5700,4.4,0.0,10,0.8,5,25,2"
COARSE_MAP = ["--mass-min", "0.9", "--mass-max", "1.4", "--mass-step", "0.25", "--eep-points", "12"]


def _good(star_id="good"):
    return f"{star_id},{GOOD}"


def _row(**changes):
    """A GOOD row with some values replaced (by column name)."""
    names = HEADER.split(",")[1:]
    values = dict(zip(names, GOOD.split(",")))
    values.update({k: str(v) for k, v in changes.items()})
    return "bad," + ",".join(values[n] for n in names)


# rank cases that write a table: (id, catalog text, expected status of row "bad" or None)
TABLE_CASES = [
    ("prot-zero", _row(prot_d=0), st.INVALID_VALUE),
    ("prot-negative", _row(prot_d=-3), st.INVALID_VALUE),
    ("prot-tiny-veq-above-0.1c", _row(prot_d=1e-9), st.INVALID_VALUE),
    ("vsini-negative", _row(vsini_kms=-1), st.INVALID_VALUE),
    ("vsini-above-0.1c", _row(vsini_kms=1e6), st.INVALID_VALUE),
    ("teff-zero", _row(teff_k=0), st.INVALID_VALUE),
    ("teff-negative", _row(teff_k=-5), st.INVALID_VALUE),
    ("teff-text", _row(teff_k="hot"), st.INVALID_VALUE),
    ("teff-inf", _row(teff_k="inf"), st.INVALID_VALUE),
    ("teff-1e308", _row(teff_k="1e308"), st.INVALID_VALUE),
    ("feh-far-below-grid", _row(feh=-3), st.OUT_OF_MODEL_RANGE),
    ("hot-star", _row(teff_k=20000), None),
    ("logg-99", _row(logg=99), st.INVALID_VALUE),
    ("negative-parallax-no-error", _row(parallax_mas=-2), st.INVALID_VALUE),
    ("all-blank", "bad,,,,,,,,,,", st.MISSING_INPUTS),
    ("nan-text", "bad," + ",".join(["NaN"] * 10), st.MISSING_INPUTS),
    ("control-character-id", _row().replace("bad", "b\x01ad"), None),
    ("quoted-newline-id", _row().replace("bad", '"b\nad"'), None),
    ("duplicate-id", _good("good"), st.DUPLICATE_ID),
]


@pytest.fixture(scope="module")
def fast_config(tmp_path_factory):
    path = tmp_path_factory.mktemp("cfg") / "fast.toml"
    path.write_text(FAST)
    return path


def _clean(result):
    """No traceback, and a failing run says so in one line."""
    assert "Traceback" not in result.output, result.output
    if result.exit_code == 1:
        assert result.output.strip(), "a user error must say what is wrong"
    if result.exit_code == 2:
        assert "please report it" in result.output


@pytest.mark.parametrize("case, body, expected", TABLE_CASES, ids=[c[0] for c in TABLE_CASES])
@pytest.mark.parametrize("output", ["out.csv"])
def test_rank_keeps_every_row_with_a_status(tmp_path, fast_config, case, body, expected, output):
    src = tmp_path / "cands.csv"
    src.write_text(f"{HEADER}\n{_good()}\n{body}\n", encoding="utf-8")
    out = tmp_path / output
    result = runner.invoke(app, ["rank", str(src), "-o", str(out), "-c", str(fast_config)])
    _clean(result)
    assert result.exit_code == 0, result.output
    from prioritize.catalog.io import read_table
    table, _ = read_table(out)
    assert len(table) == 2                                     # rows out = rows in
    assert set(table["status"]) <= set(st.ALL)
    assert table.loc[table["star_id"] == "good", "status"].iloc[0] == st.OK
    if expected is not None:
        assert (table["status"] == expected).sum() >= 1, table[["star_id", "status", "note"]]
    check = runner.invoke(app, ["check", str(src), "-c", str(fast_config)])
    _clean(check)
    assert check.exit_code == 0 and "2 rows checked" in check.output


def _bytes(tmp_path, name, data):
    path = tmp_path / name
    path.write_bytes(data if isinstance(data, bytes) else data.encode())
    return path


def _truncated_fits(tmp_path):
    from astropy.table import Table
    whole = tmp_path / "whole.fits"
    Table({"star_id": ["a"] * 50, "teff_k": [5700.0] * 50}).write(whole)
    return _bytes(tmp_path, "cut.fits", whole.read_bytes()[:4000])


# (id, command builder(tmp_path, good_catalog, ranked) -> argv, expected exit code)
def _catalog_case(name, data, command="rank", extra=()):
    return lambda tmp, good, ranked, cfg: [command, str(_bytes(tmp, name, data)), *extra,
                                           *(["-c", str(cfg)] if command != "explain" else [])]


COMMAND_CASES = [
    ("rank-empty-file", _catalog_case("e.csv", ""), 1),
    ("rank-ragged", _catalog_case("r.csv", "star_id,teff_k\na,5700,1,2\nb\n"), 1),
    ("rank-binary", _catalog_case("b.csv", bytes(range(256)) * 8), 1),
    ("rank-truncated-fits", lambda tmp, good, ranked, cfg: ["rank", str(_truncated_fits(tmp))], 1),
    ("rank-directory", lambda tmp, good, ranked, cfg: ["rank", str(tmp)], 1),
    ("rank-missing-file", lambda tmp, good, ranked, cfg: ["rank", str(tmp / "none.csv")], 1),
    ("rank-output-is-input", lambda tmp, good, ranked, cfg: ["rank", str(good), "-o", str(good)], 1),
    ("rank-output-folder-missing",
     lambda tmp, good, ranked, cfg: ["rank", str(good), "-o", str(tmp / "no" / "o.csv")], 1),
    ("rank-output-unknown-format", lambda tmp, good, ranked, cfg: ["rank", str(good), "-o", str(tmp / "o.xyz")], 1),
    ("rank-planet-mass-nan", lambda tmp, good, ranked, cfg: ["rank", str(good), "--planet-mass", "nan"], 1),
    ("rank-planet-mass-text", lambda tmp, good, ranked, cfg: ["rank", str(good), "--planet-mass", "big"], 1),
    ("rank-planet-mass-negative", lambda tmp, good, ranked, cfg: ["rank", str(good), "--planet-mass", "-1"], 1),
    ("rank-seed-negative", lambda tmp, good, ranked, cfg: ["rank", str(good), "--seed", "-1"], 1),
    ("rank-config-nan", lambda tmp, good, ranked, cfg: ["rank", str(good), "-c",
                                                        str(_bytes(tmp, "n.toml", "[planet]\nmass_mjup = nan\n"))], 1),
    ("rank-config-unknown-key", lambda tmp, good, ranked, cfg: [
        "rank", str(good), "-c", str(_bytes(tmp, "u.toml", "[planet]\nmass_jup = 2\n"))], 1),
    ("rank-config-not-toml", lambda tmp, good, ranked, cfg: [
        "rank", str(good), "-c", str(_bytes(tmp, "x.toml", "this is = = not toml\n"))], 1),
    ("rank-columns-nonsense", lambda tmp, good, ranked, cfg: ["rank", str(good), "--columns", "nonsense"], 1),
    ("rank-unknown-option", lambda tmp, good, ranked, cfg: ["rank", str(good), "--fast"], 1),
    ("rank-no-star-rows", _catalog_case("h.csv", HEADER + "\n"), 1),
    ("check-empty-file", _catalog_case("e.csv", "", "check"), 1),
    ("check-ragged", _catalog_case("r.csv", "star_id,teff_k\na,5700,1,2\n", "check"), 1),
    ("check-truncated-fits", lambda tmp, good, ranked, cfg: ["check", str(_truncated_fits(tmp))], 1),
    ("check-not-utf8", _catalog_case("l.csv", "star_id,teff_k\n\xe9t\xe9,5700\n".encode("latin-1"), "check"), 1),
    ("check-semicolons", _catalog_case("s.csv", HEADER.replace(",", ";") + "\n" + _good().replace(",", ";"),
                                       "check"), 0),
    ("explain-unknown-star", lambda tmp, good, ranked, cfg: ["explain", str(good), "nobody"], 1),
    ("explain-empty-file", _catalog_case("e.csv", "", "explain", ["x"]), 1),
    ("explain-rejected-row", lambda tmp, good, ranked, cfg: [
        "explain", str(_bytes(tmp, "p.csv", f"{HEADER}\n{_row(prot_d=0)}\n")), "bad"], 0),
    ("night-unknown-site", lambda tmp, good, ranked, cfg: ["night", str(ranked), "--site", "atlantis",
                                                           "--date", "2027-03-15"], 1),
    ("night-bad-date", lambda tmp, good, ranked, cfg: ["night", str(ranked), "--site", "mauna-kea",
                                                       "--date", "15/03/2027"], 1),
    ("night-no-priority", lambda tmp, good, ranked, cfg: ["night", str(good), "--site", "mauna-kea",
                                                          "--date", "2027-03-15"], 1),
    ("night-empty-file", lambda tmp, good, ranked, cfg: ["night", str(_bytes(tmp, "e.csv", "")), "--site",
                                                         "mauna-kea", "--date", "2027-03-15"], 1),
    ("night-airmass-nan", lambda tmp, good, ranked, cfg: ["night", str(ranked), "--site", "mauna-kea",
                                                          "--date", "2027-03-15", "--airmass-max", "nan"], 1),
    ("night-bad-coordinates", lambda tmp, good, ranked, cfg: [
        "night", str(_bytes(tmp, "c.csv", "star_id,ra_deg,dec_deg,priority\na,x,100,1\nb,10,20,0.5\n")),
        "--site", "mauna-kea", "--date", "2027-03-15", "--priority-column", "priority",
        "-o", str(tmp / "plan.csv")], 0),
    ("season-bad-semester", lambda tmp, good, ranked, cfg: ["season", str(ranked), "--site", "paranal",
                                                            "--semester", "2027Q"], 1),
    ("season-unknown-site", lambda tmp, good, ranked, cfg: ["season", str(ranked), "--site", "atlantis",
                                                            "--semester", "2027A"], 1),
    ("season-missing-columns", lambda tmp, good, ranked, cfg: [
        "season", str(_bytes(tmp, "m.csv", "star_id\na\n")), "--site", "paranal", "--semester", "2027A"], 1),
    ("map-feh-off-grid", lambda tmp, good, ranked, cfg: ["map", "--feh", "0.5", *COARSE_MAP,
                                                         "-o", str(tmp / "m.csv")], 1),
    ("map-feh-nan", lambda tmp, good, ranked, cfg: ["map", "--feh", "nan", *COARSE_MAP, "-o", str(tmp / "m.csv")], 1),
    ("map-age-without-distance", lambda tmp, good, ranked, cfg: ["map", "--cluster-age", "2", *COARSE_MAP,
                                                                 "-o", str(tmp / "m.csv")], 1),
    ("map-mass-range-reversed", lambda tmp, good, ranked, cfg: [
        "map", "--mass-min", "2", "--mass-max", "1", "--eep-points", "12", "-o", str(tmp / "m.csv")], 1),
    ("map-output-unknown-format", lambda tmp, good, ranked, cfg: ["map", *COARSE_MAP, "-o", str(tmp / "m.xyz")], 1),
    ("map-ebv-nan", lambda tmp, good, ranked, cfg: ["map", "--ebv", "nan", "--cluster-age", "2", "--distance",
                                                    "100", *COARSE_MAP, "-o", str(tmp / "m.csv")], 1),
    ("map-mass-step-nan", lambda tmp, good, ranked, cfg: ["map", "--mass-step", "nan", "-o", str(tmp / "m.csv")], 1),
    ("night-date-february-30", lambda tmp, good, ranked, cfg: ["night", str(ranked), "--site", "mauna-kea",
                                                               "--date", "2027-02-30"], 1),
    ("season-period-reversed", lambda tmp, good, ranked, cfg: ["season", str(ranked), "--site", "paranal",
                                                               "--start", "2027-05-01", "--end", "2027-04-01"], 1),
    ("rank-instrument-unknown", lambda tmp, good, ranked, cfg: ["rank", str(good), "--instrument", "nope"], 1),
    ("rank-reference-is-a-catalog", lambda tmp, good, ranked, cfg: ["rank", str(good), "--reference", str(good)], 1),
    ("rank-tracks-is-a-catalog", lambda tmp, good, ranked, cfg: ["rank", str(good), "--tracks", str(good)], 1),
    ("demo-output-dir-is-a-file", lambda tmp, good, ranked, cfg: ["demo", "--output-dir", str(good)], 1),
    ("report-not-a-ranked-table", lambda tmp, good, ranked, cfg: ["report", str(good), "-o", str(tmp / "r.html")], 1),
    ("report-empty-file", lambda tmp, good, ranked, cfg: ["report", str(_bytes(tmp, "e.csv", "")), "-o",
                                                          str(tmp / "r.html")], 1),
    ("report-output-not-html", lambda tmp, good, ranked, cfg: ["report", str(ranked), "-o", str(tmp / "r.xyz")], 1),
    ("report-output-folder-missing", lambda tmp, good, ranked, cfg: ["report", str(ranked), "-o",
                                                                     str(tmp / "no" / "r.html")], 1),
    ("report-night-not-a-plan", lambda tmp, good, ranked, cfg: ["report", str(ranked), "--night", str(good),
                                                                "-o", str(tmp / "r.html")], 1),
    ("unknown-command", lambda tmp, good, ranked, cfg: ["rnak", str(good)], 1),
]


@pytest.fixture(scope="module")
def ranked(tmp_path_factory, fast_config):
    folder = tmp_path_factory.mktemp("ranked")
    good = folder / "good.csv"
    good.write_text(f"{HEADER}\n{_good('a')}\n{_good('b').replace('150.0', '160.0')}\n")
    out = folder / "good_ranked.csv"
    result = runner.invoke(app, ["rank", str(good), "-o", str(out), "-c", str(fast_config)])
    assert result.exit_code == 0, result.output
    return good, out


@pytest.mark.parametrize("case, argv, code", COMMAND_CASES, ids=[c[0] for c in COMMAND_CASES])
def test_command_matrix_exit_codes(tmp_path, ranked, fast_config, case, argv, code):
    good, ranked_path = ranked
    args = argv(tmp_path, good, ranked_path, fast_config)
    if args[0] in ("rank",) and "-o" not in args:
        args += ["-o", str(tmp_path / "out.csv")]
    result = runner.invoke(app, args)
    _clean(result)
    assert result.exit_code == code, result.output
    if code == 1:
        errors = [line for line in result.output.splitlines() if line.lower().startswith(("error", "usage"))]
        assert errors, result.output
    if case == "rank-output-is-input":
        assert good.read_text().startswith(HEADER)


def test_matrix_is_large_enough():
    assert len(TABLE_CASES) + len(COMMAND_CASES) >= 40


# ----------------------------------------------------------------- internal errors

def test_an_internal_fault_is_exit_2_with_one_line_and_traceback_only_with_debug(ranked, monkeypatch, tmp_path):
    import prioritize.engine as engine

    def broken(*args, **kwargs):
        raise RuntimeError("simulated fault")
    monkeypatch.setattr(engine, "rank_table", broken)
    good, _ = ranked
    out = tmp_path / "o.csv"
    result = runner.invoke(app, ["rank", str(good), "-o", str(out)])
    assert result.exit_code == 2, result.output
    lines = result.output.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("internal error: RuntimeError: simulated fault")
    assert "please report it" in lines[0] and "--debug" in lines[0]
    debug = runner.invoke(app, ["--debug", "rank", str(good), "-o", str(out)])
    assert debug.exit_code == 2 and "Traceback" in debug.output and "simulated fault" in debug.output
    assert not out.exists()


def test_a_row_the_chain_fails_on_is_computation_failed_and_the_run_goes_on(tmp_path, fast_config, monkeypatch):
    import prioritize.chain as engine
    original = engine._measured_lithium_columns

    def fails_for_one_star(out, df, composition):
        if (df["star_id"].astype(str) == "boom").any() and (df["status"] == st.OK).any():
            raise ZeroDivisionError("simulated per-row fault")
        return original(out, df, composition)
    monkeypatch.setattr(engine, "_measured_lithium_columns", fails_for_one_star)
    src = tmp_path / "c.csv"
    src.write_text(f"{HEADER}\n{_good('a')}\n{_good('boom')}\n{_good('c')}\n{_good('d')}\n")
    out = tmp_path / "o.csv"
    result = runner.invoke(app, ["rank", str(src), "-o", str(out), "-c", str(fast_config)])
    assert result.exit_code == 0, result.output
    table = pd.read_csv(out).set_index("star_id")
    assert len(table) == 4
    assert table.loc["boom", "status"] == st.COMPUTATION_FAILED
    assert "simulated per-row fault" in table.loc["boom", "note"]
    assert (table.drop(index="boom")["status"] == st.OK).all()
    # the other rows keep their own numbers (per-row random streams)
    monkeypatch.setattr(engine, "_measured_lithium_columns", original)
    runner.invoke(app, ["rank", str(src), "-o", str(tmp_path / "o2.csv"), "-c", str(fast_config)])
    clean = pd.read_csv(tmp_path / "o2.csv").set_index("star_id")
    for star in ("a", "c", "d"):
        assert table.loc[star, "z_enrich"] == pytest.approx(clean.loc[star, "z_enrich"], rel=1e-12)


# ----------------------------------------------------------------- offline

def test_every_command_runs_with_sockets_blocked(ranked, tmp_path, monkeypatch, fast_config):
    class NoNetwork(socket.socket):
        def __init__(self, *args, **kwargs):
            raise OSError("network access attempted")
    monkeypatch.setattr(socket, "socket", NoNetwork)
    monkeypatch.setattr(socket, "create_connection",
                        lambda *a, **k: (_ for _ in ()).throw(OSError("network access attempted")))
    good, ranked_path = ranked
    runs = [["rank", str(good), "-o", str(tmp_path / "r.csv"), "-c", str(fast_config)],
            ["night", str(ranked_path), "--site", "mauna-kea", "--date", "2027-03-15", "-o",
             str(tmp_path / "plan.csv")],
            ["season", str(ranked_path), "--site", "la-silla", "--semester", "2027A", "-o",
             str(tmp_path / "season.csv")],
            ["map", *COARSE_MAP, "-o", str(tmp_path / "map.csv")],
            ["report", str(ranked_path), "--night", str(tmp_path / "plan.csv"), "--season",
             str(tmp_path / "season.csv"), "-o", str(tmp_path / "report.html")]]
    for argv in runs:
        result = runner.invoke(app, argv)
        assert result.exit_code == 0, (argv[0], result.output)
        assert "network access attempted" not in result.output


# ----------------------------------------------------------------- kill -9 while writing

WRITER = r"""
import sys, pandas as pd
from prioritize.catalog.io import write_table
table = pd.read_parquet(sys.argv[1])
target = sys.argv[2]
print("ready", flush=True)
version = int(sys.argv[3])
while True:
    version += 1
    write_table(table.assign(version=version), target, {"version": version})
"""


@pytest.mark.parametrize("suffix", [".csv", ".parquet"])
def test_kill_during_write_leaves_a_complete_file_with_its_own_provenance(tmp_path, suffix):
    """A 20,000-row ranked-like table rewritten in a loop by a child process, killed
    with SIGKILL at several moments: the target is always a complete table whose
    provenance names its own version; the next write leaves no temporary behind."""
    from prioritize.catalog.io import read_table, write_table
    n = 20_000
    rng = np.random.default_rng(5)
    table = pd.DataFrame({"star_id": [f"S{i}" for i in range(n)], "status": "ok",
                          "note": "a note, with a comma", **{f"x{j}": rng.normal(size=n) for j in range(12)}})
    source = tmp_path / "table.parquet"
    table.to_parquet(source)
    target = tmp_path / f"ranked{suffix}"
    write_table(table.assign(version=0), target, {"version": 0})
    script = tmp_path / "writer.py"
    script.write_text(WRITER)
    interrupted, versions = 0, set()
    # several moments; more (up to 12 kills) until a kill has landed mid-write and the
    # target has been replaced at least once, so the checks below are not vacuous
    for attempt, moment in enumerate((0.0, 0.2, 0.8, 3.0, 0.05, 0.4, 1.5, 0.1, 0.6, 2.0, 0.3, 1.0)):
        if attempt >= 4 and interrupted >= 1 and len(versions) >= 2:
            break
        child = subprocess.Popen([sys.executable, str(script), str(source), str(target), "0"],
                                 stdout=subprocess.PIPE, text=True)
        assert child.stdout.readline().strip() == "ready"
        time.sleep(moment)
        child.send_signal(signal.SIGKILL)
        child.wait()
        back, meta = read_table(target)
        assert len(back) == n and back["star_id"].iloc[-1] == f"S{n - 1}"
        assert back["version"].nunique() == 1
        assert meta.get("version") == int(back["version"].iloc[0]), (moment, meta)
        interrupted += bool(list(tmp_path.glob(f".{target.name}.*.part")))
        versions.add(meta["version"])
    assert interrupted >= 1 and len(versions) >= 2     # some kills did land mid-write
    write_table(table.assign(version=-1), target, {"version": -1})
    assert not list(tmp_path.glob(".*.part"))


# ----------------------------------------------------------------- writers read back

@pytest.mark.parametrize("suffix", [".csv", ".tsv", ".ecsv", ".vot", ".fits", ".parquet"])
def test_control_characters_are_escaped_so_every_format_reads_back(tmp_path, suffix):
    from prioritize.catalog.io import read_table, write_table
    ids = ["a\x01b", "x\ny", "t\tq", 'q"u,o', "n\x00z", "d\x7fe", "plain"]
    table = pd.DataFrame({"star_id": ids, "note": ["bell\x07"] * len(ids), "teff_k": np.arange(len(ids), 
                                                                                                dtype=float)})
    path = write_table(table, tmp_path / f"t{suffix}", {"run": "r\x02"})
    back, meta = read_table(path)
    assert list(back["star_id"]) == ["a\\x01b", "x\\x0ay", "t\\x09q", 'q"u,o', "n\\x00z", "d\\x7fe", "plain"]
    assert list(back["note"]) == ["bell\\x07"] * len(ids)
    assert meta["run"] == "r\x02"            # metadata is JSON, which escapes on its own


def test_value_rules_are_shared_by_check_and_rank(tmp_path, fast_config):
    """vsini above 0.1 c (c exact, SI) is invalid in check and rank alike; a zero
    parallax error gets a note in both; a period giving v_eq above 0.1 c is a status."""
    src = tmp_path / "c.csv"
    src.write_text(f"{HEADER},parallax_mas_err\n{_good()},0.1\n{_row(vsini_kms=3.1e4)},0.1\n"
                   f"{_row(prot_d=1e-9).replace('bad', 'spin')},0.1\n{_good('zero')},0\n")
    check = runner.invoke(app, ["check", str(src), "-c", str(fast_config)])
    assert check.exit_code == 0
    assert "vsini_kms = 3.1e+04 km/s is above 0.1 c" in check.output
    assert "parallax_mas_err = 0: a zero uncertainty" in check.output
    out = tmp_path / "o.csv"
    assert runner.invoke(app, ["rank", str(src), "-o", str(out), "-c", str(fast_config)]).exit_code == 0
    table = pd.read_csv(out).set_index("star_id")
    assert table.loc["bad", "status"] == st.INVALID_VALUE and "0.1 c" in table.loc["bad", "note"]
    assert table.loc["spin", "status"] == st.INVALID_VALUE and "above 0.1 c" in table.loc["spin", "note"]
    assert table.loc["zero", "status"] == st.OK and "zero uncertainty" in table.loc["zero", "note"]
