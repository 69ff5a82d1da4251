"""The ``liftlag`` command: parses the arguments and dispatches to the handler a module registered.

Subcommands register themselves through ``toolkit.commands.register_all``; printing lives in
``toolkit.console``.

Exit codes: 0 ok, 1 an analysis could not be done (the message says why), 2 bad config or
arguments, 3 bad data.
"""

from __future__ import annotations

import argparse
import os
import sys
import traceback
import warnings

from rich.markup import escape

from . import __version__
from .console import err_console
from .errors import DataWarning, StatisticalWarning
from .failures import INTERRUPTED_MESSAGE, describe, interrupt_guard, interrupt_requested


class _Parser(argparse.ArgumentParser):
    def error(self, message):  # argparse's own errors exit 2, as ours do
        self.print_usage(sys.stderr)
        err_console.print(f"[bold red]error:[/] {escape(message)}")
        raise SystemExit(2)


def _config_arg(p: argparse.ArgumentParser) -> None:
    p.add_argument("-c", "--config", default="liftlag.toml", help="the liftlag.toml to use (default: ./liftlag.toml)")


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(prog="liftlag", description="What coupons and discounts really do, from a warehouse export.")
    parser.add_argument("--version", action="version", version=f"liftlag {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)

    _register_analysis_commands(sub)
    return parser


def _register_analysis_commands(sub) -> None:
    """Every subcommand; each module registers its own (see ``toolkit.commands``)."""
    from .commands import register_all

    register_all(sub, _config_arg)


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
    except SystemExit as exc:  # --help, --version, or an argument error (exit 2)
        return int(exc.code or 0)
    if not args.command:
        parser.print_help()
        return 2
    handler = args.handler
    # Every exception ends in a message and the documented exit code (toolkit.failures).
    with interrupt_guard():
        try:
            with warnings.catch_warnings(record=True) as caught:
                warnings.simplefilter("always")
                try:
                    code = handler(args)
                finally:
                    _print_warnings(caught)
            if interrupt_requested():  # Ctrl-C that a library swallowed: still an interrupted run
                raise KeyboardInterrupt
            return code
        except BrokenPipeError:  # output piped into `head` and the like
            return 0
        except SystemExit as exc:
            return int(exc.code or 0) if not isinstance(exc.code, str) else 2
        except BaseException as exc:  # noqa: BLE001 - mapped to a message, never a traceback
            failure = describe(exc, args)
            if os.environ.get("LIFTLAG_DEBUG"):
                traceback.print_exception(exc)
            prefix = "" if failure.message == INTERRUPTED_MESSAGE else "[bold red]error:[/] "
            try:
                err_console.print(f"{prefix}{escape(failure.message)}")
            except Exception:  # the terminal itself failed: plain text
                print(failure.message, file=sys.stderr)
            return failure.exit_code


def _print_warnings(caught) -> None:
    for w in caught:
        if issubclass(w.category, (DataWarning, StatisticalWarning)):
            err_console.print(f"[yellow]warning:[/] {escape(str(w.message))}")


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
