"""Shared files for the review-page tests: a small fitted dictionary and coded files with referrals.

The classification is the SOC 2018 detailed list from the O*NET reference table shipped in
lexicons/ (O*NET Database, USDOL/ETA, CC BY 4.0); the past records are a handful of everyday
titles with the SOC codes a coder would give them (common practice).
"""
from __future__ import annotations

import os
import re
import signal
import subprocess
import sys
import time
from pathlib import Path

import pandas as pd

REPO = Path(__file__).resolve().parents[1]
PAST = [("registered nurse", "29-1141"), ("rn", "29-1141"), ("licensed practical nurse", "29-2061"),
        ("cashier", "41-2011"), ("line cook", "35-2014"), ("cook", "35-2014"), ("truck driver", "53-3032"),
        ("cdl driver", "53-3032"), ("delivery driver", "53-3033"), ("warehouse associate", "53-7062"),
        ("sales associate", "41-2031"), ("nursing assistant", "31-1131"), ("helper", "47-3019")]
XSS_TITLE = "<script>alert(1)</script>"
XSS_KEY = '<img src=x onerror="alert(2)">'

CODED_COLUMNS = ["record_id", "title", "context", "title_normalized", "code", "code_title", "score", "code_2",
                 "score_2", "code_3", "score_3", "confidence", "confidence_2", "confidence_3", "decision"]


def _rows(title, key, context, records, first, second, third, conf, start):
    return [{"record_id": f"R{start + i:04d}", "title": title, "context": context, "title_normalized": key,
             "code": first, "code_title": "", "score": "0.5", "code_2": second, "score_2": "0.3",
             "code_3": third, "score_3": "0.1", "confidence": str(conf), "confidence_2": "0.2",
             "confidence_3": "0.05", "decision": "refer"} for i in range(records)]


def coded_frame() -> pd.DataFrame:
    """Four referred titles; queue order (records x (1 - confidence)): nurse, driver, associate, helper."""
    rows = (_rows("Nurse", "nurse", "hospital", 5, "29-1141", "29-2061", "31-1131", 0.4, 1)
            + _rows("Driver", "driver", "trucking company", 4, "53-3032", "53-3033", "53-3031", 0.3, 10)
            + _rows("Associate", "associate", "retail store", 3, "41-2031", "53-7062", "41-2011", 0.2, 20)
            + _rows("Helper", "helper", "construction", 2, "47-3019", "47-2061", "53-7062", 0.5, 30)
            + [{**_rows("Cook", "cook", "diner", 1, "35-2014", "35-2021", "35-2012", 0.99, 40)[0],
                "decision": "accept"}])
    return pd.DataFrame(rows, columns=CODED_COLUMNS)


def xss_frame() -> pd.DataFrame:
    return pd.DataFrame(_rows(XSS_TITLE, XSS_KEY, "<b>bold</b> & co", 2, "29-1141", "29-2061", "31-1131", 0.3, 1),
                        columns=CODED_COLUMNS)


def build(directory: Path) -> dict[str, Path]:
    """Fit and save the dictionary (a TitleCoder artefact) and write the coded files."""
    from titlematch.coding.coder import TitleCoder
    from titlematch.datasets.scenario import classification

    past = pd.DataFrame({"title": [t for t, _ in PAST] * 2, "code": [c for _, c in PAST] * 2,
                         "year": [2023] * len(PAST) + [2024] * len(PAST)})
    dictionary = directory / "dictionary"
    TitleCoder().fit(past, past["code"], classification=classification()).save(dictionary)
    coded = directory / "coded.csv"
    coded_frame().to_csv(coded, index=False)
    xss = directory / "coded_xss.csv"
    xss_frame().to_csv(xss, index=False)
    return {"dictionary": dictionary, "coded": coded, "xss": xss}


class ReviewServer:
    """``titlematch review`` in its own process, as a coder starts it; ``url`` holds the token."""

    def __init__(self, coded: Path, dictionary: Path, decisions: Path, coder: str = "ann", *extra: str):
        env = dict(os.environ, PYTHONPATH=str(REPO) + os.pathsep + os.environ.get("PYTHONPATH", ""),
                   PYTHONUNBUFFERED="1")
        self.process = subprocess.Popen(
            [sys.executable, "-m", "titlematch", "review", str(coded), "--dictionary", str(dictionary),
             "--decisions", str(decisions), "--coder", coder, *extra],
            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env, cwd=str(REPO))
        self.lines: list[str] = []
        deadline = time.monotonic() + 120
        self.url = None
        while time.monotonic() < deadline:
            line = self.process.stdout.readline()
            if not line:
                break
            self.lines.append(line)
            found = re.search(r"open (http://\S+)", line)
            if found:
                self.url = found.group(1)
                break
        if self.url is None:
            self.process.kill()
            raise RuntimeError("review server did not start: " + "".join(self.lines) + self.process.stderr.read())
        self.base, self.token = self.url.split("/?token=")

    def kill(self) -> None:
        """As hard as a crash: SIGKILL, no clean-up."""
        if self.process.poll() is None:
            self.process.send_signal(signal.SIGKILL)
            self.process.wait(timeout=30)
        if not self.process.stderr.closed:
            self.stderr_text = self.process.stderr.read()  # what the command warned of
        for stream in (self.process.stdout, self.process.stderr):
            stream.close()


def chrome(profile: Path):
    """Debian's headless chromium through its own chromedriver: nothing is downloaded."""
    from selenium import webdriver
    from selenium.webdriver.chrome.service import Service

    options = webdriver.ChromeOptions()
    options.binary_location = "/usr/bin/chromium"
    for flag in ("--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
                 "--disable-background-networking", "--disable-component-update", "--disable-sync",
                 "--window-size=1400,900", f"--user-data-dir={profile}"):
        options.add_argument(flag)
    return webdriver.Chrome(service=Service("/usr/bin/chromedriver"), options=options)
