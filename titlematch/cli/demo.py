"""``titlematch demo``: a coding office's year, end to end, on invented data.

The Lakeshore Regional Statistics Office (fictional) has three past years of coded job
titles, a gold sample of the new year coded by experts (with the production codes beside
them), the new year to code, a business register and the new year's establishments.
The demo runs every command an office would run and prints where each result is.
"""
from __future__ import annotations

import argparse
import time
from pathlib import Path

ORDER = 5


def add_parser(subparsers) -> argparse.ArgumentParser:
    p = subparsers.add_parser("demo", help="run a whole coding year on bundled invented data",
                              description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("--out", default="titlematch-demo", metavar="DIR", help="where to write (default ./titlematch-demo)")
    p.add_argument("--small", action="store_true", help="a reduced scenario (for tests and a first look)")
    p.add_argument("--seed", type=int, default=7)
    return p


def run(args) -> int:
    from . import main
    from ..datasets.scenario import write_scenario

    out = Path(args.out)
    data = out / "data"
    quiet = ["--quiet"] if args.quiet else []
    start = time.perf_counter()
    files = write_scenario(data, seed=args.seed, small=args.small)
    print(f"invented scenario written to {data} ({len(files)} files)")
    past = [str(data / f"past_{y}.csv") for y in (2022, 2023, 2024)]
    # last year's titles without their codes, to code again for the drift report (a file's own code
    # column is never overwritten by the machine's)
    from ..io import read_table, write_table
    last_titles = data / "past_2024_titles.csv"
    write_table(read_table(past[-1]).drop(columns="code"), last_titles)
    steps = [
        ("build the title dictionary from three past years",
         ["dictionary", *past, "--classification", str(data / "classification.csv"), "--out", str(out / "dictionary")]),
        ("learn calibrated confidences; the office accepts automatically only where the gold sample "
         "shows >= 98% right",
         ["calibrate", "--dictionary", str(out / "dictionary"), "--gold", str(data / "gold_2025.csv"),
          "--min-accuracy", "0.98", "--out", str(out / "model")]),
        ("code the new year",
         ["code", str(data / "new_2025.csv"), "--dictionary", str(out / "dictionary"), "--model", str(out / "model"),
          "--out", str(out / "coded_2025.csv")]),
        ("code last year again, for the drift report",
         ["code", str(last_titles), "--dictionary", str(out / "dictionary"), "--model", str(out / "model"),
          "--out", str(out / "coded_2024.csv")]),
        ("write the referral queue for coders",
         ["queue", str(out / "coded_2025.csv"), "--dictionary", str(out / "dictionary"),
          "--out", str(out / "referral_queue_2025.xlsx")]),
        ("list manual codes the model contradicts",
         ["disagreements", str(data / "gold_2025.csv"), "--dictionary", str(out / "dictionary"), "--model",
          str(out / "model"), "--manual-col", "manual_code", "--output-prefix", "machine_",
          "--out", str(out / "disagreements_2025.csv")]),
        ("evaluate against the gold sample",
         ["evaluate", str(out / "coded_2025.csv"), "--gold", str(data / "gold_2025.csv"), "--out", str(out / "evaluation")]),
        ("compare last year with this year",
         ["drift", str(out / "coded_2024.csv"), str(out / "coded_2025.csv"), "--dictionary", str(out / "dictionary"),
          "--out", str(out / "drift")]),
        ("build the register index once",
         ["register", str(data / "register.csv"), "--out", str(out / "register_index")]),
        ("link the new year's establishments to the register",
         ["link", str(data / "establishments_2025.csv"), "--register", str(out / "register_index"),
          "--out", str(out / "linked_2025.csv")]),
    ]
    for n, (what, argv) in enumerate(steps, 1):
        print(f"\n[{n}/{len(steps)}] {what}: titlematch {' '.join(argv[:1])} ...")
        code = main(argv + quiet)
        if code not in (0, None):
            print(f"titlematch demo: step {n} failed with exit code {code}")
            return code
    print(f"\nDone in {time.perf_counter() - start:.0f} s. Results:")
    for label, path in [("coded new year", "coded_2025.csv"), ("referral queue", "referral_queue_2025.xlsx"),
                        ("evaluation report", "evaluation/report.html"), ("drift report", "drift/drift.html"),
                        ("automation vs quality", "model/automation_curve.png"),
                        ("reliability diagram", "model/reliability.png"),
                        ("confidence model report", "model/report.json"),
                        ("manual codes to review", "disagreements_2025.csv"),
                        ("linked establishments", "linked_2025.csv")]:
        print(f"  {label:26s} {out / path}")
    print("Invented data: the office, titles, employers and addresses are fictional.")
    _print_review_command(out)
    return 0


def _print_review_command(out: Path) -> None:
    """The coders' side: how many records went to coders, and the command that opens their page."""
    import shlex

    from ..io import read_table

    coded = read_table(out / "coded_2025.csv", required=("decision", "title_normalized"))
    referred = coded["decision"] == "refer"
    titles = coded.loc[referred, "title_normalized"].nunique()
    print(f"\nReferred to coders: {int(referred.sum()):,} of {len(coded):,} records "
          f"({referred.mean():.0%}) in {titles:,} distinct titles. Code them on a local page "
          f"(pip install 'titlematch[review]'):")
    argv = ["titlematch", "review", out / "coded_2025.csv", "--dictionary", out / "dictionary",
            "--model", out / "model", "--decisions", out / "decisions_2025.jsonl", "--coder", "YOUR_NAME"]
    print("  " + " ".join(shlex.quote(str(a)) for a in argv))
