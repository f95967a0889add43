"""What every command shares at the terminal: exit codes, and package errors and
warnings as single lines.

Exit codes (documented in README.md): :data:`EXIT_OK` (0) success,
:data:`EXIT_USER` (1) a user mistake, named in one line that says what was expected
and how to fix it, :data:`EXIT_INTERNAL` (2) a fault of the tool, one line asking for a
report; the traceback only with the global ``--debug`` option.  :func:`run_guarded` is
the one handler the application's entry point goes through.

Kept free of heavy imports so that ``prioritize --help`` stays fast.
"""

from __future__ import annotations

import contextlib
import errno
import functools
import sys
import traceback
import warnings

import typer

try:                                   # typer >= 0.20 carries its own copy of click
    from typer._click.exceptions import ClickException
except ImportError:                    # pragma: no cover - older typer on click
    from click import ClickException

from .errors import PrioritizeError, PrioritizeWarning

EXIT_OK, EXIT_USER, EXIT_INTERNAL = 0, 1, 2
REPORT_HINT = ("this is a fault of prioritize, not of your input; please report it with the "
               "command you ran and the output of the same command with --debug "
               "(prioritize --debug COMMAND ...)")
# errno values that say something about the user's files or machine, not about the tool
_USER_ERRNOS = frozenset({errno.ENOENT, errno.EACCES, errno.EPERM, errno.EISDIR, errno.ENOTDIR,
                          errno.ENOSPC, errno.EROFS, errno.EDQUOT, errno.EEXIST, errno.ENAMETOOLONG,
                          errno.EMFILE})


@contextlib.contextmanager
def one_line_errors():
    """Package errors and warnings become single lines on stderr; errors exit with
    :data:`EXIT_USER`.

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
            raise typer.Exit(code=EXIT_USER) from None


def friendly(func):
    """Decorator form of :func:`one_line_errors` for command functions."""
    @functools.wraps(func)
    def wrapper(*args, **kwargs):
        with one_line_errors():
            return func(*args, **kwargs)
    return wrapper


def _os_error_text(exc: OSError) -> str:
    where = " ".join(str(name) for name in (exc.filename, exc.filename2) if name)
    return (f"{where + ': ' if where else ''}{exc.strerror or exc}"
            " (check the path, its permissions and the free disk space)")


DEBUG = {"on": False}
"""Set by the global ``--debug`` option for the run in progress."""


def run_guarded(run) -> int:
    """Call ``run`` (a click command's ``main`` with ``standalone_mode=False``) and turn
    every outcome into an exit code: usage mistakes and package errors ->
    :data:`EXIT_USER` with one line, anything unexpected -> :data:`EXIT_INTERNAL` with
    :data:`REPORT_HINT` (and the traceback under ``--debug``, :data:`DEBUG`)."""
    DEBUG["on"] = False
    try:
        code = run()
        return code if isinstance(code, int) else EXIT_OK
    except typer.Exit as exc:
        return exc.exit_code
    except ClickException as exc:          # bad option, missing file, unknown command
        exc.show()
        return EXIT_USER
    except typer.Abort:
        typer.echo("aborted", err=True)
        return EXIT_USER
    except PrioritizeError as exc:
        typer.echo(f"error: {exc}", err=True)
        return EXIT_USER
    except MemoryError:
        typer.echo("error: out of memory: lower [run] batch_size in the config (stars per batch) "
                   "or --workers", err=True)
        return EXIT_USER
    except OSError as exc:
        if exc.errno == errno.EPIPE:             # output piped into `head`: not a fault
            return EXIT_OK
        if exc.errno in _USER_ERRNOS:
            typer.echo(f"error: {_os_error_text(exc)}", err=True)
            return EXIT_USER
        return _internal(exc, DEBUG["on"])
    except Exception as exc:  # noqa: BLE001 - the one place every other failure ends
        return _internal(exc, DEBUG["on"])


def _internal(exc: BaseException, debug: bool) -> int:
    if debug:
        traceback.print_exception(exc, file=sys.stderr)
    text = " ".join(str(exc).split())[:300]
    typer.echo(f"internal error: {type(exc).__name__}: {text} -- {REPORT_HINT}", err=True)
    return EXIT_INTERNAL
