"""``titlematch review``: a local page where coders decide referred titles from the keyboard."""
from __future__ import annotations

import argparse

ORDER = 61
LOOPBACK = ("127.0.0.1", "localhost", "::1")


def add_parser(subparsers) -> argparse.ArgumentParser:
    p = subparsers.add_parser(
        "review", help="open a local coding page for the referred titles (needs titlematch[review])",
        description="Serve a page on this machine where a coder decides the referred titles one at a time, "
                    "most records x uncertainty first, from the keyboard. Every decision is appended at once to "
                    "the decisions file (a journal that survives the server being killed); starting again on "
                    "the same files resumes. Several coders may share one queue and one decisions file, each "
                    "with their own --coder: no title is offered to two of them at once. "
                    "'titlematch feedback DECISIONS_FILE' takes the decisions into the dictionary.")
    p.add_argument("coded", metavar="CODED_OR_QUEUE", help="output of 'titlematch code', or a queue from "
                                                           "'titlematch queue'")
    p.add_argument("--dictionary", required=True, metavar="DIR", help="the dictionary the titles were coded with")
    p.add_argument("--model", metavar="DIR", help="the confidence model (shows its accept threshold)")
    p.add_argument("--decisions", required=True, metavar="FILE", help="the decisions journal (created if missing; "
                                                                       "appended to, never rewritten)")
    p.add_argument("--coder", metavar="NAME", help="who is coding (default: the login name)")
    p.add_argument("--port", type=int, default=0, metavar="N", help="port (default: a free one)")
    p.add_argument("--host", default="127.0.0.1", metavar="H",
                   help="address to listen on (default 127.0.0.1: this machine only)")
    p.add_argument("--double-code", type=float, default=0.0, metavar="SHARE",
                   help="share of titles two coders decide independently, for the agreement figure in "
                        "'titlematch evaluate --decisions' (e.g. 0.05; default 0)")
    p.add_argument("--residual-code", metavar="CODE",
                   help="code for 'not codable' (default: the classification's code titled e.g. "
                        "'insufficient information', if it has one)")
    p.add_argument("--title-col", default="title")
    return p


def run(args) -> int:
    import secrets
    import sys
    from pathlib import Path

    from ..io import InputError, read_table

    try:
        import flask  # noqa: F401 - only to tell the user how to get it
    except ImportError:
        raise InputError("the review page needs Flask: pip install 'titlematch[review]'") from None
    from ..coding.dictionary import TitleDictionary
    from ..review.decisions import Journal
    from ..review.server import create_app, serve
    from ..review.session import ReviewSession, queue_titles

    if not 0.0 <= args.double_code <= 1.0:
        raise InputError(f"--double-code must lie between 0 and 1, got {args.double_code}")
    if not 0 <= args.port <= 65535:
        raise InputError(f"--port must lie between 0 and 65535, got {args.port}")
    coder = (args.coder or _login()).strip()
    if not coder or len(coder) > 80:
        raise InputError("--coder must be a name of 1 to 80 characters")
    decisions = Path(args.decisions)
    if decisions.resolve() == Path(args.coded).resolve():
        raise InputError("--decisions must not be the coded or queue file: it is written to")
    frame = read_table(args.coded)
    queue, examples = queue_titles(frame, str(args.coded))
    dictionary = TitleDictionary.load(args.dictionary)
    threshold = None
    if args.model:
        from ..confidence.model import ConfidenceModel
        threshold = float(ConfidenceModel.load(args.model).threshold_)
    try:
        journal = Journal(decisions)
    except (OSError, ValueError) as exc:
        raise InputError(f"cannot open the decisions file {decisions}: {exc}") from None
    session = ReviewSession(queue, dictionary, journal, coder=coder, double_code=args.double_code,
                            examples=examples, residual_code=args.residual_code, threshold=threshold)
    session.start(str(args.coded))
    progress = session.progress()
    if journal.state.damaged:
        line, _ = journal.state.damaged[-1]
        print(f"titlematch review: warning: {len(journal.state.damaged)} unreadable line(s) in {decisions} "
              f"(last at line {line}: a write cut short by a crash); they are left as they are and skipped",
              file=sys.stderr)
    if args.host not in LOOPBACK:
        print(f"titlematch review: warning: listening on {args.host}, not only on this machine: anyone who can "
              f"reach it and has the address with its token can read the titles and save decisions",
              file=sys.stderr)
    token = secrets.token_urlsafe(24)
    app = create_app(session, token)
    host_in_url = f"[{args.host}]" if ":" in args.host else args.host

    def ready(port: int) -> None:
        print(f"titlematch review: {progress['total']:,} titles, {progress['done']:,} decided, "
              f"{progress['left']:,} waiting; decisions go to {decisions}")
        print(f"open http://{host_in_url}:{port}/?token={token}  (coder {coder}; stop with Ctrl+C)", flush=True)

    try:
        serve(app, args.host, args.port, ready)
    except OSError as exc:
        raise InputError(f"cannot listen on {args.host}:{args.port}: {exc.strerror or exc}") from None
    journal.close()
    return 0


def _login() -> str:
    import getpass
    try:
        return getpass.getuser()
    except (KeyError, OSError):
        return "coder"
