"""What every command shares at the terminal: package errors and warnings as single lines.

Kept free of heavy imports so that ``prioritize --help`` stays fast.
"""

from __future__ import annotations

import contextlib
import functools
import warnings

import typer

from .errors import PrioritizeError, PrioritizeWarning


@contextlib.contextmanager
def one_line_errors():
    """Package errors and warnings become single lines on stderr; errors exit with code 2."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", PrioritizeWarning)
        try:
            yield
        except PrioritizeError as exc:
            typer.echo(f"error: {exc}", err=True)
            raise typer.Exit(code=2) from None
        finally:
            for item in caught:
                if issubclass(item.category, PrioritizeWarning):
                    typer.echo(f"warning: {item.message}", err=True)
                else:
                    warnings.warn_explicit(item.message, item.category, item.filename, item.lineno)


def friendly(func):
    """Decorator form of :func:`one_line_errors` for command functions."""
    @functools.wraps(func)
    def wrapper(*args, **kwargs):
        with one_line_errors():
            return func(*args, **kwargs)
    return wrapper
