"""The ``critline`` command line: a thin shell over the library.

Each command lives in its own module of this package and registers itself on
:data:`app`.  :func:`main` turns every :class:`critline.errors.CritlineError`
into one line on stderr and its exit code; ``--debug`` shows tracebacks.
"""

from __future__ import annotations

import sys

import typer
from typer.exceptions import TyperException

from critline import cautions
from critline.errors import EXIT_USAGE, CritlineError

app = typer.Typer(
    name="critline",
    help=(
        "Refractive index readings from phone photos of a gem refractometer's eyepiece view, "
        "instrument calibration against reference stones, and stone identification.\n\n"
        + cautions.HELP_EPILOG
    ),
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
)

_state = {"debug": False}


@app.callback()
def _root(
    debug: bool = typer.Option(False, "--debug", help="Show full tracebacks on errors."),
) -> None:
    _state["debug"] = debug


def debug_enabled() -> bool:
    return _state["debug"] or "--debug" in sys.argv


# Command modules register themselves on ``app`` when imported.
from critline.cli import batch as _batch  # noqa: E402,F401
from critline.cli import calibrate as _calibrate  # noqa: E402,F401
from critline.cli import identify as _identify  # noqa: E402,F401
from critline.cli import read as _read  # noqa: E402,F401
from critline.cli import synth as _synth  # noqa: E402,F401


def main(argv: list[str] | None = None) -> int:
    """Entry point of the console script; returns the exit code.

    Usage errors from option parsing are printed as one line (exit 2), like every
    :class:`~critline.errors.CritlineError`; tracebacks only with ``--debug``.
    """
    command = typer.main.get_command(app)
    try:
        result = command.main(args=argv, prog_name="critline", standalone_mode=False)
    except SystemExit as exc:  # a command that exits with its own code
        code = exc.code
        return code if isinstance(code, int) else (0 if code is None else EXIT_USAGE)
    except CritlineError as exc:
        if debug_enabled():
            raise
        print(f"critline: error: {exc}", file=sys.stderr)
        return exc.exit_code
    except TyperException as exc:  # option parsing (click) errors and aborts
        message = exc.format_message() if hasattr(exc, "format_message") else str(exc)
        if message:  # an empty message: help was shown for a bare command
            print(f"critline: error: {message} (see --help)", file=sys.stderr)
        code = getattr(exc, "exit_code", EXIT_USAGE)
        return 130 if type(exc).__name__ == "Abort" else (code if code else EXIT_USAGE)
    except KeyboardInterrupt:
        print("critline: interrupted", file=sys.stderr)
        return 130
    except Exception as exc:
        if debug_enabled():
            raise
        print(f"critline: internal error: {type(exc).__name__}: {exc} (rerun with --debug)", file=sys.stderr)
        return 1
    return result if isinstance(result, int) else 0


def run() -> None:
    sys.exit(main())
