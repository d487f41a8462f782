"""Benchmark: the command line at register scale, from files, with each command's peak memory.

The scenario's generator (``make_register_scenario``) writes the register and the records as
Parquet files in a process of its own (so its frames are not counted); then, each in a fresh
process as a user runs them:

- ``titlematch register`` (the index built from the register read in chunks) and
- ``titlematch link`` on the index, local engine, and with ``--dask`` the same command with the
  Dask engine on a local cluster of 2 single-threaded workers (outputs compared byte for byte),

each timed, and its peak memory sampled every half second over the whole process tree (resident set
of the command plus the unique set of each child: forked workers, Dask workers). Scored on links
(record, register id): precision, recall, F1, and the precision of accepted records alone.

    python benchmarks/bench_link_scale.py --dir /tmp/scale --register-rows 3000000 --new 300000 \\
        --blocking regional --dask
"""
from __future__ import annotations

import argparse
import hashlib
import os
import subprocess
import sys
import time
from pathlib import Path

import pandas as pd

sys.path.insert(0, str(Path(__file__).parent))
from _common import TreeMemory  # noqa: E402

ROOT = str(Path(__file__).resolve().parent.parent)


def write_files(directory: Path, register_rows: int, new: int, seed: int) -> None:
    from titlematch.datasets.scenario import make_register_scenario
    start = time.perf_counter()
    data = make_register_scenario(seed=seed, register_rows=register_rows, new_records=new)
    directory.mkdir(parents=True, exist_ok=True)
    data["register"].to_parquet(directory / "register.parquet", index=False, row_group_size=200_000)
    data["new"].to_parquet(directory / "new.parquet", index=False, row_group_size=50_000)
    data["truth"].fillna("").to_parquet(directory / "truth.parquet", index=False)
    print(f"scenario written: register {len(data['register']):,} rows, {len(data['new']):,} records, "
          f"{time.perf_counter() - start:.0f} s", flush=True)


def command(args: list[str], env: dict | None = None) -> tuple[float, float]:
    """Run ``python -m titlematch ARGS``; (wall seconds, peak MB of its process tree)."""
    import psutil
    own = psutil.Process().memory_info().rss  # this script's own share, left out
    memory = TreeMemory().__enter__()
    start = time.perf_counter()
    done = subprocess.run([sys.executable, "-m", "titlematch", *args], env=env, capture_output=True, text=True)
    wall = time.perf_counter() - start
    memory.__exit__()
    if done.returncode != 0:
        raise SystemExit(f"titlematch {' '.join(args)} failed ({done.returncode}):\n{done.stderr[-3000:]}")
    print(done.stdout.strip(), flush=True)
    return wall, memory.peak_mb - own / 2 ** 20


def score(linked: pd.DataFrame, truth: pd.DataFrame) -> dict:
    truth = truth[truth["record_id"].isin(linked["record_id"])]  # the records linked (all, or --records)
    expected = dict(zip(truth["record_id"], truth["register_id"]))
    n_true = sum(1 for v in expected.values() if v)
    out = {}
    for name, rows in (("all", linked["decision"] != "no-match"), ("accepted", linked["decision"] == "accept")):
        chosen = linked[rows]
        tp = int((chosen["record_id"].map(expected) == chosen["register_id"]).sum())
        precision = tp / len(chosen) if len(chosen) else 0.0
        recall = tp / n_true if n_true else 0.0
        out[name] = {"links": len(chosen), "precision": precision, "recall": recall,
                     "f1": 2 * precision * recall / (precision + recall) if tp else 0.0}
    out["referred"] = int((linked["decision"] == "refer").sum())
    return out


def report(head: str, output: Path, truth: pd.DataFrame) -> None:
    """Print a link's line: ``head``, its scores and the output file's SHA-256 (runs compare by it)."""
    result = score(pd.read_parquet(output), truth)
    a, acc = result["all"], result["accepted"]
    digest = hashlib.sha256(output.read_bytes()).hexdigest()
    print(f"{head}; F1 {a['f1']:.4f} (precision {a['precision']:.4f}, recall {a['recall']:.4f}); accepted "
          f"precision {acc['precision']:.4f} on {acc['links']:,}, referred {result['referred']:,}; output SHA-256 "
          f"{digest[:16]}; load average {os.getloadavg()[0]:.1f}", flush=True)


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--dir", required=True, help="working directory (files are reused when present)")
    parser.add_argument("--register-rows", type=int, default=1_000_000)
    parser.add_argument("--new", type=int, default=100_000)
    parser.add_argument("--seed", type=int, default=0)
    parser.add_argument("--partition-rows", type=int, default=1_000_000)
    parser.add_argument("--chunk-rows", type=int, default=50_000, help="records per chunk of 'link'")
    parser.add_argument("--blocking", choices=("default", "regional"), default="regional")
    parser.add_argument("--workers", type=int, default=-1)
    parser.add_argument("--cache-rows", type=int, default=None, help="'link --cache-rows' (default: the command's)")
    parser.add_argument("--dask", action="store_true", help="also link with the Dask engine, 2 workers")
    parser.add_argument("--skip-register", action="store_true", help="reuse the index in --dir")
    parser.add_argument("--skip-local", action="store_true",
                        help="no local-engine link (with --dask: compared with local.parquet in --dir if there)")
    parser.add_argument("--records", type=int, default=None,
                        help="link only the first N records of the scenario's (written as new_N.parquet)")
    args = parser.parse_args(argv)
    work = Path(args.dir)
    env = dict(os.environ, PYTHONPATH=ROOT + os.pathsep + os.environ.get("PYTHONPATH", ""))
    if not (work / "register.parquet").exists():
        done = subprocess.run([sys.executable, "-c", "import sys; sys.path.insert(0, sys.argv[1]); "
                               "import bench_link_scale as b; from pathlib import Path; "
                               "b.write_files(Path(sys.argv[2]), *map(int, sys.argv[3:]))",
                               str(Path(__file__).parent), str(work), str(args.register_rows), str(args.new),
                               str(args.seed)], env=env)
        if done.returncode:
            return done.returncode
    rows = pd.read_parquet(work / "register.parquet", columns=["register_id"]).shape[0]
    truth = pd.read_parquet(work / "truth.parquet")
    print(f"register {rows:,} rows, {len(truth):,} records ({int((truth['register_id'] != '').sum()):,} on "
          f"the register); {os.cpu_count()} cores; load average {os.getloadavg()[0]:.1f}", flush=True)
    common = ["--workers", str(args.workers), "--quiet"]
    if not args.skip_register:
        wall, peak = command(["register", str(work / "register.parquet"), "--out", str(work / "index"),
                              "--partition-rows", str(args.partition_rows), *common], env)
        print(f"register: {wall:.0f} s, peak {peak:,.0f} MB ({peak * 2 ** 20 / rows:,.0f} bytes per register "
              f"row); {rows / wall:,.0f} rows/s; load average {os.getloadavg()[0]:.1f}", flush=True)
    records = work / "new.parquet"
    if args.records:
        records = work / f"new_{args.records}.parquet"
        pd.read_parquet(work / "new.parquet").head(args.records).to_parquet(records, index=False, row_group_size=50_000)
        truth = truth[truth["record_id"].isin(pd.read_parquet(records, columns=["record_id"])["record_id"])]
    link = ["link", str(records), "--register", str(work / "index"), "--blocking", args.blocking,
            "--chunk-rows", str(args.chunk_rows), "--restart", *common]
    if args.cache_rows:
        link += ["--cache-rows", str(args.cache_rows)]
    if not args.skip_local:
        wall, peak = command([*link, "--out", str(work / "local.parquet")], env)
        report(f"link ({args.blocking} blocking, local engine): {wall:.0f} s, peak {peak:,.0f} MB; "
               f"{len(truth) / wall:,.0f} records/s", work / "local.parquet", truth)
    if args.dask:
        import distributed
        os.environ["PYTHONPATH"] = env["PYTHONPATH"]  # the workers import the command's titlematch
        with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                      dashboard_address=None) as cluster:
            wall, peak = command([*link, "--out", str(work / "dask.parquet"), "--engine", "dask",
                                  "--scheduler", cluster.scheduler_address], env)
        local = work / "local.parquet"
        same = pd.read_parquet(work / "dask.parquet").equals(pd.read_parquet(local)) if local.exists() else "no local run"
        report(f"link with the Dask engine (2 workers): {wall:.0f} s, peak {peak:,.0f} MB (the command and the "
               f"cluster's workers); {len(truth) / wall:,.0f} records/s; output identical to the local engine's: "
               f"{same}", work / "dask.parquet", truth)
    return 0


if __name__ == "__main__":
    sys.exit(main())
