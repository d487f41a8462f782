"""The ``titlematch`` command. Each sub-command is a module in this package exposing
``ORDER`` (its place in ``--help``), ``add_parser(subparsers)`` and ``run(args) -> int``;
a new command is a new file, found here without editing this one.

Start-up rule: building the parser imports every command module, so a command module imports
only the standard library at its top and the library (pandas, scikit-learn, titlematch's
stages) inside ``run``. ``titlematch --help`` then answers without loading any of it
(``tests/test_cli_start.py`` checks; ``benchmarks/bench_start.py`` measures)."""
from __future__ import annotations

import argparse
import importlib
import logging
import pkgutil
import sys

from .. import __version__


def _commands():
    modules = []
    for info in pkgutil.iter_modules(__path__):
        if info.name.startswith("_"):
            continue
        module = importlib.import_module(f"{__name__}.{info.name}")
        if hasattr(module, "add_parser"):
            modules.append(module)
    return sorted(modules, key=lambda m: (getattr(m, "ORDER", 100), m.__name__))


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="titlematch",
        description="Code job titles to occupations and link establishments to a business register.")
    parser.add_argument("--version", action="version", version=f"titlematch {__version__}")
    subparsers = parser.add_subparsers(dest="command", metavar="COMMAND")
    for module in _commands():
        sub = module.add_parser(subparsers)
        sub.add_argument("--quiet", action="store_true", help="no progress bars")
        sub.add_argument("--verbose", action="store_true", help="log what is decided (encodings, counts)")
        sub.set_defaults(_run=module.run)
    return parser


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    if not getattr(args, "_run", None):
        parser.print_help()
        return 2
    logging.basicConfig(level=logging.INFO if args.verbose else logging.WARNING,
                        format="titlematch: %(message)s")
    # Imported only now: --help and --version have exited already, and every command loads these anyway.
    from ..io import InputError
    from ..io.artefact import ArtefactError
    try:
        return int(args._run(args) or 0)
    except (InputError, ArtefactError) as exc:
        print(f"titlematch {args.command}: error: {exc}", file=sys.stderr)
        return 2


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
