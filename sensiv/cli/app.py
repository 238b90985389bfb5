"""The ``sensiv`` typer application: the app, the guard that turns the caller's mistakes into
exit code 2 with a one-paragraph message, and the console-script entry point.

Only ``typer`` is imported at module level so that ``sensiv --help`` starts instantly; the
numerical layers are imported inside the commands (one module per command in this package).
"""

from __future__ import annotations

import functools
import warnings

import typer

app = typer.Typer(
    add_completion=False,
    no_args_is_help=True,
    rich_markup_mode=None,
    pretty_exceptions_enable=False,
    help="Sensitivity analysis for instrumental-variable estimates whose instrument may have a "
         "direct effect on the outcome.",
)


EXIT_BAD_INPUT = 2
EXIT_SOLVER = 1


def _show_version(value: bool) -> None:
    if value:
        from sensiv.core.version import __version__

        typer.echo(f"sensiv {__version__}")
        raise typer.Exit()


@app.callback()
def _root(version: bool = typer.Option(False, "--version", callback=_show_version,
                                       is_eager=True, help="Print the version and exit.")
          ) -> None:
    """Sensitivity analysis for instrumental-variable estimates whose instrument may have a
    direct effect on the outcome."""


def _fail(message: str) -> None:
    typer.echo(f"error: {message}", err=True)
    raise typer.Exit(EXIT_BAD_INPUT)


def guarded(command):
    """Turn the caller's mistakes (``InputError``) into exit code 2 with a clean message."""
    @functools.wraps(command)
    def wrapper(*args, **kwargs):
        from sensiv.core.errors import InputError, SolverError

        try:
            with warnings.catch_warnings(record=True) as caught:
                warnings.simplefilter("always")
                result = command(*args, **kwargs)
            _echo_warnings(caught)
            return result
        except InputError as exc:
            _fail(str(exc))
        except SolverError as exc:  # not the caller's mistake: exit 1, but no traceback
            typer.echo(f"error: {exc}", err=True)
            raise typer.Exit(EXIT_SOLVER) from exc
    return wrapper


def _echo_warnings(caught) -> None:
    from sensiv.core.errors import WeakInstrumentWarning

    for w in caught:
        if issubclass(w.category, WeakInstrumentWarning):
            continue  # already part of the printed output and of the JSON "notes"
        typer.echo(f"warning: {w.message}", err=True)


def main() -> None:
    """Console-script entry point."""
    app()
