"""The command line: the only place that parses arguments, prints and picks exit codes.

Each subcommand lives in its own module of this package with two functions:
``add_parser(subparsers)`` builds its argparse parser (cheap: no heavy imports at
module level, so ``audition --help`` answers at once) and ``run(args)`` does the
work and returns an exit status. Exit status 2 and one line on stderr for an
:class:`~audition.errors.AuditionError`; anything else is a bug.
"""

from __future__ import annotations

import argparse
import importlib
import sys

from audition import __version__
from audition.errors import AuditionError

#: Subcommand modules in the order the help lists them. A module that is not
#: there yet is skipped, so the tool grows one command at a time.
COMMANDS = ("synth", "survey", "plan", "response", "render", "listen", "batch", "realize", "presets")


class OneLineParser(argparse.ArgumentParser):
    """argparse without the usage block on a bad option: one line naming the option and what it allows, exit 2."""

    def error(self, message: str):
        self.exit(2, f"{self.prog}: error: {message} (see --help)\n")


def build_parser() -> argparse.ArgumentParser:
    parser = OneLineParser(
        prog="audition",
        description="Choose, render, measure and audition hiss (low-pass) filters "
        "for the restoration of worn tape, cassette and disc transfers.",
    )
    parser.add_argument("--version", action="version", version=f"audition {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=OneLineParser)
    for name in COMMANDS:
        try:
            module = importlib.import_module(f"audition.cli.{name}")
        except ModuleNotFoundError as exc:
            if exc.name != f"audition.cli.{name}":
                raise
            continue
        module.add_parser(sub)
    return parser


def main(argv: list[str] | None = None) -> int:
    try:
        parser = build_parser()
        args = parser.parse_args(argv)
    except KeyboardInterrupt:
        print("audition: interrupted", file=sys.stderr)
        return 130
    if args.command is None:
        parser.print_help()
        return 2
    try:
        return int(args.run(args) or 0)
    except AuditionError as exc:
        print(f"audition {args.command}: error: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print(f"audition {args.command}: interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:
        return 0
