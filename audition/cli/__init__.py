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
    """Run one command; its exit status (130 or 143 when SIGINT or SIGTERM stopped it).

    SIGINT and SIGTERM are taken from the start (:mod:`audition.interrupt`): recorded
    at once, raised where it is safe, and never lost, even when one lands during the
    imports or inside a library's callback. A signal that lands while a command puts
    its finished files in place is acted on right after: the files are complete and
    kept, and the exit status still says the command was stopped.
    """
    from audition import interrupt

    interrupt.install()
    try:
        return _main(argv)
    finally:
        if argv is None:
            # the process ends here: a signal from now on is too late to stop anything, and the
            # default handlers would print a traceback at the exit
            interrupt.shielded().__enter__()
            if interrupt.received() is not None:
                _keep_exit_status()
        else:  # called from Python (tests): give the caller its handlers back
            interrupt.uninstall()


def _keep_exit_status() -> None:
    """Let the status main() returns stand once a signal was handled.

    CPython notes a KeyboardInterrupt that once passed through code it ran from C
    (``_Py_UnhandledKeyboardInterrupt``) and then ends the process by SIGINT, whatever
    status was chosen: a SIGTERM would show as -2 instead of 143 (seen in benchmarks/faults.py).
    """
    try:
        import ctypes

        ctypes.c_int.in_dll(ctypes.pythonapi, "_Py_UnhandledKeyboardInterrupt").value = 0
    except (ImportError, ValueError, AttributeError, OSError):
        pass  # another Python: its own exit rules apply


def _interrupted(command: str | None, kept: bool = False) -> int:
    from audition import interrupt

    name = interrupt.signal_name() or "SIGINT"
    what = f"audition {command}" if command else "audition"
    note = " after its files were complete and in place (they were kept)" if kept else ""
    print(f"{what}: interrupted by {name}{note}", file=sys.stderr)
    return interrupt.exit_status() or 130


def _main(argv) -> int:
    from audition import interrupt

    try:
        parser = build_parser()
        args = parser.parse_args(argv)
        # the command as given, for the sidecar record (issue 15)
        args.command_line = ["audition", *(sys.argv[1:] if argv is None else argv)]
        interrupt.check()
    except KeyboardInterrupt:
        return _interrupted(None)
    if args.command is None:
        parser.print_help()
        return 2
    try:
        status = int(args.run(args) or 0)
    except AuditionError as exc:
        if interrupt.received() is not None:
            # a failure the interrupt itself caused (a read cut short...): the interrupt is the news
            return _interrupted(args.command)
        print(f"audition {args.command}: error: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        return _interrupted(args.command)
    except BrokenPipeError:
        return 0
    with interrupt.shielded(raise_at_end=False):
        if interrupt.received() is not None:
            # recorded but not raised: it came while the command committed its files, or an
            # exception carrying it was lost in a callback after the last point that checks
            return _interrupted(args.command, kept=status == 0)
    return status
