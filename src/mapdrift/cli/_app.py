"""The typer application, global options and the error-to-exit-code mapping."""

from __future__ import annotations

import functools
import inspect
import logging
from collections.abc import Callable
from typing import Any, Optional, TypeVar

import typer

from mapdrift import __version__
from mapdrift.errors import MapdriftError

__all__ = ["app", "command", "main", "state"]

F = TypeVar("F", bound=Callable[..., Any])

app = typer.Typer(
    name="mapdrift",
    help=(
        "Comparable animated choropleths and change detection for a value mapped over many "
        "periods.\n\nExit codes: 0 success (warnings allowed); 1 input problem; 2 usage or config "
        "error; 3 output exists (use --force); 4 a step or encoder failed; 130 interrupted "
        "(Ctrl-C); 141 the output pipe closed early (e.g. `| head`), nothing more printed.\n\n"
        "--debug, -v and -q work before or after the command name."
    ),
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
    rich_markup_mode=None,
    context_settings={"help_option_names": ["-h", "--help"]},
)

#: Global flags set by the callback (debug shows tracebacks).
state: dict[str, bool] = {"debug": False, "quiet": False, "verbose": False}


def _version(value: bool) -> None:
    if value:
        typer.echo(f"mapdrift {__version__}")
        raise typer.Exit()


_DEBUG_HELP = "Show tracebacks and debug logging."
_VERBOSE_HELP = "More progress messages."
_QUIET_HELP = "Only errors (for scheduled jobs)."


@app.callback()
def _main(
    debug: bool = typer.Option(False, "--debug", help=_DEBUG_HELP),
    verbose: bool = typer.Option(False, "--verbose", "-v", help=_VERBOSE_HELP),
    quiet: bool = typer.Option(False, "--quiet", "-q", help=_QUIET_HELP),
    version: Optional[bool] = typer.Option(
        None, "--version", callback=_version, is_eager=True, help="Print the version and exit."
    ),
) -> None:
    _configure(debug=debug, verbose=verbose, quiet=quiet)


def _configure(*, debug: bool, verbose: bool, quiet: bool) -> None:
    """Set the global flags and the console's logging level."""
    state["debug"] = debug
    state["quiet"] = quiet
    state["verbose"] = verbose
    # library warnings travel as findings (printed, in findings.json and the report), so the
    # console shows only errors unless -v or --debug
    level = logging.DEBUG if debug else logging.INFO if verbose else logging.ERROR
    if quiet:
        level = logging.ERROR
    # the console shows `level` and above; the pipeline's run.log (a handler of its own) may
    # record more, so the console handler carries the level, not only the logger
    handler = logging.StreamHandler()
    handler.setLevel(level)
    handler.setFormatter(logging.Formatter("%(levelname)s %(name)s: %(message)s"))
    logging.basicConfig(level=level, handlers=[handler], force=True)


# The same three flags on every command, so `mapdrift check ... --debug` works as the error
# hints suggest; given on either side of the command name, they add up.
_GLOBAL_PARAMS = [
    inspect.Parameter(
        name,
        inspect.Parameter.KEYWORD_ONLY,
        default=typer.Option(False, *flags, help=text, rich_help_panel="Global"),
        annotation=bool,
    )
    for name, flags, text in (
        ("global_debug", ("--debug",), _DEBUG_HELP),
        ("global_verbose", ("--verbose", "-v"), _VERBOSE_HELP),
        ("global_quiet", ("--quiet", "-q"), _QUIET_HELP),
    )
]


def _pipe_closed() -> int:
    """stdout's reader went away (``mapdrift check ... | head -1``): stop quietly.

    Later writes (and the interpreter's final flush) go to the null device, so no second
    BrokenPipeError is printed; the exit code is 141, as for a process stopped by SIGPIPE
    (common practice, no source). Outputs are written atomically, so none is half-written.
    """
    import os
    import sys

    try:
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
        os.close(devnull)
    except (OSError, ValueError, AttributeError):  # not a real file (e.g. a test runner's)
        pass
    return 141


def command(name: str, **kwargs: Any) -> Callable[[F], F]:
    """Register a command whose MapdriftError becomes one red line and its exit code.

    Doing the mapping here (not only in :func:`main`) keeps exit codes right under typer's
    CliRunner too, which the tests use.
    """

    def decorator(func: F) -> F:
        @functools.wraps(func)
        def wrapper(*args: Any, **kw: Any) -> Any:
            flags = {p.name: bool(kw.pop(p.name, False)) for p in _GLOBAL_PARAMS}
            if any(flags.values()):
                _configure(
                    debug=state["debug"] or flags["global_debug"],
                    verbose=state["verbose"] or flags["global_verbose"],
                    quiet=state["quiet"] or flags["global_quiet"],
                )
            try:
                return func(*args, **kw)
            except BrokenPipeError:
                raise typer.Exit(_pipe_closed()) from None
            except MapdriftError as exc:
                if state["debug"]:
                    raise
                typer.secho(f"error: {exc}", fg=typer.colors.RED, err=True)
                raise typer.Exit(exc.exit_code) from None
            except (typer.Exit, typer.Abort, typer.TyperException, KeyboardInterrupt):
                raise
            except Exception as exc:  # a bug of ours: one line, the traceback with --debug
                if state["debug"]:
                    raise
                typer.secho(
                    f"internal error: {type(exc).__name__}: {exc} (run with --debug for the "
                    "traceback and please report it)",
                    fg=typer.colors.RED,
                    err=True,
                )
                raise typer.Exit(4) from None

        sig = inspect.signature(func)
        wrapper.__signature__ = sig.replace(  # type: ignore[attr-defined]
            parameters=[*sig.parameters.values(), *_GLOBAL_PARAMS]
        )
        app.command(name, **kwargs)(wrapper)
        return func

    return decorator


def console() -> None:
    """The ``mapdrift`` console script: :func:`main`, then exit with its code.

    Before the interpreter exits, every object left is frozen out of the garbage collector
    (``gc.freeze``): the final collection of a run's objects took about 0.4 s of a 8 s demo,
    for memory the operating system takes back anyway.
    """
    import gc
    import sys

    code = main()
    try:  # the last buffered lines may meet a reader that has gone (`| head -1`)
        sys.stdout.flush()
    except BrokenPipeError:
        code = _pipe_closed()
    gc.freeze()
    sys.exit(code)


def main(argv: list[str] | None = None) -> int:
    """Run the command line in this process; returns the exit code (used by tests too)."""
    try:
        rv = app(args=argv, standalone_mode=False)
    except BrokenPipeError:  # e.g. `mapdrift --help | head -1`
        return _pipe_closed()
    except MapdriftError as exc:  # raised outside a command (e.g. in the callback)
        if state["debug"]:
            raise
        typer.secho(f"error: {exc}", fg=typer.colors.RED, err=True)
        return exc.exit_code
    except typer.Abort:
        typer.secho("aborted", fg=typer.colors.RED, err=True)
        return 130
    except typer.TyperException as exc:  # usage errors (bad option, missing argument)
        show = getattr(exc, "show", None)
        if callable(show):
            show()
        else:
            typer.secho(f"error: {exc}", fg=typer.colors.RED, err=True)
        return int(getattr(exc, "exit_code", 2) or 2)
    except KeyboardInterrupt:
        typer.secho("interrupted", fg=typer.colors.RED, err=True)
        return 130
    return rv if isinstance(rv, int) else 0
