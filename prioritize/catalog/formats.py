"""File names and formats: which extensions are read and written, checked without
importing the table libraries (so a bad output name fails at once).

:mod:`prioritize.catalog.io` re-exports everything here.
"""

from __future__ import annotations

import os
from pathlib import Path

from prioritize.errors import CatalogError

ACCEPTED_FORMATS = ("CSV (.csv, .csv.gz, .tsv), Parquet (.parquet, .pq), FITS (.fits, .fit, "
                    ".fits.gz; first table extension), ECSV (.ecsv), VOTable (.vot, .votable, .xml)")

_EXTENSIONS = {
    ".csv": "csv", ".csv.gz": "csv", ".tsv": "tsv", ".tsv.gz": "tsv",
    ".parquet": "parquet", ".pq": "parquet",
    ".fits": "fits", ".fit": "fits", ".fits.gz": "fits",
    ".ecsv": "ecsv",
    ".vot": "votable", ".votable": "votable", ".xml": "votable",
}
_WRITABLE = {ext: fmt for ext, fmt in _EXTENSIONS.items() if ext != ".fits.gz"}
_FORMAT_NAMES = {"csv": "CSV", "tsv": "tab-separated text", "parquet": "Parquet", "fits": "FITS",
                 "ecsv": "ECSV", "votable": "VOTable"}


def catalog_stem(path: str | os.PathLike) -> str:
    """The file name without its catalog extension: ``a.b.csv`` -> ``a.b``,
    ``stars.csv.gz`` -> ``stars`` (unknown extensions: the name without its last suffix)."""
    name = Path(path).name
    for ext in sorted(_EXTENSIONS, key=len, reverse=True):
        if name.lower().endswith(ext):
            return name[: -len(ext)] or name
    return Path(name).stem


def check_output_path(output: str | os.PathLike, inputs=()) -> Path:
    """Refuse an output path before any work is done: an unknown extension, a missing
    or unwritable folder, or a path that is one of the ``inputs`` (the catalog would be
    overwritten)."""
    output = Path(output)
    table_format(output, writing=True)
    if not output.parent.is_dir():
        raise CatalogError(f"cannot be written: folder {output.parent} does not exist", path=str(output))
    if not os.access(output.parent, os.W_OK):
        raise CatalogError(f"cannot be written: folder {output.parent} is not writable", path=str(output))
    for given in inputs:
        try:
            same = output.resolve() == Path(given).resolve() or (
                output.exists() and os.path.samefile(output, given))
        except OSError:
            same = False
        if same:
            raise CatalogError("is the input catalog: choose another output path (-o) so the "
                               "catalog is not overwritten", path=str(output))
    return output


def table_format(path: str | os.PathLike, writing: bool = False) -> str:
    """The format key (``csv``, ``tsv``, ``parquet``, ``fits``, ``ecsv``, ``votable``)
    from a file name's extension.

    Raises
    ------
    CatalogError
        The extension is not one of the accepted ones.
    """
    name = Path(path).name.lower()
    table = _WRITABLE if writing else _EXTENSIONS
    for ext in sorted(table, key=len, reverse=True):
        if name.endswith(ext):
            return table[ext]
    accepted = ", ".join(sorted(table))
    raise CatalogError(f"unknown file type; use one of the extensions {accepted} "
                       f"({ACCEPTED_FORMATS})", path=str(path))


def companion_path(output: Path, suffix: str) -> Path:
    """A file written beside ``output``: ``plan.csv`` -> ``plan.png`` (double extensions
    such as ``.csv.gz`` are removed whole)."""
    output = Path(output)
    name = output.name
    for ext in (".csv.gz", ".tsv.gz"):
        if name.lower().endswith(ext):
            return output.with_name(name[: -len(ext)] + suffix)
    return output.with_suffix(suffix)
