"""The ``debrief`` command: a thin argparse front over the library.

Each subcommand lives in its own module here and exposes ``register(subparsers)``, which adds
its parser and sets ``func(args) -> int``. This module only dispatches and turns a user's
mistake (:class:`debrief.errors.InputError`) into one line on stderr and exit status 2.
"""

from __future__ import annotations

import argparse
import importlib
import sys

from .. import __version__
from ..errors import InputError

# Order here is the order in `debrief --help`.
_COMMANDS = ("validate", "flashes", "summary", "site", "outages", "report")


class _Parser(argparse.ArgumentParser):
    def error(self, message):  # argparse's own exit status for bad options is already 2
        self.print_usage(sys.stderr)
        self.exit(2, f"debrief: error: {message}\n")


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(prog="debrief", description="The debrief after a thunderstorm.")
    parser.add_argument("--version", action="version", version=f"debrief {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    for name in _COMMANDS:
        try:
            module = importlib.import_module(f".{name}", __name__)
        except ModuleNotFoundError as e:  # a command whose module is not written yet
            if e.name == f"{__name__}.{name}":
                continue
            raise
        module.register(sub)
    return parser


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    if not getattr(args, "func", None):
        parser.print_help(sys.stderr)
        return 2
    try:
        return int(args.func(args) or 0)
    except InputError as e:
        print(f"debrief {args.command}: {e}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("debrief: interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:
        return 0


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
