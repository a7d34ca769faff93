"""The ``probelog`` command line: a switchboard over ``tui.commands``."""

from __future__ import annotations

import argparse
import importlib
import sys

# Order is the order shown in --help. Names are fixed: other tooling calls them.
COMMANDS = ("demo", "run", "check", "lines", "verify", "export", "catalog", "simbench")


class UsageError(Exception):
    """Bad input from the user: printed as one line, exit code 2."""


def _load(name: str):
    try:
        return importlib.import_module(f"probelog.tui.commands.{name}")
    except ModuleNotFoundError as exc:
        if exc.name != f"probelog.tui.commands.{name}":
            raise
        return None


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="probelog",
        description="Guided, checked and journaled on-wafer S-parameter probing.",
    )
    parser.add_argument("--version", action="version", version=_version())
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for name in COMMANDS:
        module = _load(name)
        help_line = getattr(module, "HELP", "not available in this build")
        p = sub.add_parser(name, help=help_line, description=help_line)
        if module is not None:
            module.add_arguments(p)
        p.set_defaults(_module=module, _name=name)
    return parser


def _version() -> str:
    from probelog import __version__

    return f"probelog {__version__}"


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    if args.command is None:
        parser.print_help()
        return 2
    module = args._module
    if module is None:
        print(f"probelog {args._name}: not available in this build yet", file=sys.stderr)
        return 2
    try:
        return int(module.run(args) or 0)
    except UsageError as exc:
        print(f"probelog {args._name}: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print(f"probelog {args._name}: interrupted", file=sys.stderr)
        return 130


if __name__ == "__main__":
    sys.exit(main())
