"""Benchmark: the review page's latency with a large queue and a large dictionary.

Builds a dictionary of ``--titles`` distinct titles (default 100,000) over the 1,016 O*NET-SOC 2019
codes (O*NET Database, USDOL/ETA, CC BY 4.0): each official title written with workplace and
speciality words, so every key is distinct. A queue of ``--queue`` titles (default 50,000) is
referred from it. Then, over real HTTP to the Flask server in this process:

- page load: the page, its script and style, and the first state (what the browser needs to paint);
- next title: saving a decision and receiving the next title (one POST);
- search as you type: every prefix of ``--typed`` titles (default 40), one request per keystroke.

Peers, in the same run on the same data, without the network:

- next title: a plain pandas "stateless" server that re-reads the journal with ``pd.read_json``
  and scans the queue for the first title without a decision;
- search: a plain rapidfuzz ``process.extract`` (WRatio) over every raw text (codes, official and
  dictionary titles, lower-cased) with no normalizer and no index.

    python benchmarks/bench_review.py
    python benchmarks/bench_review.py --titles 20000 --queue 10000
"""
from __future__ import annotations

import argparse
import http.client
import json
import tempfile
import threading
import time
from pathlib import Path

import _common  # noqa: F401  (first: the same numpy memory setting for titlematch and its peer)
import numpy as np
import pandas as pd
from rapidfuzz import fuzz, process

from titlematch.coding.codes import onet_classification
from titlematch.coding.dictionary import TitleDictionary
from titlematch.review.decisions import Journal
from titlematch.review.server import create_app
from titlematch.review.session import ReviewSession

WORKPLACES = ["hospital", "clinic", "warehouse", "school", "county", "retail", "plant", "hotel", "bank", "farm",
              "airport", "port", "lab", "studio", "church", "mine", "mill", "depot", "garage", "office"]
PEER_EVERY = 10
SPECIALITIES = ["intake", "records", "night desk", "field", "mobile", "regional", "contract", "floor", "line",
                "yard", "dock", "quality", "safety", "payroll", "fleet", "training", "billing", "outreach",
                "inventory", "shipping"]


def make_dictionary(n_titles: int, seed: int = 0) -> tuple[TitleDictionary, pd.DataFrame]:
    classification = onet_classification("onet")
    rng = np.random.default_rng(seed)
    base = classification["title"].str.lower().str.replace(r"[^a-z ]+", " ", regex=True).str.split().str[:4]
    base = base.str.join(" ").to_numpy()
    rows, seen = [], set()
    while len(rows) < n_titles:
        i = rng.integers(len(base))
        title = f"{WORKPLACES[rng.integers(len(WORKPLACES))]} {base[i]} {SPECIALITIES[rng.integers(len(SPECIALITIES))]}"
        if title in seen:
            continue
        seen.add(title)
        rows.append((title, classification["code"].iloc[i], int(rng.integers(1, 40))))
    records = pd.DataFrame(rows, columns=["title", "code", "n"])
    records = records.loc[records.index.repeat(records["n"].clip(upper=3))].drop(columns="n")
    records["year"] = 2024
    dictionary = TitleDictionary.build(records, classification)
    return dictionary, classification


def make_queue(dictionary: TitleDictionary, n_queue: int, seed: int = 1) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    entries = dictionary.entries.drop_duplicates("key")
    entries = entries.iloc[rng.permutation(len(entries))[:n_queue]]
    codes = dictionary.catalogue["code"].to_numpy()
    conf = rng.uniform(0.05, 0.8, len(entries))
    queue = pd.DataFrame({"title_normalized": entries["key"].to_numpy(), "records": rng.integers(1, 50, len(entries)),
                          "example_title": entries["key"].str.title().to_numpy(), "context": "hospital",
                          "code": entries["code"].to_numpy(), "confidence": conf,
                          "code_2": codes[rng.integers(len(codes), size=len(entries))], "confidence_2": conf / 3,
                          "code_3": codes[rng.integers(len(codes), size=len(entries))], "confidence_3": conf / 9})
    queue["priority"] = queue["records"] * (1 - queue["confidence"])
    return queue.sort_values("priority", ascending=False).drop(columns="priority").reset_index(drop=True)


class Client:
    def __init__(self, port: int, token: str):
        self.connection = http.client.HTTPConnection("127.0.0.1", port, timeout=60)
        self.headers = {"X-Review-Token": token}

    def get(self, path: str) -> bytes:
        self.connection.request("GET", path, headers=self.headers)
        response = self.connection.getresponse()
        body = response.read()
        assert response.status == 200, (path, response.status, body[:200])
        return body

    def post(self, path: str, body: dict) -> dict:
        self.connection.request("POST", path, body=json.dumps(body),
                                headers=self.headers | {"Content-Type": "application/json"})
        response = self.connection.getresponse()
        data = json.loads(response.read())
        assert response.status == 200, (path, response.status, data)
        return data


def stats(samples: list[float]) -> str:
    ms = np.asarray(samples) * 1000
    return f"median {np.median(ms):.1f} ms, p95 {np.percentile(ms, 95):.1f} ms, max {ms.max():.1f} ms"


def peer_next_title(journal_path: Path, queue_keys: np.ndarray) -> str | None:
    """The plain pandas peer: read the whole journal, find the first queue title without a decision."""
    try:
        journal = pd.read_json(journal_path, lines=True)
    except ValueError:
        journal = pd.DataFrame({"action": [], "title": []})
    decided = set(journal.loc[journal["action"].isin(["code", "uncodable"]), "title"]) if len(journal) else set()
    free = ~pd.Series(queue_keys).isin(decided).to_numpy()
    return queue_keys[free.argmax()] if free.any() else None


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--titles", type=int, default=100_000)
    parser.add_argument("--queue", type=int, default=50_000)
    parser.add_argument("--decisions", type=int, default=200, help="next-title requests to time")
    parser.add_argument("--typed", type=int, default=40, help="titles typed letter by letter in the search box")
    args = parser.parse_args()

    start = time.perf_counter()
    dictionary, classification = make_dictionary(args.titles)
    queue = make_queue(dictionary, args.queue)
    print(f"dictionary: {dictionary.entries['key'].nunique():,} titles over {len(classification):,} codes; "
          f"queue: {len(queue):,} titles (built in {time.perf_counter() - start:.0f} s)")
    with tempfile.TemporaryDirectory() as tmp:
        journal_path = Path(tmp) / "decisions.jsonl"
        start = time.perf_counter()
        session = ReviewSession(queue, dictionary, Journal(journal_path), coder="bench")
        session.search("warm up")
        print(f"server start (session, search index): {time.perf_counter() - start:.1f} s")
        token = "bench-token"
        import logging

        from werkzeug.serving import make_server
        logging.getLogger("werkzeug").setLevel(logging.WARNING)
        server = make_server("127.0.0.1", 0, create_app(session, token), threaded=True)
        threading.Thread(target=server.serve_forever, daemon=True).start()
        client = Client(server.server_port, token)

        loads = []
        for _ in range(20):
            t = time.perf_counter()
            client.get(f"/?token={token}")
            client.get("/static/review.js")
            client.get("/static/review.css")
            client.get("/api/state")
            loads.append(time.perf_counter() - t)
        print(f"page load (page + script + style + state), {len(queue):,}-title queue: {stats(loads)}")

        nexts, peer_nexts = [], []
        keys = queue["title_normalized"].to_numpy()
        state = json.loads(client.get("/api/state"))
        for i in range(args.decisions):
            current = state["current"]
            t = time.perf_counter()
            state = client.post("/api/decide", {"title": current["key"], "action": "code" if i % 5 else "skip",
                                                "code": current["candidates"][0]["code"]})["state"]
            nexts.append(time.perf_counter() - t)
            t = time.perf_counter()
            peer_next_title(journal_path, keys)
            peer_nexts.append(time.perf_counter() - t)
        print(f"next title (save + next), journal of {args.decisions} decisions: {stats(nexts)}")
        print(f"  peer: pandas re-read of the journal + queue scan, no HTTP: {stats(peer_nexts)}")
        print(f"  ratio (median, peer / titlematch): {np.median(peer_nexts) / np.median(nexts):.2f}")

        typed_titles = [str(t) for t in dictionary.entries["key"].drop_duplicates().sample(60, random_state=5)]
        # a coder types the job, not the place
        typed_titles = [" ".join(t.split()[1:3]) for t in typed_titles][:args.typed]
        prefixes = [t[:k] for t in typed_titles for k in range(2, len(t) + 1)]
        texts = pd.concat([classification["code"], classification["title"].str.lower(),
                           dictionary.entries["key"].drop_duplicates()]).tolist()
        searches, peer_searches, hits = [], [], 0
        for n, prefix in enumerate(prefixes):
            t = time.perf_counter()
            json.loads(client.get("/api/search?q=" + prefix.replace(" ", "%20")))
            searches.append(time.perf_counter() - t)
            if n % PEER_EVERY == 0:  # the peer takes about a second a keystroke: time a sample of them
                t = time.perf_counter()
                process.extract(prefix, texts, scorer=fuzz.WRatio, limit=12)
                peer_searches.append(time.perf_counter() - t)
        for title in typed_titles:  # the whole job typed: its code should be in the list
            results = session.search(title)
            hits += any(title in r["matched"] for r in results)
        print(f"search as you type, {len(prefixes):,} keystrokes over {len(texts):,} texts: {stats(searches)}")
        print(f"  peer: rapidfuzz process.extract(WRatio) over the raw texts, no HTTP, every {PEER_EVERY}th "
              f"keystroke: {stats(peer_searches)}")
        print(f"  ratio (median, peer / titlematch): {np.median(peer_searches) / np.median(searches):.2f}")
        print(f"  typed job found among the results: {hits}/{len(typed_titles)}")
        server.shutdown()


if __name__ == "__main__":
    main()
