"""Benchmark: streaming a big CSV through ``titlematch code`` (or the title normalizer), against
reading it whole with pandas.

With ``--step code`` (the default) the titles are coded against a dictionary built from the
invented Lakeshore scenario's three past years; ``--step normalize`` runs the title normalizer.

The input is ``--rows`` job titles drawn Zipf-like from the synthetic pool of ``bench_normalize``
(written from the O*NET-SOC 2019 titles), one CSV with an id and a title column. Each case runs in
a fresh process; the parent samples the resident memory of that process and all its children
(Dask workers included) and reports the peak, so the cases are measured the same way:

- ``pandas``: the peer, ``pandas.read_csv`` of the whole file, the same per-chunk step
  (``titlematch normalize --kind title``'s) applied to the whole frame, ``to_csv``.
- ``runner``: ``run_chunked`` with the local engine (``--chunk-rows``, default 50,000).
- ``dask-1`` / ``dask-2``: ``run_chunked`` with the Dask engine on a local cluster of 1 or 2
  single-threaded worker processes (cluster start-up is timed apart).

Rows per second are over the work itself (reading, normalizing, writing); the memory ratio is a
case's peak over the peer's. Every case must write the same bytes; the script checks it.

    python benchmarks/bench_stream.py                         # 1,000,000 and 5,000,000 rows
    python benchmarks/bench_stream.py --rows 200000           # a quick check
    python benchmarks/bench_stream.py --rows 200000 --cases pandas runner
"""
from __future__ import annotations

import argparse
import json
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import pandas as pd
import psutil

sys.path.insert(0, str(Path(__file__).resolve().parent))
from _common import table  # noqa: E402
from bench_normalize import sample_rows, title_pool  # noqa: E402

from titlematch.io import file_sha256  # noqa: E402

CASES = ("pandas", "runner", "dask-1", "dask-2")


def make_input(path: Path, rows: int, pool_size: int) -> None:
    """Write ``rows`` titles in slices, so making a 5M-row file does not itself need the memory."""
    pool = title_pool(pool_size)
    titles = sample_rows(pool, rows)
    with open(path, "w", encoding="utf-8", newline="") as handle:
        for start in range(0, rows, 500_000):
            part = titles.iloc[start:start + 500_000]
            frame = pd.DataFrame({"id": range(start + 1, start + 1 + len(part)), "title": part.to_numpy()})
            frame.to_csv(handle, index=False, header=start == 0, lineterminator="\n")


# -- one case, in a child process ---------------------------------------------------------------------
def run_case(case: str, source: Path, out: Path, chunk_rows: int, dictionary: str | None = None) -> dict:
    from titlematch.runtime.runner import run_chunked

    if dictionary:
        from titlematch.cli.code import CodeStep
        step = CodeStep(dictionary, None, "title", "context")
    else:
        from titlematch.cli.normalize import NormalizeStep
        step = NormalizeStep("title", "title", str(source))
    info: dict = {"case": case}
    if case == "pandas":
        start = time.perf_counter()
        frame = pd.read_csv(source, dtype=str, keep_default_na=False)
        step(frame).to_csv(out, index=False, lineterminator="\n")
        info["seconds"] = time.perf_counter() - start
        info["rows"] = len(frame)
        return info
    common = dict(required=["title"], options={"command": "normalize", "kind": "title", "column": "title"},
                  chunk_rows=chunk_rows, quiet=True)
    if case == "runner":
        start = time.perf_counter()
        result = run_chunked(source, out, step, **common)
    else:
        import distributed
        workers = int(case.split("-")[1])
        begin = time.perf_counter()
        cluster = distributed.LocalCluster(n_workers=workers, threads_per_worker=1, processes=True,
                                           dashboard_address=None)
        client = distributed.Client(cluster)
        info["startup_seconds"] = time.perf_counter() - begin
        start = time.perf_counter()
        result = run_chunked(source, out, step, engine="dask", scheduler=client, **common)
        info["seconds"] = time.perf_counter() - start
        client.close()
        cluster.close()
    info.setdefault("seconds", time.perf_counter() - start)
    info["rows"] = result.rows_in
    return info


# -- the parent: launch, sample memory, compare -------------------------------------------------------
def tree_rss(process: psutil.Process) -> int:
    total = 0
    for p in [process, *process.children(recursive=True)]:
        try:
            total += p.memory_info().rss
        except psutil.Error:
            pass
    return total


def measure(case: str, source: Path, out: Path, chunk_rows: int, dictionary: str | None = None) -> dict:
    command = [sys.executable, __file__, "--case", case, "--input", str(source), "--out", str(out),
               "--chunk-rows", str(chunk_rows)] + (["--dictionary", dictionary] if dictionary else [])
    child = subprocess.Popen(command, stdout=subprocess.PIPE, text=True)
    watched = psutil.Process(child.pid)
    peak = 0
    while child.poll() is None:
        peak = max(peak, tree_rss(watched))
        time.sleep(0.05)
    stdout = child.stdout.read()
    if child.returncode != 0:
        raise SystemExit(f"case {case} failed with exit code {child.returncode}")
    info = json.loads(stdout.strip().splitlines()[-1])
    info["peak_mb"] = peak / 2 ** 20
    info["sha256"] = file_sha256(out)
    return info


def report(rows: int, results: list[dict]) -> None:
    peer = next((r for r in results if r["case"] == "pandas"), None)
    lines = []
    for r in results:
        ratio = f"{r['peak_mb'] / peer['peak_mb']:.2f}" if peer else "-"
        startup = f"{r['startup_seconds']:.1f}" if "startup_seconds" in r else "-"
        lines.append((r["case"], f"{r['rows']:,}", f"{r['seconds']:.1f}", f"{r['rows'] / r['seconds']:,.0f}",
                      startup, f"{r['peak_mb']:,.0f}", ratio))
    print(f"\n{rows:,} rows")
    print(table(lines, ("case", "rows", "seconds", "rows/s", "cluster start s", "peak MB", "memory vs pandas")))
    same = {r["sha256"] for r in results}
    print("outputs identical across cases: " + ("yes" if len(same) == 1 else f"NO ({len(same)} different)"))


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rows", type=int, nargs="+", default=[1_000_000, 5_000_000],
                        help="input sizes (default 1,000,000 and 5,000,000)")
    parser.add_argument("--cases", nargs="+", choices=CASES, default=list(CASES))
    parser.add_argument("--chunk-rows", type=int, default=50_000)
    parser.add_argument("--pool", type=int, default=30_000, help="distinct titles in the pool")
    parser.add_argument("--case", choices=CASES, help=argparse.SUPPRESS)  # child mode
    parser.add_argument("--input", help=argparse.SUPPRESS)
    parser.add_argument("--out", help=argparse.SUPPRESS)
    parser.add_argument("--dictionary", help=argparse.SUPPRESS)
    parser.add_argument("--step", choices=("code", "normalize"), default="code")
    args = parser.parse_args(argv)
    if args.case:
        print(json.dumps(run_case(args.case, Path(args.input), Path(args.out), args.chunk_rows, args.dictionary)))
        return 0
    with tempfile.TemporaryDirectory(prefix="bench_stream_") as tmp:
        dictionary = None
        if args.step == "code":
            from titlematch.coding.coder import TitleCoder
            from titlematch.datasets.scenario import classification, make_title_scenario
            past = make_title_scenario(records_per_year=20_000, new_records=100, gold_records=50)["past"]
            dictionary = str(Path(tmp) / "dictionary")
            TitleCoder().fit(past, past["code"], classification=classification()).save(dictionary)
        print(f"step: {args.step}")
        for rows in args.rows:
            source = Path(tmp) / f"titles_{rows}.csv"
            make_input(source, rows, args.pool)
            results = []
            for case in args.cases:
                out = Path(tmp) / f"{case}_{rows}.csv"
                results.append(measure(case, source, out, args.chunk_rows, dictionary))
                out.unlink()
            report(rows, results)
            source.unlink()
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
