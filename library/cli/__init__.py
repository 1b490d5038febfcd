"""The `olibra` command: parse arguments, call the core, print.

Every problem caused by the user's input is one line on stderr and exit code 2;
an interrupted command exits 130; anything else is a bug and says so in one
line (OLIBRA_DEBUG=1 shows the traceback).

Building the parser is light: `COMMANDS` lists every command with its one-line
help and the module that adds its options, and that module is imported only
when its command is chosen, so `olibra --help` loads no chemistry, database or
web library and each command pays only for what it uses.
"""

from __future__ import annotations

import argparse
import importlib
import os
import sys
import traceback

from library.errors import OlibraError, Remedy

EXIT_USER_ERROR = 2
# What the command line suggests for each remedy the core names (the web has its own hints).
HINTS = {
    Remedy.COMPUTE_RECORDS: "run `olibra compute all`",
    Remedy.INIT_CATALOGUE: "run `olibra init`",
    Remedy.FIND_MATERIAL: "`olibra list` shows names and ids",
    Remedy.ADD_MATERIAL: "add it with `olibra add` (or search with --store-as NAME)",
    Remedy.VOCABULARY: "see `olibra vocabulary list`, add terms with `olibra vocabulary add`",
    Remedy.IMPORT_OBSERVATIONS: "import it with `olibra observations import`",
    Remedy.LIST_USERS: "see `olibra user list`",
}
EXIT_INTERRUPTED = 130
EXIT_BUG = 70

# Every command, in the order `olibra --help` lists them: the module of library/cli whose
# register(commands) adds its options and handler, and the one-line help.
COMMANDS: dict[str, tuple[str, str]] = {
    "init": ("catalogue_commands", "create or upgrade the catalogue and load the odor vocabulary"),
    "add": ("catalogue_commands", "add one material from a SMILES, molfile or InChI"),
    "show": ("catalogue_commands", "show one material by id, name, synonym, CAS RN or InChIKey"),
    "list": ("catalogue_commands", "list materials"),
    "import": ("catalogue_commands", "import materials from a CSV or SDF file"),
    "export": ("catalogue_commands", "export the catalogue as CSV, SDF or JSON"),
    "vocabulary": ("catalogue_commands", "list or extend the odor descriptor vocabulary"),
    "status": ("catalogue_commands", "retire, reactivate, restrict or unrestrict a material"),
    "components": ("catalogue_commands", "record or list the components of a mixture (kept out of its substitutes)"),
    "restriction": ("restriction_commands", "add, list or remove a material's recorded restriction entries"),
    "compute": ("compute_commands", "compute shape, vibration and/or tunnelling records (missing or stale ones by default)"),
    "compute-status": ("compute_commands", "count current, stale and missing computed records"),
    "search": ("search_commands", "rank substitutes for a material or a new structure"),
    "compare": ("search_commands", "every metric for a pair, with overlay and band matching"),
    "disagreements": ("search_commands", "pairs where shape and vibration disagree"),
    "metrics": ("search_commands", "the similarity metrics olibra scores, with their definitions"),
    "groups": ("search_commands", "the functional groups and base presets the search filters use"),
    "spectrum": ("search_commands", "draw a material's vibrational spectrum (sticks and smoothed)"),
    "receptors": ("receptor_commands", "activation profile over a virtual receptor panel (tunnelling model)"),
    "flag": ("search_commands", "flag a pair of materials"),
    "flags": ("search_commands", "list pair flags"),
    "observations": ("search_commands", "import measured data (panel profiles, receptor responses)"),
    "scorecard": ("search_commands", "how well each metric predicts observed similarity"),
    "pairs": ("pair_commands", "pair classes (enantiomers, isotopologues, E/Z, functional-group swaps) and their tests"),
    "calibrate": ("calibrate_commands", "learn blend weights from observed similarity with grouped cross-validation"),
    "user": ("web_commands", "web interface accounts: add, list, password, role, disable, enable, remove"),
    "serve": ("web_commands", "serve the web interface (waitress; 127.0.0.1:8150 by default)"),
    "demo": ("demo_commands", "build a demo catalogue from the seed files and compute its records"),
    "bench": ("bench_commands", "print performance figures (compute, ensembles, shape, vibration, search, web, load, startup)"),
}
# One module per area; each has register(commands) adding the options of its commands.
COMMAND_MODULES = list(dict.fromkeys(module for module, _ in COMMANDS.values()))


class ArgumentParser(argparse.ArgumentParser):
    """argparse that reports errors in olibra's one-line style."""

    def error(self, message: str):
        self.exit(EXIT_USER_ERROR, f"olibra: error: {message} (see `{self.prog} --help`)\n")


class LazyCommands(argparse._SubParsersAction):
    """Subcommands declared with their help when the parser is built; a command's options are added by
    its module's register(commands) only when argparse reaches that command (or `load_all` is called)."""

    def __init__(self, *args, **kwargs):
        super().__init__(*args, **kwargs)
        self._declared: dict[str, argparse.ArgumentParser] = {}
        self._registered: set[str] = set()
        self._loaded: set[str] = set()

    def declare(self, name: str, help: str) -> None:
        self._declared[name] = super().add_parser(name, help=help)

    def add_parser(self, name: str, **kwargs) -> argparse.ArgumentParser:
        """The declared parser of `name`, for register(commands) to add options to."""
        if name not in self._declared or kwargs:
            raise ValueError(f"command {name!r} must be declared in COMMANDS of library/cli/__init__.py, "
                             "with its help there (a bug in olibra)")
        self._registered.add(name)
        return self._declared[name]

    def load(self, module_name: str) -> None:
        if module_name in self._loaded:
            return
        importlib.import_module(f"library.cli.{module_name}").register(self)
        self._loaded.add(module_name)
        missing = [name for name, (module, _) in COMMANDS.items()
                   if module == module_name and name not in self._registered]
        if missing:
            raise ValueError(f"library.cli.{module_name} does not register {', '.join(missing)} (a bug in olibra)")

    def load_all(self) -> None:
        for module_name in COMMAND_MODULES:
            self.load(module_name)

    def __call__(self, parser, namespace, values, option_string=None):
        self.load(COMMANDS[values[0]][0])
        super().__call__(parser, namespace, values, option_string)


def build_parser(*, complete: bool = False) -> argparse.ArgumentParser:
    """The `olibra` parser; `complete` registers every command's options now instead of on use."""
    parser = ArgumentParser(
        prog="olibra",
        description="Odorant library database with shape and vibration similarity search.")
    parser.add_argument("--db", metavar="URL",
                        help="catalogue database URL (default: $OLIBRA_DB, else a SQLite file in "
                             "your data directory)")
    parser.add_argument("--here", action="store_true",
                        help="use ./catalogue.sqlite in the working directory as the default catalogue")
    parser.add_argument("--actor", metavar="NAME",
                        help="attribute this command's changes to NAME (default: $OLIBRA_ACTOR, else your "
                             "login name)")
    parser.register("action", "parsers", LazyCommands)
    commands = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=ArgumentParser)
    commands.required = True
    for name, (_, help_text) in COMMANDS.items():
        commands.declare(name, help_text)
    if complete:
        commands.load_all()
    return parser


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    if args.actor and args.actor.strip():
        os.environ["OLIBRA_ACTOR"] = args.actor.strip()  # read by curation.current_actor (this process only)
    try:
        return int(args.handler(args) or 0)
    except OlibraError as exc:
        print(error_line(exc), file=sys.stderr)
        return EXIT_USER_ERROR
    except KeyboardInterrupt:
        print("olibra: interrupted; nothing half-written was kept", file=sys.stderr)
        return EXIT_INTERRUPTED
    except BrokenPipeError:
        return 0
    except Exception as exc:  # noqa: BLE001 - last-resort guard
        return _unexpected(exc)


def error_line(exc: OlibraError) -> str:
    """The one line the command line prints for a user error: the message and, if any, the hint."""
    hint = HINTS.get(exc.remedy) if exc.remedy else None
    return f"olibra: error: {exc}" + (f" ({hint})" if hint else "")


def _unexpected(exc: Exception) -> int:
    """A database the user pointed at is a user problem; anything else is a bug in olibra."""
    from sqlalchemy.exc import OperationalError  # imported only when something went wrong

    if isinstance(exc, OperationalError):
        from library.catalogue.database import busy_message, is_busy

        if is_busy(exc):
            print(f"olibra: error: {busy_message()}", file=sys.stderr)
        else:
            print(f"olibra: error: database problem: {str(exc.orig).strip().splitlines()[0]}", file=sys.stderr)
        return EXIT_USER_ERROR
    if os.environ.get("OLIBRA_DEBUG"):
        traceback.print_exc()
    print(f"olibra: internal error ({type(exc).__name__}: {exc}); this is a bug in olibra; "
          "rerun with OLIBRA_DEBUG=1 to see the traceback", file=sys.stderr)
    return EXIT_BUG


if __name__ == "__main__":
    sys.exit(main())
