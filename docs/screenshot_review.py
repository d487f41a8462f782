"""Take the README's screenshot of the review page (docs/review_page.png) on the demo's queue.

    titlematch demo --out titlematch-demo
    python docs/screenshot_review.py titlematch-demo

Runs ``titlematch review`` on the demo's coded file with a throw-away decisions file, opens the
page in Debian's headless chromium (its own chromedriver: nothing is downloaded), types a few
letters in the look-up box, chooses the first suggestion and saves the picture.
"""
from __future__ import annotations

import argparse
import re
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from selenium import webdriver
from selenium.webdriver.chrome.service import Service
from selenium.webdriver.common.action_chains import ActionChains
from selenium.webdriver.common.by import By
from selenium.webdriver.support.ui import WebDriverWait


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("demo", type=Path, help="output folder of 'titlematch demo'")
    parser.add_argument("--out", type=Path, default=Path(__file__).with_name("review_page.png"))
    parser.add_argument("--search", default="warehouse", help="letters typed in the look-up box")
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        server = subprocess.Popen(
            [sys.executable, "-m", "titlematch", "review", str(args.demo / "coded_2025.csv"), "--dictionary",
             str(args.demo / "dictionary"), "--model", str(args.demo / "model"), "--decisions",
             str(Path(tmp) / "decisions.jsonl"), "--coder", "ana"], stdout=subprocess.PIPE, text=True)
        try:
            url = None
            while url is None:
                line = server.stdout.readline()
                if not line:
                    raise SystemExit("the review server did not start")
                found = re.search(r"open (http://\S+)", line)
                url = found.group(1) if found else None
            options = webdriver.ChromeOptions()
            options.binary_location = "/usr/bin/chromium"
            for flag in ("--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
                         "--disable-background-networking", "--disable-component-update", "--disable-sync",
                         "--window-size=1360,1000", "--hide-scrollbars", f"--user-data-dir={Path(tmp) / 'chrome'}"):
                options.add_argument(flag)
            driver = webdriver.Chrome(service=Service("/usr/bin/chromedriver"), options=options)
            try:
                driver.get(url)
                WebDriverWait(driver, 30).until(lambda d: d.find_element(By.ID, "written").text)
                ActionChains(driver).send_keys("1").perform()
                ActionChains(driver).send_keys("/").perform()
                ActionChains(driver).send_keys(args.search).perform()
                WebDriverWait(driver, 30).until(lambda d: d.find_elements(By.CSS_SELECTOR, "#found li"))
                time.sleep(0.3)
                driver.save_screenshot(str(args.out))
            finally:
                driver.quit()
        finally:
            server.kill()
            server.wait()
    print(f"screenshot: {args.out}")


if __name__ == "__main__":
    main()
