"""Benchmark: how long each ``titlematch`` command takes to start, against the bare interpreter
and against ``python -c "import pandas"``.

Every case is a fresh process (``python -m titlematch ...`` with this tree on ``PYTHONPATH``), run
``--repeat`` times; the median wall time is reported, with its ratio to the two peers measured in
the same run:

- ``--version`` and ``--help``: should cost about what the interpreter itself costs (target < 0.3 s);
- ``CMD --help`` for every command: the same, since building the parser imports no library;
- ``CMD`` started on a missing input file: the imports the command's ``run`` needs, then an error
  message. That is the least a real run pays before its first row; it should be close to the
  cost of importing what the command uses (pandas plus its stage), not the whole library.

    python benchmarks/bench_start.py                 # 5 runs per case
    python benchmarks/bench_start.py --repeat 9
"""
from __future__ import annotations

import argparse
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
from _common import table  # noqa: E402

ROOT = Path(__file__).resolve().parent.parent

# A command started on a file that does not exist: it imports what it needs, then says so.
FAILING_STARTS = {
    "normalize": ["normalize", "{missing}", "--kind", "title", "--column", "title", "--out", "{out}.csv"],
    "code": ["code", "{missing}", "--dictionary", "{missing}", "--out", "{out}.csv"],
    "register": ["register", "{missing}", "--out", "{out}"],
    "link": ["link", "{missing}", "--register", "{missing}", "--out", "{out}.csv"],
    "evaluate": ["evaluate", "{missing}", "--gold", "{missing}", "--out", "{out}"],
}


def wall(argv: list[str], env: dict) -> float:
    start = time.perf_counter()
    subprocess.run(argv, env=env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, check=False)
    return time.perf_counter() - start


def median_wall(argv: list[str], env: dict, repeat: int) -> float:
    return statistics.median(wall(argv, env) for _ in range(repeat))


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--repeat", type=int, default=5)
    args = parser.parse_args(argv)
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    py = [sys.executable]
    tm = py + ["-m", "titlematch"]
    bare = median_wall(py + ["-c", "pass"], env, args.repeat)
    pandas = median_wall(py + ["-c", "import pandas"], env, args.repeat)
    rows = [("peer: python -c pass", f"{bare:.3f}", "1.00", f"{bare / pandas:.2f}"),
            ("peer: python -c 'import pandas'", f"{pandas:.3f}", f"{pandas / bare:.2f}", "1.00")]

    def add(label: str, command: list[str]) -> None:
        t = median_wall(command, env, args.repeat)
        rows.append((label, f"{t:.3f}", f"{t / bare:.2f}", f"{t / pandas:.2f}"))

    add("titlematch --version", tm + ["--version"])
    add("titlematch --help", tm + ["--help"])
    commands = sorted(p.stem for p in (ROOT / "titlematch" / "cli").glob("*.py") if not p.stem.startswith("_"))
    for command in commands:
        add(f"titlematch {command} --help", tm + [command, "--help"])
    with tempfile.TemporaryDirectory() as tmp:
        missing, out = str(Path(tmp) / "missing.csv"), str(Path(tmp) / "out")
        for command, template in FAILING_STARTS.items():
            add(f"titlematch {command} (imports, then 'no such file')",
                tm + [a.format(missing=missing, out=out) for a in template])
    print(f"median of {args.repeat} runs, seconds; ratios to the bare interpreter and to importing pandas")
    print(table(rows, ("case", "median s", "x bare python", "x import pandas")))
    return 0


if __name__ == "__main__":
    sys.exit(main())
