"""Write the invented Lakeshore Region demo data (survey job titles and establishments) as CSV files.

Usage::

    python demo/make_data.py --out lakeshore_data            # full sizes (about 70,000 title records)
    python demo/make_data.py --out lakeshore_data --small    # sizes for a demo of a few minutes
"""
from __future__ import annotations

import argparse
import sys
import time

from titlematch.datasets.scenario import write_scenario


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description="Write the invented Lakeshore Regional Statistics Office "
                                                 "demo data as CSV files.")
    parser.add_argument("--out", required=True, help="folder to write the CSV files to (created if missing)")
    parser.add_argument("--seed", type=int, default=7, help="random seed (default 7; the register uses seed + 4)")
    parser.add_argument("--small", action="store_true", help="small sizes for a quick demo and for tests")
    args = parser.parse_args(argv)
    started = time.perf_counter()
    paths = write_scenario(args.out, seed=args.seed, small=args.small)
    for name, path in paths.items():
        with open(path, encoding="utf-8") as handle:
            rows = sum(1 for _ in handle) - 1
        print(f"{name:32s} {rows:>8,d} rows  {path}")
    print(f"wrote {len(paths)} files in {time.perf_counter() - started:.1f} s (invented data)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
