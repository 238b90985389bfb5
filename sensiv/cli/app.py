"""The ``sensiv`` typer application: the app, the guard that turns the caller's mistakes into
exit code 2 with a one-paragraph message, and the console-script entry point.

Only ``typer`` is imported at module level so that ``sensiv --help`` starts instantly; the
numerical layers are imported inside the commands (one module per command in this package).
"""

from __future__ import annotations

import functools
import sys
import warnings

import typer
from typer.core import TyperGroup

try:  # typer vendors its own copy of click from 0.2x on; older ones use click itself
    from typer._click import exceptions as click_errors
except ImportError:  # pragma: no cover
    from click import exceptions as click_errors


class SensivGroup(TyperGroup):
    """The command group: usage errors of the option parser (a missing option, ``--level
    abc``) are printed as one paragraph in sensiv's own format (``error: ...``), exit code 2."""

    def get_help_option(self, ctx):
        """The help flag, defaulting to ``False`` rather than ``None``: typer coerces a
        ``None`` flag through a pydantic adapter, and importing pydantic for a flag nobody gave
        doubled the time of every ``sensiv CMD --help``."""
        option = super().get_help_option(ctx)
        if option is not None and option.default is None:
            option.default = False
        return option

    def main(self, args=None, prog_name=None, complete_var=None, standalone_mode=True,
             **extra):
        if not standalone_mode:
            return super().main(args=args, prog_name=prog_name, complete_var=complete_var,
                                standalone_mode=False, **extra)
        try:
            code = super().main(args=args, prog_name=prog_name, complete_var=complete_var,
                                standalone_mode=False, **extra)
        except click_errors.NoArgsIsHelpError as exc:
            exc.show()  # a bare ``sensiv`` prints the help, as before
            sys.exit(exc.exit_code)
        except click_errors.UsageError as exc:
            typer.echo(f"error: {usage_message(exc)}", err=True)
            sys.exit(EXIT_BAD_INPUT)
        except click_errors.ClickException as exc:
            typer.echo(f"error: {exc.format_message()}", err=True)
            sys.exit(exc.exit_code)
        except typer.Abort:
            typer.echo("error: aborted", err=True)
            sys.exit(1)
        sys.exit(code if isinstance(code, int) else 0)


def usage_message(exc: "click_errors.UsageError") -> str:
    """One paragraph: click's message, first letter lowered, plus where to read the options."""
    text = " ".join(exc.format_message().split())
    text = text[:1].lower() + text[1:]
    path = exc.ctx.command_path if exc.ctx is not None else "sensiv"
    if text.endswith("?"):  # "no such command 'fti'. Did you mean 'fit'?"
        return f"{text} See '{path} --help' for the options"
    return f"{text.rstrip('.')}; see '{path} --help' for the options"


def _new_app() -> typer.Typer:
    return typer.Typer(
        cls=SensivGroup,
        add_completion=False,
        no_args_is_help=True,
        rich_markup_mode=None,
        pretty_exceptions_enable=False,
        help="Sensitivity analysis for instrumental-variable estimates whose instrument may have "
             "a direct effect on the outcome.",
    )


app = _new_app()


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
        from sensiv.core import labels
        from sensiv.core.progress import silenced

        try:
            with warnings.catch_warnings(record=True) as caught, \
                    silenced(bool(kwargs.get("as_json"))), \
                    labels.using(labels.NONE):  # a command's --label ends with it
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
    """Console-script entry point.

    typer turns every registered function into a click command each time the program starts;
    for ``sensiv CMD ...`` only the command asked for is built (one instead of nine), which
    was most of what ``sensiv CMD --help`` cost beyond importing typer.  Anything else (no
    command, ``--help``, ``--version``, a misspelt command) runs the whole application.
    """
    from sensiv.core.memory import prefer_system_allocator

    prefer_system_allocator()     # freed memory can go back to the system (core/memory.py)
    name = requested_command(sys.argv[1:])
    (app if name is None else only(name))()


def command_name(info) -> str:
    """The name typer gives a registered command (its function's name, ``_`` → ``-``)."""
    return info.name or info.callback.__name__.replace("_", "-")


def requested_command(args: list[str]) -> str | None:
    """The registered command named by the first argument, if there is one."""
    if not args or args[0].startswith("-"):
        return None
    names = {command_name(info) for info in app.registered_commands}
    return args[0] if args[0] in names else None


def only(name: str) -> typer.Typer:
    """The application with its root options and the one command ``name``."""
    single = _new_app()
    single.registered_callback = app.registered_callback
    single.registered_commands = [info for info in app.registered_commands
                                  if command_name(info) == name]
    return single
