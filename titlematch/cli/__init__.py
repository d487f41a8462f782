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
import os
import pkgutil
import sys

# Numpy asks the kernel for 2 MB pages for every large array unless told not to. On virtual machines
# whose free memory is handed back to the host, each fresh 2 MB page then costs milliseconds: an
# 80 MB temporary took 1.4 s to touch, against 0.09 s in 4 kB pages (benchmarks/RESULTS.md, "Memory
# pages"). Set before numpy is imported; a value the user set is kept.
os.environ.setdefault("NUMPY_MADVISE_HUGEPAGE", "0")

from .. import __version__

log = logging.getLogger("titlematch")
OUTPUT_OPTIONS = ("out", "features", "run_dir")  # what a command writes; every other existing path is read
_NOT_PATHS = ("command", "encoding", "engine", "scheduler", "kind", "fields", "register_fields", "record_id")
MAX_MESSAGE = 600  # characters of an error message shown; a message is one line


def _commands():
    modules = []
    for info in pkgutil.iter_modules(__path__):
        if info.name.startswith("_"):
            continue
        module = importlib.import_module(f"{__name__}.{info.name}")
        if hasattr(module, "add_parser"):
            modules.append(module)
    return sorted(modules, key=lambda m: (getattr(m, "ORDER", 100), m.__name__))


class _Parser(argparse.ArgumentParser):
    """Option errors as one line naming the option, not the whole usage text."""

    def error(self, message: str):
        self.exit(2, f"{self.prog}: error: {message} (see '{self.prog} --help')\n")


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(
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
        _refuse_overwrites(args)
        return int(args._run(args) or 0)
    except (InputError, ArtefactError) as exc:
        return _fail(args, str(exc))
    except OSError as exc:  # unwritable or vanished paths, a full disk: name the file
        where = f"{exc.filename}: " if exc.filename else ""
        return _fail(args, f"{where}{exc.strerror or exc}")
    except MemoryError:
        return _fail(args, "out of memory; try a smaller --chunk-rows where the command has it")
    except KeyboardInterrupt:
        print(f"titlematch {args.command}: interrupted", file=sys.stderr)
        return 130
    except Exception as exc:  # a user never sees a traceback; --verbose logs it for a bug report
        log.debug("traceback", exc_info=True)
        if args.verbose:
            import traceback
            traceback.print_exc()
        return _fail(args, f"unexpected {type(exc).__name__}: {exc} (a bug: please report it with the "
                           "command and --verbose output)", status=1)


def _fail(args, message: str, status: int = 2) -> int:
    """Print ``message`` as one line, naming the command (long messages are cut)."""
    text = " ".join(str(message).split())
    if len(text) > MAX_MESSAGE:
        text = text[:MAX_MESSAGE - 3] + "..."
    print(f"titlematch {args.command}: error: {text}", file=sys.stderr)
    return status


def _refuse_overwrites(args) -> None:
    """The one check for every command: nothing it writes may be a file it reads."""
    import os

    from ..io import refuse_overwrite, rejects_path_for

    inputs = []
    for name, value in vars(args).items():
        if name.startswith("_") or name in OUTPUT_OPTIONS or name in _NOT_PATHS or name.endswith("_col"):
            continue
        for item in value if isinstance(value, list) else [value]:
            if isinstance(item, str) and item and os.path.exists(item):
                inputs.append(item)
    for name in OUTPUT_OPTIONS:
        value = getattr(args, name, None)
        if isinstance(value, str) and value:
            option = "--" + name.replace("_", "-")
            refuse_overwrite(value, inputs, option)
            if name == "out" and os.path.splitext(value)[1]:
                refuse_overwrite(rejects_path_for(value), inputs, "the rejects file of " + option)


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
