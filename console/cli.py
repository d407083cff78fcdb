"""The `diffdeck` command: discovers the verb modules in `console.verbs` and turns errors into one line."""

from __future__ import annotations

import argparse
import importlib
import pkgutil
import sys
from types import ModuleType

from console import __version__, verbs
from console.errors import DiffdeckError


def _verb_modules() -> list[ModuleType]:
    modules = [importlib.import_module(f"{verbs.__name__}.{info.name}") for info in pkgutil.iter_modules(verbs.__path__)]
    return sorted(modules, key=lambda module: module.ORDER)


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="diffdeck",
        description="Bring up, bench-test and drive differential-drive robots. "
        "A software stop is not a safety function: keep a hardware emergency stop within reach.",
    )
    parser.add_argument("--version", action="version", version=f"diffdeck {__version__}")
    sub = parser.add_subparsers(dest="verb", metavar="VERB", required=True)
    for module in _verb_modules():
        verb_parser = sub.add_parser(module.NAME, help=module.HELP, description=module.HELP)
        module.add_arguments(verb_parser)
        verb_parser.set_defaults(run=module.run)
    return parser


def main(argv: list[str] | None = None) -> int:
    args = build_parser().parse_args(argv)
    try:
        return int(args.run(args))
    except DiffdeckError as error:
        print(f"diffdeck: {error}", file=sys.stderr)
        return error.exit_code
    except KeyboardInterrupt:
        print("diffdeck: interrupted", file=sys.stderr)
        return 130
