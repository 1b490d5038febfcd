"""The `olibra` command: parse arguments, call the core, print.

Every problem caused by the user's input is one line on stderr and exit code 2;
an interrupted command exits 130; anything else is a bug and says so in one
line (OLIBRA_DEBUG=1 shows the traceback).
"""

from __future__ import annotations

import argparse
import importlib
import os
import sys
import traceback

from sqlalchemy.exc import OperationalError, SQLAlchemyError

from library.errors import OlibraError

EXIT_USER_ERROR = 2
EXIT_INTERRUPTED = 130
EXIT_BUG = 70


class ArgumentParser(argparse.ArgumentParser):
    """argparse that reports errors in olibra's one-line style."""

    def error(self, message: str):
        self.exit(EXIT_USER_ERROR, f"olibra: error: {message} (see `{self.prog} --help`)\n")


def build_parser() -> argparse.ArgumentParser:
    parser = ArgumentParser(
        prog="olibra",
        description="Odorant library database with shape and vibration similarity search.")
    parser.add_argument("--db", metavar="URL",
                        help="catalogue database URL (default: $OLIBRA_DB, else a SQLite file in "
                             "your data directory)")
    parser.add_argument("--here", action="store_true",
                        help="use ./catalogue.sqlite in the working directory as the default catalogue")
    commands = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=ArgumentParser)
    commands.required = True
    for module_name in COMMAND_MODULES:
        module = importlib.import_module(f"library.cli.{module_name}")
        module.register(commands)
    return parser


# One module per area; each has register(commands) adding its subcommands.
COMMAND_MODULES = ["catalogue_commands", "compute_commands", "search_commands", "web_commands", "demo_commands", "bench_commands"]


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        return int(args.handler(args) or 0)
    except OlibraError as exc:
        print(f"olibra: error: {exc}", file=sys.stderr)
        return EXIT_USER_ERROR
    except KeyboardInterrupt:
        print("olibra: interrupted; nothing half-written was kept", file=sys.stderr)
        return EXIT_INTERRUPTED
    except OperationalError as exc:
        from library.catalogue.database import busy_message, is_busy

        if is_busy(exc):
            print(f"olibra: error: {busy_message()}", file=sys.stderr)
        else:
            print(f"olibra: error: database problem: {str(exc.orig).strip().splitlines()[0]}", file=sys.stderr)
        return EXIT_USER_ERROR
    except (BrokenPipeError, SQLAlchemyError, Exception) as exc:  # noqa: B014 - last-resort guard
        if isinstance(exc, BrokenPipeError):
            return 0
        if os.environ.get("OLIBRA_DEBUG"):
            traceback.print_exc()
        print(f"olibra: internal error ({type(exc).__name__}: {exc}); this is a bug in olibra; "
              "rerun with OLIBRA_DEBUG=1 to see the traceback", file=sys.stderr)
        return EXIT_BUG


if __name__ == "__main__":
    sys.exit(main())
