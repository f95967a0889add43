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
    """Package errors and warnings become single lines on stderr; errors exit with code 2.

    Package warnings are printed as they happen (nothing is accumulated); other
    warnings keep their usual display."""
    previous = warnings.showwarning

    def show(message, category, filename, lineno, file=None, line=None):
        if issubclass(category, PrioritizeWarning):
            typer.echo(f"warning: {message}", err=True)
        else:
            previous(message, category, filename, lineno, file, line)

    with warnings.catch_warnings():
        warnings.simplefilter("always", PrioritizeWarning)
        warnings.showwarning = show
        try:
            yield
        except PrioritizeError as exc:
            typer.echo(f"error: {exc}", err=True)
            raise typer.Exit(code=2) from None


def friendly(func):
    """Decorator form of :func:`one_line_errors` for command functions."""
    @functools.wraps(func)
    def wrapper(*args, **kwargs):
        with one_line_errors():
            return func(*args, **kwargs)
    return wrapper
