"""The command line starts without loading the heavy libraries (issue 12, fast start).

Building the parser imports every command module; each must keep pandas, NumPy, scikit-learn
and the library's stages for ``run``. Checked in a fresh interpreter, through ``sys.modules``
(no timing here: start-up times live in benchmarks/bench_start.py).
"""
from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import titlematch
from titlematch.cli import main

HEAVY = ("pandas", "numpy", "sklearn", "scipy", "pyarrow", "recordlinkage", "rapidfuzz", "jellyfish",
         "matplotlib", "dask")
ROOT = str(Path(titlematch.__file__).resolve().parent.parent)


def _loaded_after(code: str, *argv: str) -> dict:
    probe = (f"import sys, json\n{code}\n"
             "print(json.dumps(sorted({m.split('.')[0] for m in sys.modules}) + "
             "sorted(m for m in sys.modules if m.startswith('titlematch.'))))")
    env = dict(os.environ, PYTHONPATH=ROOT)
    done = subprocess.run([sys.executable, "-c", probe, *argv], capture_output=True, text=True, env=env,
                          check=True)
    return json.loads(done.stdout.strip().splitlines()[-1])


def test_building_the_parser_loads_no_heavy_library():
    loaded = _loaded_after("import titlematch.cli as cli\nparser = cli.build_parser()")
    assert not [m for m in HEAVY if m in loaded], loaded
    # every command was discovered, yet none of the library's stages came with it
    assert "titlematch.cli.link" in loaded and "titlematch.cli.register" in loaded
    stages = [m for m in loaded if m.startswith("titlematch.") and not m.startswith("titlematch.cli")
              and m != "titlematch.coding.levels" and m != "titlematch.coding"]
    assert stages == [], stages


def test_version_and_help_load_no_heavy_library():
    for flag in ("--version", "--help"):
        loaded = _loaded_after("import titlematch.cli as cli\n"
                               "try:\n    cli.main(sys.argv[1:])\nexcept SystemExit:\n    pass", flag)
        assert not [m for m in HEAVY if m in loaded], (flag, loaded)


def test_every_command_still_answers_help(capsys):
    # The lazy imports must not break a command's own --help (argparse exits with 0 after printing).
    parser_commands = ["normalize", "dictionary", "calibrate", "code", "queue", "feedback", "register", "link",
                       "disagreements", "evaluate", "drift", "demo"]
    for command in parser_commands:
        try:
            main([command, "--help"])
        except SystemExit as exc:
            assert exc.code == 0, command
        assert command in capsys.readouterr().out
