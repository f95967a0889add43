"""Reading catalogs into the canonical table, and writing result tables atomically.

This is the package's file edge: nothing downstream reads or writes files.

Readers accept CSV (``.csv``, ``.csv.gz``, ``.tsv``), Parquet (``.parquet``, ``.pq``),
FITS (``.fits``, ``.fit``, ``.fits.gz``; the first table extension), ECSV (``.ecsv``)
and VOTable (``.vot``, ``.votable``, ``.xml``).  Whatever the format, the result is a
:class:`pandas.DataFrame` in which missing or masked values are NaN, text is ``str``
(bytes decoded as UTF-8, blank text is missing), and integers with gaps become floats
(except identifiers, which stay exact text).

Writers choose the format from the extension, write to a temporary file in the same
folder and rename it into place, so a reader never sees a half-written table.
Provenance (tool version, configuration, creation time, caution) goes into the file's
own metadata, or a ``<file>.meta.json`` sidecar for CSV.

References
----------
Pence W. D. et al. 2010, A&A 524, A42 (FITS standard 3.0: binary tables, CONTINUE cards).
Ochsenbein F. et al. 2019, VOTable Format Definition 1.4, IVOA Recommendation.
Aldcroft T. et al. 2015, Astropy Proposal for Enhancement 6: Enhanced Character
Separated Values (ECSV).
Apache Parquet format specification (file and schema key-value metadata).
"""

from __future__ import annotations

import contextlib
import glob
import gzip
import json
import os
import re
import tempfile
import time
import warnings
from datetime import datetime, timezone
from pathlib import Path

import numpy as np
import pandas as pd

from prioritize import CAUTION, __version__
from prioritize.catalog.columns import (CONDITIONAL_SPELLINGS, IGNORED_SPELLINGS, INPUT_COLUMNS,
                                        OUTPUT_COLUMNS, SECONDARY_SPELLINGS, TEXT, check_column_map,
                                        recognise, row_number_ids)
from prioritize.catalog.formats import (_FORMAT_NAMES, ACCEPTED_FORMATS, catalog_stem,  # noqa: F401
                                        check_output_path, companion_path, table_format)
from prioritize.errors import CatalogError, ConfigError, PrioritizeWarning

METADATA_KEY = "prioritize_metadata"   # Parquet schema key / VOTable INFO name
FITS_METADATA_KEYWORD = "PRMETA"       # FITS header keyword (long string, CONTINUE cards)
SIDECAR_SUFFIX = ".meta.json"
TABLE_CHECKSUM_KEY = "table_sha256"   # in a sidecar: the SHA-256 of the table it describes

_TEXT_COLUMNS = frozenset([n for n, s in INPUT_COLUMNS.items() if s.dtype == TEXT]
                          + [n for n, s in OUTPUT_COLUMNS.items() if s.dtype == TEXT])
_RESERVED = frozenset(OUTPUT_COLUMNS) - frozenset(INPUT_COLUMNS)
# Whole-number output columns with gaps (rank; a night plan's order): nullable integers.
_INTEGER_COLUMNS = frozenset([n for n, s in OUTPUT_COLUMNS.items() if s.dtype == "int64"] + ["order"])

# Units a typed file (FITS, ECSV, VOTable) may declare and that are converted on reading.
_CONVERTIBLE_UNITS = {"deg": "deg", "mas": "mas", "pc": "pc", "K": "K", "d": "d",
                      "km/s": "km / s", "Gyr": "Gyr", "Msun": "solMass"}
# Unit strings written into typed outputs (astropy spelling).
_WRITE_UNITS = {**_CONVERTIBLE_UNITS, "Rsun": "solRad", "Myr": "Myr", "mag": "mag", "s": "s",
                "dex": "dex", "dex(Lsun)": "dex(solLum)", "dex(cm s-2)": "dex(cm / s2)",
                "g/cm3": "g / cm3", "mA": "mAngstrom", "A": "Angstrom", "Mjup": "jupiterMass",
                "1/h": "1 / h", "uHz": "uHz"}


# ----------------------------------------------------------------------------- formats

# ----------------------------------------------------------------------------- reading

def read_catalog(path: str | os.PathLike,
                 column_map: dict[str, str] | None = None) -> tuple[pd.DataFrame, list[str]]:
    """Read a candidate catalog and give its columns the canonical names.

    Columns named in ``column_map`` (``{your_name: canonical_name}``) are renamed first;
    the others are matched against the recognised spellings of
    :data:`prioritize.catalog.columns.INPUT_COLUMNS`, ignoring case.  Columns that are
    not recognised are kept unchanged (they pass through to the output); one whose name
    is an output column (``rank``, ``status``, ...) is kept as ``input_<name>``.
    When the file declares units (FITS, ECSV, VOTable) in a form convertible to the
    canonical unit (e.g. parallax in arcsec), values are converted.  Without a
    ``star_id`` column, stars are named ``row1``, ``row2``, ... by their 1-based row.
    Values are not checked here: see :func:`prioritize.catalog.validate.validate_catalog`.

    Parameters
    ----------
    path : str or path-like
        The catalog file; the format follows the extension (see :data:`ACCEPTED_FORMATS`).
    column_map : dict, optional
        ``{your_column: canonical_name}``, e.g. from ``[columns]`` in the config or
        :func:`parse_column_option`.

    Returns
    -------
    table : pandas.DataFrame
        All rows, in file order, with canonical names.
    messages : list of str
        What was renamed, converted or made up, in words.

    Raises
    ------
    CatalogError
        The file is missing or unreadable, has no data rows, two of its columns stand
        for one canonical column, or a mapped column is absent.
    ConfigError
        ``column_map`` maps to a name that is not a canonical column.
    """
    path = _existing_file(path)
    fmt = _sniff_format(path, table_format(path))
    user_map = check_column_map(column_map or {})
    if fmt in ("csv", "tsv"):
        header = _csv_header(path, fmt)
        renames, messages = map_columns(header, user_map, path)
        text_columns = [c for c in header if renames.get(c, c) in _TEXT_COLUMNS]
        raw, units = _read_csv(path, fmt, text_columns), {}
    else:
        raw, units, messages = _read_typed(path, fmt)
        renames, map_messages = map_columns(list(raw.columns), user_map, path)
        messages = map_messages + messages
    if raw.empty:
        raise CatalogError("has no data rows", path=str(path))
    table = _normalise(raw.rename(columns=renames), id_column="star_id")
    messages += _convert_units(table, {renames.get(c, c): u for c, u in units.items()}, path)
    messages += _survey_conventions(table, {v: k for k, v in renames.items()})
    messages += _ensure_star_id(table)
    return table, messages


def read_table(path: str | os.PathLike) -> tuple[pd.DataFrame, dict]:
    """Read back a table this package wrote (e.g. a ranked list), names unchanged.

    Returns
    -------
    table : pandas.DataFrame
        Missing values as NaN; text columns as ``str``.
    metadata : dict
        The provenance stored with the table by :func:`write_table` (empty if none).

    Raises
    ------
    CatalogError
        The file is missing or unreadable.
    """
    path = _existing_file(path)
    fmt = _sniff_format(path, table_format(path))
    if fmt in ("csv", "tsv"):
        header = _csv_header(path, fmt)
        raw = _read_csv(path, fmt, [c for c in header if c in _TEXT_COLUMNS])
        metadata = _read_sidecar(path)
    else:
        raw, _units, _messages = _read_typed(path, fmt)
        metadata = raw.attrs.pop("metadata", {})
    return _normalise(raw, id_column="star_id" if "star_id" in raw else None), metadata


def map_columns(names: list[str], column_map: dict[str, str],
                path: str | os.PathLike | None = None) -> tuple[dict[str, str], list[str]]:
    """Decide the renaming ``{file_column: new_name}`` of a catalog's columns.

    Parameters
    ----------
    names : list of str
        The file's column names.
    column_map : dict
        ``{your_column: canonical_name}``, already checked by
        :func:`prioritize.catalog.columns.check_column_map`.  A key may differ from the
        file's spelling in case only.
    path : path-like, optional
        Named in error messages.

    Returns
    -------
    renames : dict
        Only the columns whose name changes.
    messages : list of str
        One line per renamed column, plus the columns kept unchanged.

    Raises
    ------
    CatalogError
        A mapped column is not in the file, or two columns stand for one canonical name.
    """
    where = None if path is None else str(path)
    names = [str(n) for n in names]
    lower = {}
    for n in names:
        lower.setdefault(n.lower(), []).append(n)
    renames: dict[str, str] = {}
    owner: dict[str, tuple[str, bool]] = {}   # canonical -> (file column, mapped by the user)
    messages: list[str] = []
    for source, target in column_map.items():
        candidates = [source] if source in names else lower.get(source.lower(), [])
        if len(candidates) != 1:
            raise CatalogError(f"column {source!r} named in the column map is not in the file; "
                               f"its columns are: {', '.join(names)}", path=where, column=source)
        found = candidates[0]
        owner[target] = (found, True)
        if found != target:
            renames[found] = target
        messages.append(f"column {found!r} read as {target}{_unit_words(target)} (column map)")
    mapped_by_user = {found for found, _ in owner.values()}
    passed_through = []
    candidates: dict[str, list[str]] = {}
    for name in names:
        if name in mapped_by_user:
            continue
        target = recognise(name)
        if target is None:
            if name.lower() in _RESERVED:
                renames[name] = f"input_{name}"
                messages.append(f"column {name!r} kept as input_{name} "
                                "(its name is taken by an output column)")
            else:
                passed_through.append(name)
                why = IGNORED_SPELLINGS.get(name.strip().lower())
                if why is not None:
                    messages.append(f"column {name!r} not used: {why}")
            continue
        candidates.setdefault(target, []).append(name)
    present = set(owner) | set(candidates)
    for target, group in candidates.items():
        primary = [n for n in group if n.strip().lower() not in SECONDARY_SPELLINGS]
        if target in owner:
            other, _by_user = owner[target]
            for name in group:
                if name == target:
                    raise CatalogError(f"the file already has a column {name!r}, the name the column "
                                       f"map gives {other!r}; rename or drop one of them",
                                       path=where, column=name)
                passed_through.append(name)
                messages.append(f"column {name!r} not read as {target}: the column map reads "
                                f"{other!r} as {target}")
            continue
        if len(primary) > 1:
            raise CatalogError(
                f"columns {primary[0]!r} and {primary[1]!r} both stand for {target}; choose one with the "
                f"column map (e.g. --columns '{primary[0]}={target}'), or rename or drop the other",
                path=where, column=primary[1])
        if primary:
            chosen = primary[0]
        else:       # only secondary spellings: the first in the contract's order of spellings
            chosen = min(group, key=lambda n: _spelling_rank(target, n))
        conditional = CONDITIONAL_SPELLINGS.get(chosen.strip().lower())
        if conditional is not None and conditional[1] in present:
            passed_through.append(chosen)
            messages.append(f"column {chosen!r} not used: {conditional[2]}")
            continue
        for name in group:
            if name != chosen:
                passed_through.append(name)
                messages.append(f"column {name!r} not used: {chosen!r} is read as {target}")
        owner[target] = (chosen, False)
        if chosen != target:
            renames[chosen] = target
            messages.append(f"column {chosen!r} read as {target}{_unit_words(target)}")
    if passed_through:
        messages.append("kept unchanged (not a known column): " + ", ".join(passed_through))
    return renames, messages


def parse_column_option(items: list[str] | tuple[str, ...] | None) -> dict[str, str]:
    """Parse ``--columns`` values into ``{your_column: canonical_name}``.

    Each item is ``yourname=canonical`` or several of them separated by commas, e.g.
    ``["Teff=teff_k", "plx=parallax_mas,e_plx=parallax_mas_err"]``.  Blanks around names
    are ignored; the last ``=`` separates the two names.

    Raises
    ------
    ConfigError
        An item has no ``=``, a name is empty, the target is not a canonical column,
        one column is mapped twice to different names, or two columns to one name.
    """
    mapping: dict[str, str] = {}
    for item in items or ():
        for part in str(item).split(","):
            if not part.strip():
                continue
            source, sep, target = part.rpartition("=")
            if not sep:
                raise ConfigError(f"--columns {part.strip()!r} has no '='; write yourname=canonical_name, "
                                  "e.g. --columns Teff=teff_k")
            source, target = source.strip(), target.strip()
            if source in mapping and mapping[source] != target:
                raise ConfigError(f"--columns maps {source!r} twice ({mapping[source]!r} and {target!r}); "
                                  "give it once")
            mapping[source] = target
    return check_column_map(mapping)


def _spelling_rank(target: str, name: str) -> int:
    spec = INPUT_COLUMNS[target]
    spellings = [a.lower() for a in (spec.name, *spec.aliases)]
    key = name.strip().lower()
    return spellings.index(key) if key in spellings else len(spellings)


def _unit_words(name: str) -> str:
    unit = INPUT_COLUMNS[name].unit
    return f" ({unit})" if unit else ""


def _existing_file(path: str | os.PathLike) -> Path:
    path = Path(path)
    if not path.exists():
        raise CatalogError(f"does not exist; give a catalog file ({ACCEPTED_FORMATS})", path=str(path))
    if not path.is_file():
        raise CatalogError(f"is not a file; give a catalog file ({ACCEPTED_FORMATS})", path=str(path))
    return path


def _sniff_format(path: Path, fmt: str) -> str:
    """An ECSV file saved with a .csv extension is read as ECSV."""
    if fmt == "csv" and not path.name.lower().endswith(".gz"):
        with open(path, "rb") as fh:
            if fh.read(7) == b"# %ECSV":
                return "ecsv"
    return fmt


def _unreadable(path: Path, fmt: str, exc: Exception, row: int | None = None) -> CatalogError:
    return CatalogError(f"cannot be read as {_FORMAT_NAMES[fmt]} ({str(exc).strip()}); accepted "
                        f"formats: {ACCEPTED_FORMATS}", path=str(path), row=row)


def _not_utf8(path: Path) -> CatalogError:
    return CatalogError("is not UTF-8 text; save it as UTF-8 (or as Parquet or FITS)",
                        path=str(path), row=_first_undecodable_row(path, _comment_lines(path)))


def _comment_lines(path: Path) -> int:
    """Number of leading lines that start with '#' (header comments)."""
    count = 0
    with _open_text(path) as fh:
        for line in fh:
            if not line.startswith("#"):
                break
            count += 1
    return count


def _open_text(path: Path):
    if path.name.lower().endswith(".gz"):
        return gzip.open(path, "rt", encoding="utf-8-sig", errors="replace")
    return open(path, encoding="utf-8-sig", errors="replace")


def _separator(path: Path, fmt: str) -> str:
    """The field separator of a text catalog: tab for .tsv; for .csv a comma, unless
    the header line has no comma but semicolons or tabs (spreadsheets in many locales
    write ';'), so such a file is not read as one column."""
    if fmt == "tsv":
        return "\t"
    try:
        with _open_text(path) as handle:
            skipped = _comment_lines(path)
            header = ""
            for number, line in enumerate(handle):
                if number >= skipped:
                    header = line
                    break
    except (OSError, EOFError):
        return ","
    if "," in header:
        return ","
    for sep in (";", "\t", "|"):
        if sep in header:
            return sep
    return ","


def _csv_header(path: Path, fmt: str) -> list[str]:
    try:
        return [str(c) for c in pd.read_csv(path, sep=_separator(path, fmt), nrows=0,
                                            skiprows=_comment_lines(path), encoding="utf-8-sig").columns]
    except pd.errors.EmptyDataError as exc:
        raise CatalogError(f"is empty (no header line); accepted formats: {ACCEPTED_FORMATS}",
                           path=str(path)) from exc
    except UnicodeDecodeError as exc:
        raise _not_utf8(path) from exc
    except (OSError, ValueError) as exc:
        raise _unreadable(path, fmt, exc) from exc


def _read_csv(path: Path, fmt: str, text_columns: list[str]) -> pd.DataFrame:
    skipped = _comment_lines(path)
    separator = _separator(path, fmt)
    try:
        with warnings.catch_warnings():
            # a first data row longer than the header would silently become an index
            warnings.simplefilter("error", pd.errors.ParserWarning)
            return pd.read_csv(path, sep=separator, skiprows=skipped, index_col=False,
                               dtype={c: str for c in text_columns}, encoding="utf-8-sig",
                               low_memory=False, float_precision="round_trip")
    except pd.errors.ParserWarning as exc:
        row, saw, expected = _first_long_row(path, separator, skipped)
        raise CatalogError(f"has {saw} values but the header has {expected} columns; check the "
                           "separators and quotes on that line", path=str(path), row=row) from exc
    except pd.errors.ParserError as exc:
        ragged = re.search(r"Expected (\d+) fields in line (\d+), saw (\d+)", str(exc))
        if ragged is None:
            raise _unreadable(path, fmt, exc) from exc
        expected, line, saw = (int(g) for g in ragged.groups())
        raise CatalogError(f"has {saw} values but the header has {expected} columns; check the "
                           "separators and quotes on that line", path=str(path),
                           row=line - skipped - 1) from exc
    except UnicodeDecodeError as exc:
        raise _not_utf8(path) from exc
    except (OSError, ValueError) as exc:
        raise _unreadable(path, fmt, exc) from exc


def _first_long_row(path: Path, separator: str, skipped: int) -> tuple[int | None, int, int]:
    """(1-based data row, its number of values, the header's) of the first row with
    more values than the header."""
    import csv
    with _open_text(path) as handle:
        for _ in range(skipped):
            handle.readline()
        rows = csv.reader(handle, delimiter=separator)
        header = len(next(rows, []))
        for number, values in enumerate(rows, start=1):
            if len(values) > header:
                return number, len(values), header
    return None, header + 1, header


def _first_undecodable_row(path: Path, skipped: int) -> int | None:
    """1-based data row of the first line that is not UTF-8 (None if in the header)."""
    opener = gzip.open if path.name.lower().endswith(".gz") else open
    with opener(path, "rb") as fh:
        for index, line in enumerate(fh):
            try:
                line.decode("utf-8")
            except UnicodeDecodeError:
                return index - skipped if index > skipped else None
    return None


def _read_typed(path: Path, fmt: str) -> tuple[pd.DataFrame, dict, list[str]]:
    """Parquet, FITS, ECSV or VOTable -> (frame, {column: astropy unit}, messages).
    The stored provenance, if any, is left in ``frame.attrs['metadata']``."""
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            if fmt == "parquet":
                return _read_parquet(path)
            table, metadata = _read_astropy(path, fmt)
    except CatalogError:
        raise
    except Exception as exc:  # any parser failure of a third-party reader is a bad file
        raise _unreadable(path, fmt, exc) from exc
    frame, units, messages = _table_to_frame(table)
    frame.attrs["metadata"] = metadata
    return frame, units, messages


def _read_parquet(path: Path) -> tuple[pd.DataFrame, dict, list[str]]:
    import pyarrow as pa
    import pyarrow.parquet as pq

    arrow = pq.read_table(path)
    frame = arrow.to_pandas(
        types_mapper=lambda t: pd.Int64Dtype() if pa.types.is_integer(t) else None)
    stored = (arrow.schema.metadata or {}).get(METADATA_KEY.encode())
    frame.attrs["metadata"] = json.loads(stored) if stored else {}
    return frame, {}, []


def _fits_truncated(path: Path, hdul) -> bool:
    """True when the file is shorter than its headers say (a FITS file is a whole
    number of 2880-byte blocks, each HDU's data as long as its header declares)."""
    size = path.stat().st_size
    if path.name.lower().endswith(".gz"):
        return False
    try:
        end = max(h.fileinfo()["datLoc"] + h.fileinfo()["datSpan"] for h in hdul)
    except (KeyError, TypeError, OSError, ValueError):
        return True
    return size < end or size % 2880 != 0


def _read_astropy(path: Path, fmt: str):
    from astropy.table import Table

    if fmt == "fits":
        from astropy.io import fits

        with warnings.catch_warnings(record=True) as seen:
            warnings.simplefilter("always")
            with fits.open(path) as hdul:
                hdul.verify("silentfix")
                index = next((i for i, hdu in enumerate(hdul)
                              if isinstance(hdu, (fits.BinTableHDU, fits.TableHDU))), None)
                short = _fits_truncated(path, hdul)
        truncated = short or any("truncated" in str(w.message).lower() for w in seen)
        if truncated:
            raise CatalogError("is truncated (the file ends before its last header or data block); "
                               "copy or download it again", path=str(path))
        if index is None:
            raise CatalogError("has no table extension (FITS images are not catalogs)", path=str(path))
        table = Table.read(path, format="fits", hdu=index)
        stored = table.meta.get(FITS_METADATA_KEYWORD)
        return table, json.loads(stored) if stored else {}
    if fmt == "ecsv":
        table = Table.read(path, format="ascii.ecsv")
        return table, dict(table.meta)
    from astropy.io import votable

    document = votable.parse(str(path), verify="ignore")
    infos = [info for resource in document.resources for info in resource.infos]
    stored = next((info.value for info in infos if info.name == METADATA_KEY), None)
    return document.get_first_table().to_table(), json.loads(stored) if stored else {}


def _table_to_frame(table) -> tuple[pd.DataFrame, dict, list[str]]:
    """astropy Table -> DataFrame: masked -> NaN (integers -> nullable Int64), native byte order."""
    data, units, messages = {}, {}, []
    for name in table.colnames:
        column = table[name]
        if column.ndim > 1:
            messages.append(f"column {name!r} holds {column.shape[1:]} values per row and was skipped")
            continue
        values = np.asarray(column)
        mask = np.ma.getmaskarray(column) if getattr(column, "mask", None) is not None else None
        values = values.astype(values.dtype.newbyteorder("="), copy=False)
        if values.dtype.kind in "iu":
            series = pd.array(values, dtype="Int64")
            if mask is not None:
                series[mask] = pd.NA
        elif values.dtype.kind == "f":
            series = np.where(mask, np.nan, values) if mask is not None else values
        elif values.dtype.kind == "b" and mask is not None and mask.any():
            series = np.where(mask, np.nan, values.astype(object))
        elif values.dtype.kind in "SUO":
            series = values.astype(object)
            if mask is not None:
                series[mask] = np.nan
        else:
            series = values
        data[name] = series
        if column.unit is not None:
            units[name] = column.unit
    return pd.DataFrame(data), units, messages


def _normalise(frame: pd.DataFrame, id_column: str | None) -> pd.DataFrame:
    """One representation whatever the reader: text as str with NaN for missing or blank,
    nullable integers as int64 (float64 if gaps), nullable booleans as objects with NaN."""
    out = {}
    for name in frame.columns:
        series = frame[name]
        dtype = series.dtype
        if isinstance(dtype, pd.CategoricalDtype):
            series = series.astype(object).where(series.notna(), np.nan)
            dtype = series.dtype
        if name == id_column or name in _TEXT_COLUMNS:
            out[name] = _as_text(series)
        elif name in _INTEGER_COLUMNS and pd.api.types.is_numeric_dtype(dtype) and not \
                pd.api.types.is_bool_dtype(dtype) and _whole(series):
            out[name] = series.astype("Int64")
        elif isinstance(dtype, pd.BooleanDtype):
            out[name] = (series.astype(bool) if not series.isna().any()
                         else series.astype(object).where(series.notna(), np.nan))
        elif pd.api.types.is_extension_array_dtype(dtype) and pd.api.types.is_numeric_dtype(dtype):
            out[name] = (series.astype(np.int64) if pd.api.types.is_integer_dtype(dtype)
                         and not series.isna().any() else series.astype(np.float64))
        elif dtype == object or pd.api.types.is_string_dtype(dtype):
            out[name] = _text_or_flags(series)
        else:
            out[name] = series
    return pd.DataFrame(out, index=frame.index)


def _whole(series: pd.Series) -> bool:
    values = series.to_numpy(dtype=np.float64, na_value=np.nan)
    present = values[np.isfinite(values)]
    return bool(np.all(present == np.round(present)))


def _as_text(series: pd.Series) -> pd.Series:
    """Exact text: integers without '.0', bytes decoded, blanks stripped, blank -> NaN."""
    if pd.api.types.is_integer_dtype(series.dtype):
        text = series.astype("Int64").astype(str).where(series.notna(), np.nan)
    elif pd.api.types.is_float_dtype(series.dtype):
        whole = series.notna() & (series == series.round()) & (series.abs() < 2.0**63)
        text = series.astype(object).where(series.notna(), np.nan)
        text[whole] = series[whole].astype(np.int64).astype(str)
        text[series.notna() & ~whole] = series[series.notna() & ~whole].astype(str)
    else:
        text = series.map(_decode, na_action="ignore")
    text = text.astype(object).where(text.notna(), np.nan)
    stripped = text.str.strip()
    return stripped.where(stripped != "", np.nan).astype("str")


def _decode(value):
    return value.decode("utf-8", errors="replace") if isinstance(value, bytes) else str(value)


def _text_or_flags(series: pd.Series) -> pd.Series:
    """Bytes decoded and blank text -> NaN; a column holding only True/False (as text or
    booleans) with gaps becomes objects True/False/NaN."""
    values = series if isinstance(series.dtype, pd.StringDtype) else series.map(
        lambda v: v.decode("utf-8", errors="replace") if isinstance(v, bytes) else v, na_action="ignore")
    present = values.notna()
    if present.any():
        kinds = values[present].map(type).unique()
        if all(k is str for k in kinds):
            blank = present & (values.astype(object).where(present, "x").str.strip() == "")
            values = values.where(~blank, np.nan)
            present = values.notna()
            if present.any() and values[present].isin(["True", "False"]).all():
                return values.map({"True": True, "False": False}).astype(object).where(present, np.nan)
        elif all(k in (bool, np.bool_) for k in kinds):
            return values.astype(object).where(present, np.nan)
    return values


def _convert_units(table: pd.DataFrame, units: dict, path: Path) -> list[str]:
    """Convert columns whose file unit differs from the canonical one (in place)."""
    import astropy.units as u

    messages = []
    for name, unit in units.items():
        spec = INPUT_COLUMNS.get(name)
        if spec is None or spec.unit not in _CONVERTIBLE_UNITS or isinstance(unit, u.UnrecognizedUnit):
            continue
        canonical = u.Unit(_CONVERTIBLE_UNITS[spec.unit])
        if unit == canonical:
            continue
        try:
            factor = unit.to(canonical)
        except u.UnitConversionError as exc:
            raise CatalogError(f"the file gives unit {unit} but {name} needs {spec.unit}; check "
                               "the column map", path=str(path), column=name) from exc
        table[name] = pd.to_numeric(table[name], errors="coerce") * factor
        messages.append(f"column {name} converted from {unit} to {spec.unit}")
    return messages


# Spellings of an evolutionary-state column that may hold the numeric codes of the
# asteroseismic classifications: 1 = red giant branch, 2 = core-helium burning (clump),
# 0 or -1 = unclassified (Elsworth et al. 2019, MNRAS 489, 4641; Yu et al. 2018, ApJS
# 236, 42 -- code convention from memory).
NUMERIC_STAGE_SPELLINGS = frozenset({"evstate", "evolstate", "evol_state", "evo_state", "es", "phase"})
_NUMERIC_STAGE_CODES = {1: "rgb", 2: "rc", 0: None, -1: None}
# Gaia DR3 astrophysical parameters come with 16th and 84th percentiles, not an error.
_PERCENTILE_ERRORS = {"teff_gspphot": "teff_k_err", "logg_gspphot": "logg_err", "mh_gspphot": "feh_err",
                      "distance_gspphot": None}


def _survey_conventions(table: pd.DataFrame, source: dict[str, str]) -> list[str]:
    """Survey habits turned into the canonical form (in place); ``source`` maps a
    canonical name to the file's spelling it was read from.

    - a numeric evolutionary-state code (``evstate`` 1/2/0) -> rgb / rc / missing;
    - a survey flag column read as ``a_li_is_limit`` (``flag_a_li``: 0 detection,
      1 upper limit, other codes unusable -> that A(Li) is not used);
    - ``<1.2`` inside the A(Li) column -> 1.2 and an upper limit;
    - Gaia DR3 ``*_gspphot_lower``/``_upper`` percentiles -> a 1-sigma error of half their span.
    """
    messages = []
    stage_from = source.get("stage", "stage").strip().lower()
    if "stage" in table.columns and stage_from in NUMERIC_STAGE_SPELLINGS:
        numbers = pd.to_numeric(table["stage"], errors="coerce")
        coded = numbers.notna() & numbers.isin(list(_NUMERIC_STAGE_CODES))
        if coded.any():
            values = table["stage"].astype(object).copy()
            values[coded] = numbers[coded].astype(int).map(_NUMERIC_STAGE_CODES)
            table["stage"] = values.where(values.notna(), np.nan)
            messages.append(f"column {source.get('stage', 'stage')!r}: numeric evolutionary-state codes "
                            "read as 1 = red giant branch, 2 = red clump (core helium burning), "
                            f"0/-1 = unclassified ({int(coded.sum())} rows)")
    flag_from = source.get("a_li_is_limit", "").strip().lower()
    if "a_li_is_limit" in table.columns and flag_from.startswith("flag"):
        codes = pd.to_numeric(table["a_li_is_limit"], errors="coerce")
        unusable = codes.notna() & ~codes.isin([0, 1])
        table["a_li_is_limit"] = (codes == 1).astype(object).where(codes.notna(), np.nan)
        if unusable.any():
            if "a_li" in table.columns:
                table.loc[unusable, "a_li"] = np.nan
            messages.append(f"column {source['a_li_is_limit']!r}: 0 read as a detection, 1 as an upper "
                            f"limit; {int(unusable.sum())} rows with another flag value have their "
                            "A(Li) not used")
    if "a_li" in table.columns and not pd.api.types.is_numeric_dtype(table["a_li"].dtype):
        text = table["a_li"].astype(str).str.strip()
        limit = text.str.startswith("<") & table["a_li"].notna()
        if limit.any():
            values = table["a_li"].astype(object).copy()
            values[limit] = text[limit].str.lstrip("<").str.strip()   # validation makes them numbers
            table["a_li"] = values
            flags = (table["a_li_is_limit"].astype(object) if "a_li_is_limit" in table.columns
                     else pd.Series(np.nan, index=table.index, dtype=object))
            flags[limit] = True
            table["a_li_is_limit"] = flags
            messages.append(f"column {source.get('a_li', 'a_li')!r}: {int(limit.sum())} values written "
                            "'<x' read as upper limits x")
    lower = {c.lower(): c for c in table.columns}
    for spelling, err in _PERCENTILE_ERRORS.items():
        canonical = recognise(spelling)
        if source.get(canonical, "").strip().lower() != spelling:
            continue
        lo, hi = lower.get(f"{spelling}_lower"), lower.get(f"{spelling}_upper")
        if err is None or lo is None or hi is None or err in table.columns:
            continue
        span = pd.to_numeric(table[hi], errors="coerce") - pd.to_numeric(table[lo], errors="coerce")
        table[err] = 0.5 * span.where(span >= 0)
        messages.append(f"{err} = half the span of {lo} and {hi} (16th to 84th percentile)")
    return messages


def _ensure_star_id(table: pd.DataFrame) -> list[str]:
    """Name stars without an identifier by their 1-based row number (in place)."""
    if "star_id" not in table:
        table.insert(0, "star_id", pd.array(row_number_ids(np.arange(len(table))), dtype="str"))
        return ["no star_id column: stars are named by their 1-based row number (row1, row2, ...)"]
    missing = table["star_id"].isna().to_numpy()
    if not missing.any():
        return []
    ids = table["star_id"].to_numpy(dtype=object, copy=True)
    ids[missing] = row_number_ids(np.flatnonzero(missing))
    table["star_id"] = pd.array(ids, dtype="str")
    return [f"{int(missing.sum())} rows without star_id are named by their row number (row<N>)"]


# ----------------------------------------------------------------------------- writing

def provenance_metadata(config: dict | None = None, **extra) -> dict:
    """The metadata written with every output: tool, version, UTC creation time,
    caution, and the configuration used (a plain dict), plus any ``extra`` items."""
    return {"tool": "prioritize", "version": __version__,
            "created_utc": datetime.now(timezone.utc).isoformat(timespec="seconds"),
            "caution": CAUTION, "config": config if config is not None else {}, **extra}


def write_table(table: pd.DataFrame, path: str | os.PathLike, metadata: dict | None = None) -> Path:
    """Write a table atomically; the format follows the extension.

    CSV (``.csv``, ``.csv.gz``, ``.tsv``), Parquet (``.parquet``, ``.pq``), FITS
    (``.fits``, ``.fit``), ECSV (``.ecsv``) or VOTable (``.vot``, ``.votable``, ``.xml``).
    The table goes to a temporary file in the target folder that is renamed over the
    target only when complete; on failure the target is untouched and the temporary
    file removed.  ``metadata`` (see :func:`provenance_metadata`) is stored in the
    Parquet schema metadata, the FITS header (keyword ``PRMETA``, JSON), the ECSV
    header or a VOTable INFO element; for CSV in a sidecar ``<path>.meta.json``.
    Text columns become fixed-width UTF-8 in FITS; missing text is written empty.
    Control characters in text and column names are written as ``\\xNN``
    (:func:`escape_control_characters`), so every file reads back through
    :func:`read_table` (XML forbids them, a NUL ends a CSV field).

    Returns
    -------
    pathlib.Path
        The path written.

    Raises
    ------
    CatalogError
        Unknown extension, missing folder, or the write failed.
    """
    path = Path(path)
    fmt = table_format(path, writing=True)
    if not path.parent.is_dir():
        raise CatalogError(f"cannot be written: folder {path.parent} does not exist", path=str(path))
    metadata = _plain_json(metadata or {})
    table = escape_control_characters(table)
    writer = _WRITERS[fmt]
    try:
        sidecar = path.with_name(path.name + SIDECAR_SUFFIX)
        with atomic_target(path) as temporary:
            writer(table, temporary, metadata, path)
            if fmt in ("csv", "tsv") and metadata:
                # both files complete before either is renamed; the sidecar names the
                # table's checksum, so a pair from two runs is recognised on reading
                stored = {**metadata, TABLE_CHECKSUM_KEY: _sha256(temporary)}
                with atomic_target(sidecar) as side:
                    side.write_text(json.dumps(stored, indent=2, sort_keys=True), encoding="utf-8")
        if fmt in ("csv", "tsv") and not metadata and sidecar.exists():
            sidecar.unlink()        # the previous run's provenance must not describe this table
    except CatalogError:
        raise
    except (OSError, ValueError, TypeError) as exc:
        raise CatalogError(f"cannot be written as {_FORMAT_NAMES[fmt]}: {exc}", path=str(path)) from exc
    return path


_CONTROL = re.compile("[\x00-\x1f\x7f-\x9f]")


def _escaped(text: str) -> str:
    return _CONTROL.sub(lambda m: f"\\x{ord(m.group()):02x}", text)


def escape_control_characters(table: pd.DataFrame) -> pd.DataFrame:
    """The table with every control character (Unicode category Cc: U+0000-001F,
    U+007F-009F) in its text cells and column names written as the four characters
    ``\\xNN``; the same table (no copy) when there are none."""
    renamed = {c: _escaped(c) for c in table.columns if isinstance(c, str) and _CONTROL.search(c)}
    fixed = {}
    for name in table.columns:
        column = table[name]
        if column.dtype == object or pd.api.types.is_string_dtype(column.dtype):
            text = column.map(lambda v: v if not isinstance(v, str) else _escaped(v)
                              if _CONTROL.search(v) else v, na_action="ignore")
            if not text.equals(column):
                fixed[name] = text
    if not renamed and not fixed:
        return table
    return table.assign(**{str(k): v for k, v in fixed.items()}).rename(columns=renamed)


def _plain_json(value):
    """Metadata as strict JSON types: NaN/inf -> None (not set), numpy scalars -> Python,
    anything else unknown -> its text."""
    if isinstance(value, dict):
        return {str(k): _plain_json(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_plain_json(v) for v in value]
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, float) and not np.isfinite(value):
        return None
    if value is None or isinstance(value, (str, int, float, bool)):
        return value
    return str(value)


STALE_TEMPORARY_S = 3600.0   # a run killed mid-write leaves .NAME.*.part; older than this is stale


def _writer_gone(temporary: Path, prefix: str) -> bool:
    """Whether the temporary's writer (the process id in its name, ``.NAME.pPID.*.part``)
    no longer runs on this machine."""
    tag = temporary.name[len(prefix):].split(".", 1)[0]
    if not (tag.startswith("p") and tag[1:].isdigit()):
        return False
    try:
        os.kill(int(tag[1:]), 0)
    except ProcessLookupError:
        return True
    except OSError:                 # it runs, under another user
        return False
    return False


def _remove_stale_temporaries(path: Path) -> None:
    """Delete temporaries of ``path`` left by a run that was killed while writing: those
    whose writer's process id no longer runs, and any older than
    :data:`STALE_TEMPORARY_S` (a concurrent writer is not disturbed)."""
    now = time.time()
    prefix = f".{path.name}."
    for old in path.parent.glob(f"{glob.escape(prefix)}*.part"):
        with contextlib.suppress(OSError):
            if _writer_gone(old, prefix) or now - old.stat().st_mtime > STALE_TEMPORARY_S:
                old.unlink()


@contextlib.contextmanager
def atomic_target(path: Path):
    """Yield a temporary path beside ``path``; rename it onto ``path`` on success,
    delete it on failure."""
    _remove_stale_temporaries(path)
    handle, name = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.p{os.getpid()}.",
                                    suffix=".part")
    os.close(handle)
    temporary = Path(name)
    try:
        yield temporary
        os.chmod(temporary, 0o666 & ~_umask())
        os.replace(temporary, path)
    except BaseException:
        with contextlib.suppress(OSError):
            temporary.unlink()
        raise


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


def _write_csv(table: pd.DataFrame, path: Path, metadata: dict, target: Path) -> None:
    compression = "gzip" if target.name.lower().endswith(".gz") else None
    table.to_csv(path, sep="\t" if table_format(target) == "tsv" else ",", index=False,
                 compression=compression)


def _write_parquet(table: pd.DataFrame, path: Path, metadata: dict, target: Path) -> None:
    import pyarrow as pa
    import pyarrow.parquet as pq

    arrow = pa.Table.from_pandas(_plain_objects(table), preserve_index=False)
    stored = {**(arrow.schema.metadata or {}), METADATA_KEY.encode(): json.dumps(metadata).encode()}
    pq.write_table(arrow.replace_schema_metadata(stored), path)


def _write_astropy(table: pd.DataFrame, path: Path, metadata: dict, target: Path) -> None:
    fmt = table_format(target, writing=True)
    out = _to_astropy(_plain_objects(table), fmt)
    if fmt == "fits":
        if metadata:
            out.meta[FITS_METADATA_KEYWORD] = json.dumps(metadata, ensure_ascii=True)
            if "caution" in metadata:
                out.meta["comments"] = [str(metadata["caution"])]
        out.write(path, format="fits", overwrite=True)
    elif fmt == "ecsv":
        out.meta.update(metadata)
        out.write(path, format="ascii.ecsv", overwrite=True)
    else:
        from astropy.io.votable import from_table
        from astropy.io.votable.tree import Info

        document = from_table(out)
        if metadata:
            document.resources[0].infos.append(Info(name=METADATA_KEY, value=json.dumps(metadata)))
        document.to_xml(str(path))


_WRITERS = {"csv": _write_csv, "tsv": _write_csv, "parquet": _write_parquet,
            "fits": _write_astropy, "ecsv": _write_astropy, "votable": _write_astropy}


def _plain_objects(table: pd.DataFrame) -> pd.DataFrame:
    """Object columns mixing types (numbers and text) become text, so every writer accepts them."""
    out = table.copy()
    for name in out.columns:
        if out[name].dtype == object:
            present = out[name].notna()
            kinds = set(out[name][present].map(type))
            if len(kinds) > 1 and not kinds <= {bool, np.bool_}:
                out[name] = out[name].map(str, na_action="ignore")
    return out


def _to_astropy(table: pd.DataFrame, fmt: str):
    """DataFrame -> astropy Table with masks for gaps, units and descriptions.

    FITS has no null for text or logical columns: text is stored as fixed-width UTF-8
    (missing -> empty) and booleans with gaps as the text True/False (read back by
    :func:`read_table` as booleans)."""
    import astropy.units as u
    from astropy.table import Column, MaskedColumn, Table

    out = Table()
    for name in table.columns:
        series = table[name]
        missing = series.isna().to_numpy()
        dtype = series.dtype
        if pd.api.types.is_bool_dtype(dtype) and not missing.any():
            values = series.to_numpy(dtype=bool)
        elif pd.api.types.is_integer_dtype(dtype) and isinstance(dtype, pd.api.extensions.ExtensionDtype):
            values = np.ma.MaskedArray(series.to_numpy(dtype=np.int64, na_value=0), mask=missing)
        elif pd.api.types.is_numeric_dtype(dtype) and not pd.api.types.is_bool_dtype(dtype):
            values = (series.to_numpy() if not isinstance(dtype, pd.api.extensions.ExtensionDtype)
                      else series.to_numpy(dtype=np.float64, na_value=np.nan))
        else:
            present = series[~missing].astype(object)
            flags = present.map(type).isin([bool, np.bool_]).all() and len(present) > 0
            if flags and fmt != "fits":
                values = np.ma.MaskedArray(series.astype(object).where(~missing, False).to_numpy(dtype=bool),
                                           mask=missing)
            else:
                text = series.astype(object).where(~missing, "").map(str).to_numpy(dtype=str)
                if fmt == "fits":
                    encoded = np.char.encode(text, "utf-8")
                    values = encoded.astype(f"S{max(1, encoded.dtype.itemsize)}")
                else:
                    values = np.ma.MaskedArray(text, mask=missing)
        spec = OUTPUT_COLUMNS.get(name) or INPUT_COLUMNS.get(name)
        unit = _WRITE_UNITS.get(spec.unit) if spec is not None else None
        description = spec.description if spec is not None else None
        if unit and fmt == "fits" and not _fits_unit(unit):
            # FITS units have no Jupiter mass and no dex: the unit goes into the description
            description, unit = f"{description} [{spec.unit}]", None
        kind = MaskedColumn if np.ma.is_masked(values) else Column
        column = kind(values, name=str(name), unit=u.Unit(unit) if unit else None, description=description)
        out.add_column(column)
    return out


def _fits_unit(unit: str) -> bool:
    """Whether the FITS standard's unit syntax can carry ``unit`` (astropy's FITS format)."""
    import astropy.units as u

    try:
        u.Unit(unit).to_string(format="fits")
    except (ValueError, u.UnitsError):
        return False
    return True


def _read_sidecar(path: Path) -> dict:
    sidecar = path.with_name(path.name + SIDECAR_SUFFIX)
    if not sidecar.exists():
        return {}
    try:
        stored = json.loads(sidecar.read_text(encoding="utf-8"))
    except (OSError, ValueError) as exc:
        raise CatalogError(f"metadata sidecar is not readable JSON ({exc})", path=str(sidecar)) from exc
    checksum = stored.pop(TABLE_CHECKSUM_KEY, None) if isinstance(stored, dict) else None
    if checksum is not None and checksum != _sha256(path):
        warnings.warn(f"{sidecar} describes another version of {path.name} (a run stopped between "
                      "writing the two); its provenance is ignored", PrioritizeWarning, stacklevel=3)
        return {}
    return stored


def _sha256(path: Path) -> str:
    import hashlib
    digest = hashlib.sha256()
    with open(path, "rb") as handle:
        for block in iter(lambda: handle.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()

