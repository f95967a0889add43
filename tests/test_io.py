"""Reading catalogs, writing tables: round trips, independent readers, errors, atomicity.

Reference readers used as the outside check: Python's ``csv`` module, ``pyarrow.parquet``,
``astropy.io.fits``, ``astropy.io.votable`` and ``astropy.table`` (ECSV), and
``astropy.units`` for unit conversions.
"""

from __future__ import annotations

import csv
import gzip
import json
import warnings

import numpy as np
import pandas as pd
import pytest

from prioritize.catalog import io as catalog_io
from prioritize.catalog.io import (parse_column_option, provenance_metadata, read_catalog, read_table,
                                   write_table)
from prioritize.errors import CatalogError, ConfigError

# Floats are written in a lossless form by every writer (binary, or shortest repr for text).
FLOAT_ROUNDTRIP_RTOL = 0.0              # exact
# astropy's arcsec -> mas factor carries one rounding of a float64 product.
UNIT_CONVERSION_RTOL = 1e-12            # relative, float64 round-off
# A Gaia DR3 source_id exceeds 2**53, so it must travel as text to stay exact.
# Barnard's star, Gaia DR3 4472832130942575872 (from memory; any 19-digit id serves).
GAIA_DR3_SOURCE_ID = "4472832130942575872"

EXTENSIONS = ["csv", "csv.gz", "tsv", "parquet", "fits", "ecsv", "vot", "xml"]


def _sample() -> pd.DataFrame:
    """Floats with NaN, ints, booleans (plain and with gaps), unicode text with gaps."""
    return pd.DataFrame({
        "star_id": pd.array([GAIA_DR3_SOURCE_ID, "α Cen A", "HD 10700", "row4"], dtype="str"),
        "rank": np.array([1, 2, 3, 4], dtype=np.int64),
        "teff_k": [5772.0, np.nan, 5310.123456789012, 3042.0],
        "priority": [1e-30, 0.1, np.nan, -2.5e7],
        "a_li_is_limit": [True, False, False, True],
        "seen": pd.Series([True, np.nan, False, True], dtype=object),
        "note": pd.array(["Li 6708 Å strong", None, "ñ", "ok"], dtype="str"),
        "status": pd.array(["ok", "ok", "invalid_value", "missing_inputs"], dtype="str"),
    })


def _assert_same(back: pd.DataFrame, expected: pd.DataFrame) -> None:
    assert list(back.columns) == list(expected.columns)
    for name in expected.columns:
        got, want = back[name], expected[name]
        if pd.api.types.is_float_dtype(want.dtype):
            np.testing.assert_allclose(got.to_numpy(float), want.to_numpy(float),
                                       rtol=FLOAT_ROUNDTRIP_RTOL, equal_nan=True, err_msg=name)
        else:
            assert got.astype(object).where(got.notna(), None).tolist() == \
                want.astype(object).where(want.notna(), None).tolist(), name


@pytest.mark.parametrize("ext", EXTENSIONS)
def test_every_writer_round_trips_with_metadata(tmp_path, ext):
    table = _sample()
    meta = provenance_metadata({"planet": {"mass_mjup": 1.0}, "cluster": {"age_gyr": float("nan")}})
    path = write_table(table, tmp_path / f"ranked.{ext}", meta)
    back, stored = read_table(path)
    _assert_same(back, table)
    assert pd.api.types.is_bool_dtype(back["a_li_is_limit"].dtype)
    assert pd.api.types.is_integer_dtype(back["rank"].dtype)
    assert stored["version"] == meta["version"] and stored["caution"] == meta["caution"]
    assert stored["config"]["planet"] == {"mass_mjup": 1.0}
    assert stored["config"]["cluster"]["age_gyr"] is None        # NaN ("not set") stored as null


def test_csv_metadata_goes_to_a_json_sidecar(tmp_path):
    path = write_table(_sample(), tmp_path / "ranked.csv", {"tool": "prioritize"})
    sidecar = tmp_path / "ranked.csv.meta.json"
    import hashlib
    stored = json.loads(sidecar.read_text())
    # the checksum ties the sidecar to this table (hashlib's SHA-256 of the file)
    assert stored == {"tool": "prioritize", "table_sha256": hashlib.sha256(path.read_bytes()).hexdigest()}
    assert read_table(path)[1] == {"tool": "prioritize"}
    with open(path, newline="", encoding="utf-8") as fh:
        assert next(csv.reader(fh))[0] == "star_id"          # no comment lines in the CSV


def test_written_files_read_by_reference_libraries(tmp_path):
    """Files are plain standard formats: independent readers see the same values."""
    import pyarrow.parquet as pq
    from astropy.io import fits, votable
    from astropy.table import Table

    table = _sample()
    expected_teff = table["teff_k"].to_numpy()
    expected_ids = table["star_id"].tolist()

    write_table(table, tmp_path / "t.csv")
    with open(tmp_path / "t.csv", newline="", encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh))
    assert [r["star_id"] for r in rows] == expected_ids
    np.testing.assert_allclose([float(r["teff_k"] or "nan") for r in rows], expected_teff,
                               rtol=FLOAT_ROUNDTRIP_RTOL, equal_nan=True)

    write_table(table, tmp_path / "t.parquet")
    arrow = pq.read_table(tmp_path / "t.parquet").to_pydict()
    assert arrow["star_id"] == expected_ids and arrow["seen"] == [True, None, False, True]

    write_table(table, tmp_path / "t.fits")
    with fits.open(tmp_path / "t.fits") as hdul:
        data = hdul[1].data
        assert [s.decode("utf-8") if isinstance(s, bytes) else s for s in data["star_id"]] == expected_ids
        np.testing.assert_allclose(data["teff_k"], expected_teff, rtol=FLOAT_ROUNDTRIP_RTOL, equal_nan=True)
        assert hdul[1].header["TUNIT" + str(hdul[1].columns.names.index("teff_k") + 1)] == "K"

    write_table(table, tmp_path / "t.vot")
    vot = votable.parse_single_table(str(tmp_path / "t.vot")).to_table()
    assert list(vot["star_id"]) == expected_ids
    assert str(vot["teff_k"].unit) == "K"

    write_table(table, tmp_path / "t.ecsv")
    ecsv = Table.read(tmp_path / "t.ecsv", format="ascii.ecsv")
    assert list(ecsv["star_id"]) == expected_ids and list(ecsv["rank"]) == [1, 2, 3, 4]


def test_atomic_write_leaves_old_file_and_no_partial_file(tmp_path, monkeypatch):
    target = tmp_path / "ranked.parquet"
    write_table(_sample(), target)
    before = target.read_bytes()

    def half_written(table, path, metadata, final):
        path.write_bytes(b"PAR1 partial")
        raise OSError("No space left on device")

    monkeypatch.setitem(catalog_io._WRITERS, "parquet", half_written)
    with pytest.raises(CatalogError, match="No space left") as info:
        write_table(_sample().iloc[:1], target)
    assert isinstance(info.value.__cause__, OSError)
    assert target.read_bytes() == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["ranked.parquet"]


def test_atomic_write_of_new_file_failing_creates_nothing(tmp_path):
    class Unprintable:
        def __str__(self):
            raise ValueError("cannot be turned into text")

    table = pd.DataFrame({"star_id": ["a", "b"], "thing": [Unprintable(), Unprintable()]})
    with pytest.raises(CatalogError, match="cannot be written"):
        write_table(table, tmp_path / "out.fits")
    assert list(tmp_path.iterdir()) == []


def test_write_errors_name_the_file(tmp_path):
    with pytest.raises(CatalogError, match="does not exist"):
        write_table(_sample(), tmp_path / "no_such_folder" / "out.csv")
    with pytest.raises(CatalogError, match=r"out\.xlsx.*unknown file type"):
        write_table(_sample(), tmp_path / "out.xlsx")


def test_gzip_csv_is_compressed(tmp_path):
    path = write_table(_sample(), tmp_path / "ranked.csv.gz")
    with gzip.open(path, "rt", encoding="utf-8") as fh:
        assert fh.readline().startswith("star_id,")


GAIA_ARCHIVE_HEADER = ["source_id", "ra", "dec", "parallax", "parallax_error", "phot_g_mean_mag",
                       "phot_bp_mean_mag", "phot_rp_mean_mag", "bp_rp"]   # Gaia DR3 gaia_source names
VIZIER_HEADER = ["Name", "Teff", "e_Teff", "logg", "[Fe/H]", "E(B-V)", "l_ALi", "ALi", "e_ALi",
                 "Prot", "vsini", "Mass", "logL"]                            # VizieR-style labels


def test_gaia_archive_names_are_recognised(tmp_path):
    path = tmp_path / "gaia.csv"
    path.write_text(",".join(GAIA_ARCHIVE_HEADER) + "\n"
                    f"{GAIA_DR3_SOURCE_ID},269.452,4.693,546.9759,0.0401,8.19,9.45,7.02,2.43\n")
    table, messages = read_catalog(path)
    assert list(table.columns) == ["star_id", "ra_deg", "dec_deg", "parallax_mas", "parallax_mas_err",
                                   "g_mag", "bp_mag", "rp_mag", "bp_rp"]
    assert table["star_id"].iloc[0] == GAIA_DR3_SOURCE_ID          # exact, not via float
    assert "column 'parallax' read as parallax_mas (mas)" in messages


def test_vizier_labels_are_recognised(tmp_path):
    path = tmp_path / "lit.tsv"
    path.write_text("\t".join(VIZIER_HEADER + ["Note"]) + "\n"
                    "KIC 1\t4700\t80\t2.4\t-0.1\t0.05\t<\t0.5\t\t30\t8\t1.3\t1.6\tx\n")
    table, messages = read_catalog(path)
    assert list(table.columns) == ["star_id", "teff_k", "teff_k_err", "logg", "feh", "ebv",
                                   "a_li_is_limit", "a_li", "a_li_err", "prot_d", "vsini_kms",
                                   "mass_msun", "logl_lsun", "input_Note"]
    assert any("'Note' kept as input_Note" in m for m in messages)


def test_unknown_columns_pass_through_unchanged(tmp_path):
    path = tmp_path / "c.csv"
    path.write_text("TEFF,my_flag,Comments\n5000,3,hello\n")
    table, messages = read_catalog(path)
    assert list(table.columns) == ["star_id", "teff_k", "my_flag", "Comments"]
    assert table["my_flag"].iloc[0] == 3 and table["Comments"].iloc[0] == "hello"
    assert "kept unchanged (not a known column): my_flag, Comments" in messages


def test_missing_star_ids_come_from_the_row_number(tmp_path):
    path = tmp_path / "c.csv"
    path.write_text("teff\n5000\n4000\n")
    table, messages = read_catalog(path)
    assert table["star_id"].tolist() == ["row1", "row2"]
    assert any("1-based row number" in m for m in messages)
    path.write_text("id,teff\nA,5000\n,4000\n 007 ,4500\n")
    table, messages = read_catalog(path)
    assert table["star_id"].tolist() == ["A", "row2", "007"]         # text kept exact (leading zeros)
    assert any("1 rows without star_id" in m for m in messages)


def test_two_columns_for_one_canonical_name_is_an_error_naming_both(tmp_path):
    path = tmp_path / "c.csv"
    path.write_text("Teff,T_eff\n5000,5100\n")
    with pytest.raises(CatalogError, match=r"c\.csv.*'Teff' and 'T_eff' both stand for teff_k"):
        read_catalog(path)
    path.write_text("Teff,teff_gspphot\n5000,5100\n")          # Gaia's value gives way to the spectroscopic one
    table, messages = read_catalog(path)
    assert table["teff_k"].iloc[0] == 5000 and table["teff_gspphot"].iloc[0] == 5100
    assert "column 'teff_gspphot' not used: 'Teff' is read as teff_k" in messages
    table, messages = read_catalog(path, {"teff_gspphot": "teff_k"})
    assert table["teff_k"].iloc[0] == 5100 and table["Teff"].iloc[0] == 5000
    assert any("not read as teff_k" in m for m in messages)


def test_column_map_comes_first_and_is_checked(tmp_path):
    path = tmp_path / "c.csv"
    path.write_text("T_spec,Mstar_fit\n5000,1.2\n")
    table, messages = read_catalog(path, {"t_SPEC": "teff_k", "Mstar_fit": "mass_msun"})
    assert list(table.columns) == ["star_id", "teff_k", "mass_msun"]
    assert "column 'T_spec' read as teff_k (K) (column map)" in messages
    with pytest.raises(CatalogError, match="'Lum' named in the column map is not in the file"):
        read_catalog(path, {"Lum": "logl_lsun"})
    with pytest.raises(ConfigError, match="did you mean 'teff_k'"):
        read_catalog(path, {"T_spec": "teff"})


def test_parse_column_option():
    assert parse_column_option(["Teff=teff_k", " plx = parallax_mas ,e_plx=parallax_mas_err"]) == {
        "Teff": "teff_k", "plx": "parallax_mas", "e_plx": "parallax_mas_err"}
    assert parse_column_option(["a=b=teff_k"]) == {"a=b": "teff_k"}
    assert parse_column_option(None) == {}


@pytest.mark.parametrize("items, message", [
    (["Teff"], "has no '='"),
    (["=teff_k"], "empty name"),
    (["Teff="], "empty name"),
    (["Teff=tef_k"], "did you mean 'teff_k'"),
    (["Teff=teff_k", "Teff=logg"], "maps 'Teff' twice"),
    (["Teff=teff_k", "T2=teff_k"], "'Teff' and 'T2' are both mapped to 'teff_k'"),
])
def test_parse_column_option_errors(items, message):
    with pytest.raises(ConfigError, match=message):
        parse_column_option(items)


def test_ragged_csv_error_gives_file_and_1_based_row(tmp_path):
    path = tmp_path / "ragged.csv"
    path.write_text("# survey export\n# second comment\nid,teff\nA,5000\nB,4000\nC,4500,99\n")
    with pytest.raises(CatalogError) as info:
        read_catalog(path)
    assert info.value.row == 3 and info.value.path == str(path)
    assert str(info.value).startswith(f"file {path}, row 3:")


def test_non_utf8_csv_error_gives_the_row(tmp_path):
    path = tmp_path / "latin1.csv"
    path.write_bytes("id,teff\nA,5000\n\u00e9toile,4000\n".encode("latin-1"))
    with pytest.raises(CatalogError, match="row 2: is not UTF-8") as info:
        read_catalog(path)
    assert isinstance(info.value.__cause__, UnicodeDecodeError)


@pytest.mark.parametrize("name, content, message", [
    ("missing.csv", None, "does not exist"),
    ("table.xlsx", "x", "unknown file type"),
    ("empty.csv", "", "is empty"),
    ("broken.parquet", "not parquet", "cannot be read as Parquet"),
    ("broken.fits", "SIMPLE = nonsense", "cannot be read as FITS"),
    ("broken.vot", "<VOTABLE><oops", "cannot be read as VOTable"),
])
def test_unreadable_files_name_the_file_and_the_accepted_formats(tmp_path, name, content, message):
    path = tmp_path / name
    if content is not None:
        path.write_text(content)
    with pytest.raises(CatalogError, match=message) as info:
        read_catalog(path)
    assert info.value.path == str(path) and str(info.value).startswith(f"file {path}:")
    assert "Parquet (.parquet" in str(info.value) and "VOTable (.vot" in str(info.value)
    if name.startswith("broken"):
        assert info.value.__cause__ is not None


def test_catalog_without_rows_is_an_error(tmp_path):
    path = tmp_path / "header_only.csv"
    path.write_text("id,teff\n")
    with pytest.raises(CatalogError, match="header_only.csv: has no data rows"):
        read_catalog(path)


def test_fits_first_table_extension_masks_units_and_vectors(tmp_path):
    import astropy.units as u
    from astropy.io import fits
    from astropy.table import MaskedColumn, Table

    table = Table()
    table["ID"] = np.array([b"star A", b"star B", b"star C"])
    table["Plx"] = MaskedColumn([0.0012, 0.0020, 0.0], mask=[False, False, True], unit=u.arcsec)
    table["Teff"] = MaskedColumn([5000, 4800, 4600], mask=[False, True, False], unit=u.K)
    table["flux"] = np.ones((3, 2))
    hdul = fits.HDUList([fits.PrimaryHDU(np.zeros((2, 2))), fits.table_to_hdu(table)])
    path = tmp_path / "cat.fits"
    hdul.writeto(path)

    read, messages = read_catalog(path)
    assert read["star_id"].tolist() == ["star A", "star B", "star C"]          # bytes -> str
    expected_mas = (np.array([0.0012, 0.0020]) * u.arcsec).to_value(u.mas)     # astropy.units
    np.testing.assert_allclose(read["parallax_mas"].to_numpy()[:2], expected_mas, rtol=UNIT_CONVERSION_RTOL)
    assert np.isnan(read["parallax_mas"].iloc[2]) and np.isnan(read["teff_k"].iloc[1])   # masked -> NaN
    assert "flux" not in read.columns
    assert any("converted from arcsec to mas" in m for m in messages)
    assert any("'flux' holds (2,) values per row and was skipped" in m for m in messages)


def test_incompatible_unit_is_an_error_naming_the_column(tmp_path):
    import astropy.units as u
    from astropy.table import Table

    Table({"id": ["a"], "parallax": [5.0] * u.K}).write(tmp_path / "c.ecsv", format="ascii.ecsv")
    with pytest.raises(CatalogError, match=r"column 'parallax_mas'.*unit K"):
        read_catalog(tmp_path / "c.ecsv")


def test_votable_masked_values_become_nan(tmp_path):
    from astropy.table import MaskedColumn, Table

    table = Table({"designation": ["x", "y"], "vsini": MaskedColumn([3.5, 0.0], mask=[False, True]),
                   "l_ALi": MaskedColumn(["<", ""], mask=[False, True])})
    table.write(tmp_path / "c.xml", format="votable")
    read, _ = read_catalog(tmp_path / "c.xml")
    assert read["vsini_kms"].tolist()[0] == 3.5 and np.isnan(read["vsini_kms"].iloc[1])
    assert read["a_li_is_limit"].iloc[0] == "<" and pd.isna(read["a_li_is_limit"].iloc[1])


def test_ecsv_saved_as_csv_is_read_as_ecsv(tmp_path):
    from astropy.table import Table

    Table({"name": ["a", "b"], "teff": [5000.0, 4000.0]}).write(tmp_path / "x.ecsv", format="ascii.ecsv")
    (tmp_path / "x.csv").write_bytes((tmp_path / "x.ecsv").read_bytes())
    read, _ = read_catalog(tmp_path / "x.csv")
    assert read["teff_k"].tolist() == [5000.0, 4000.0] and read["star_id"].tolist() == ["a", "b"]


def test_parquet_integer_ids_with_gaps_stay_exact(tmp_path):
    import pyarrow as pa
    import pyarrow.parquet as pq

    ids = pa.array([int(GAIA_DR3_SOURCE_ID), None], type=pa.int64())
    pq.write_table(pa.table({"source_id": ids, "bp_rp": [1.0, 1.1]}), tmp_path / "c.parquet")
    read, _ = read_catalog(tmp_path / "c.parquet")
    assert read["star_id"].tolist() == [GAIA_DR3_SOURCE_ID, "row2"]


def test_every_output_unit_is_carried_by_ecsv_votable_and_fits(tmp_path):
    """Read back with astropy's QTable, every output column with a unit is a Quantity
    in ECSV and VOTable; in FITS too, except the units the FITS standard cannot write
    (dex and Jupiter masses), which the column description names instead."""
    import astropy.units as u
    from astropy.table import QTable

    from prioritize.catalog.columns import OUTPUT_COLUMNS

    united = {n: c for n, c in OUTPUT_COLUMNS.items() if c.dtype == "float64" and c.unit not in ("", "sigma")}
    frame = pd.DataFrame({n: [1.0, np.nan] for n in united})
    frame.insert(0, "star_id", ["a", "b"])
    for ext, fmt in (("ecsv", "ascii.ecsv"), ("vot", "votable"), ("fits", "fits")):
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            table = QTable.read(write_table(frame, tmp_path / f"t.{ext}"), format=fmt)
        missing = [n for n in united if not isinstance(table[n], u.Quantity)]
        if ext == "fits":
            assert all(united[n].unit.startswith("dex") or united[n].unit == "Mjup" for n in missing), missing
            assert all(f"[{united[n].unit}]" in table[n].description for n in missing)
        else:
            assert missing == [], (ext, missing)
    assert table["priority"].unit == u.Unit("1 / h") and table["exposure_s"].unit == u.s
