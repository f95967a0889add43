"""Package exceptions and warnings.

User mistakes raise a subclass of :class:`PrioritizeError` whose message says what
was expected and how to fix it; the command-line front end turns it into one line
and a non-zero exit code, never a traceback.
"""

from __future__ import annotations


class PrioritizeError(Exception):
    """Base class for every error the package raises on purpose."""


class ConfigError(PrioritizeError):
    """A configuration key is unknown or its value is outside the allowed range."""


class CatalogError(PrioritizeError):
    """A catalog file cannot be read or lacks what is needed.

    Parameters
    ----------
    message : str
        What is wrong and how to fix it.
    path : str, optional
        The file concerned.
    row : int, optional
        1-based data row (header excluded), when one row is at fault.
    column : str, optional
        The column concerned.
    """

    def __init__(self, message: str, path: str | None = None, row: int | None = None,
                 column: str | None = None):
        where = []
        if path is not None:
            where.append(f"file {path}")
        if row is not None:
            where.append(f"row {row}")
        if column is not None:
            where.append(f"column '{column}'")
        self.path, self.row, self.column = path, row, column
        super().__init__(f"{', '.join(where)}: {message}" if where else message)


class ModelRangeError(PrioritizeError):
    """A request falls outside the range a model is valid for."""


class PrioritizeWarning(UserWarning):
    """Base class for warnings the package issues on purpose."""
