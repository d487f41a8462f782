"""The review page in a real headless browser (Debian's chromium and chromedriver) against the
server started as a coder starts it, and its HTTP surface: token, escaping, refused codes."""
from __future__ import annotations

import json
import urllib.error
import urllib.request

import pytest
from selenium.common.exceptions import NoAlertPresentException
from selenium.webdriver.common.action_chains import ActionChains
from selenium.webdriver.common.by import By
from selenium.webdriver.support.ui import WebDriverWait

from _review_data import XSS_KEY, XSS_TITLE, ReviewServer, chrome
from titlematch.cli import main
from titlematch.coding.dictionary import TitleDictionary
from titlematch.review.decisions import read_journal


@pytest.fixture
def browser(tmp_path):
    driver = chrome(tmp_path / "profile")
    yield driver
    driver.quit()


def _press(driver, keys: str) -> None:
    ActionChains(driver).send_keys(keys).perform()


def _text(driver, element_id: str) -> str:
    return driver.find_element(By.ID, element_id).text


def _wait_for(driver, element_id: str, text: str) -> None:
    WebDriverWait(driver, 20).until(lambda d: d.find_element(By.ID, element_id).text == text,
                                    f"#{element_id} never showed {text!r}")


def _no_alert(driver) -> bool:
    try:
        driver.switch_to.alert
    except NoAlertPresentException:
        return True
    return False


def test_code_from_the_keyboard_survive_a_kill_and_feed_back(review_files, browser, tmp_path):
    decisions = tmp_path / "decisions.jsonl"
    server = ReviewServer(review_files["coded"], review_files["dictionary"], decisions)
    try:
        browser.get(server.url)
        _wait_for(browser, "written", "Nurse")          # most records x uncertainty first
        assert _text(browser, "count-left") == "4"
        assert "hospital" in _text(browser, "contexts")
        # 1. a suggestion: press its number, then Enter
        _press(browser, "1")
        _wait_for(browser, "chosen", "29-1141 Registered Nurses")
        _press(browser, "\ue007")  # Enter
        _wait_for(browser, "written", "Driver")
        # 2. a code found by looking it up: "/" then type, Enter picks the first, Enter saves
        _press(browser, "/")
        _press(browser, "line coo")
        WebDriverWait(browser, 20).until(
            lambda d: d.find_elements(By.CSS_SELECTOR, "#found li.lit .code")
            and d.find_element(By.CSS_SELECTOR, "#found li.lit .code").text == "35-2014")
        _press(browser, "\ue007")
        _wait_for(browser, "chosen", "35-2014 Cooks, Restaurant")
        _press(browser, "\ue007")
        _wait_for(browser, "written", "Associate")
        # 3. put off, then take it back
        _press(browser, "p")
        _wait_for(browser, "written", "Helper")
        assert _text(browser, "count-skipped") == "1"
        _press(browser, "z")
        _wait_for(browser, "written", "Associate")
        assert _text(browser, "count-done") == "2" and _text(browser, "count-skipped") == "0"
    finally:
        server.kill()  # SIGKILL: no chance to flush anything that was not already on disk

    restarted = ReviewServer(review_files["coded"], review_files["dictionary"], decisions)
    try:
        browser.get(restarted.url)
        _wait_for(browser, "written", "Associate")     # resumes on the title the coder held
        assert _text(browser, "count-done") == "2"
        assert _text(browser, "count-left") == "2"
    finally:
        restarted.kill()

    state = read_journal(decisions)
    coded = [e for e in state.effective(("code",))]
    assert [(e["title"], e["code"]) for e in coded] == [("nurse", "29-1141"), ("driver", "35-2014")]
    assert all(e["coder"] == "ann" and e["time"].endswith("Z") for e in coded)
    assert [(e["machine_code"], e["machine_confidence"]) for e in coded] == [("29-1141", 0.4), ("53-3032", 0.3)]
    assert [e["records"] for e in coded] == [5, 4]

    out = tmp_path / "dictionary_2025"
    assert main(["feedback", str(decisions), "--dictionary", str(review_files["dictionary"]), "--out", str(out),
                 "--year", "2025", "--quiet"]) == 0
    updated = TitleDictionary.load(out)
    added = updated.counts[updated.counts["year"] == 2025]
    assert sorted(zip(added["key"], added["code"], added["count"])) == [("driver", "35-2014", 4),
                                                                       ("nurse", "29-1141", 5)]


def _request(url: str, body: dict | None = None, token: str | None = None):
    data = None if body is None else json.dumps(body).encode("utf-8")
    request = urllib.request.Request(url, data=data, method="POST" if body is not None else "GET")
    if body is not None:
        request.add_header("Content-Type", "application/json")
    if token:
        request.add_header("X-Review-Token", token)
    try:
        with urllib.request.urlopen(request, timeout=30) as response:
            return response.status, response.read().decode("utf-8"), dict(response.headers)
    except urllib.error.HTTPError as error:
        return error.code, error.read().decode("utf-8"), dict(error.headers)


def test_safe_by_default_token_escaping_and_unknown_codes(review_files, browser, tmp_path):
    decisions = tmp_path / "decisions.jsonl"
    server = ReviewServer(review_files["xss"], review_files["dictionary"], decisions)
    try:
        base, token = server.base, server.token
        assert base.startswith("http://127.0.0.1:")  # loopback unless --host is given
        for path in ("/", "/static/review.js", "/api/state", "/api/search?q=nurse"):
            assert _request(base + path)[0] == 403, path
            assert _request(base + path, token="wrong-" + token)[0] == 403, path
        assert _request(base + "/api/decide", {"title": XSS_KEY, "action": "code", "code": "29-1141"})[0] == 403
        status, _, headers = _request(server.url)
        assert status == 200 and "default-src 'none'" in headers["Content-Security-Policy"]
        # SOC 2018 has no 99-9999 (O*NET-SOC 2019 table): a made-up code is refused and nothing is written
        for code in ("99-9999", "nurse"):
            status, body, _ = _request(base + "/api/decide", {"title": XSS_KEY, "action": "code", "code": code},
                                       token=token)
            assert status == 400 and "not in the classification" in json.loads(body)["error"]
        assert read_journal(decisions).effective(("code", "uncodable")) == []

        browser.get(server.url)
        _wait_for(browser, "written", XSS_TITLE)
        assert _text(browser, "threshold") == ""  # started without --model
        assert _text(browser, "normalized") == XSS_KEY
        assert "<b>bold</b> & co" in _text(browser, "contexts")
        assert XSS_TITLE in _text(browser, "examples")
        assert _no_alert(browser)
        # only the page's own script; no element made from the data
        assert len(browser.find_elements(By.TAG_NAME, "script")) == 1
        assert not browser.find_elements(By.CSS_SELECTOR, "main img, #message b")
        assert [b.get_attribute("id") for b in browser.find_elements(By.CSS_SELECTOR, "main b")] == ["records"]
        _press(browser, "n")
        _press(browser, "<b>see</b> <img src=x onerror=alert(3)>")
        _press(browser, "\ue007")  # leaves the note field
        _press(browser, "1")
        _press(browser, "\ue007")
        WebDriverWait(browser, 20).until(lambda d: "saved" in d.find_element(By.ID, "message").text)
        assert _no_alert(browser)
        assert "<b>see</b>" in _text(browser, "message")
        assert not browser.find_elements(By.CSS_SELECTOR, "#message b, #message img")
    finally:
        server.kill()
    entries = read_journal(decisions).effective(("code",))
    assert [(e["title"], e["code"]) for e in entries] == [(XSS_KEY, "29-1141")]
    assert entries[0]["remark"] == "<b>see</b> <img src=x onerror=alert(3)>"


def test_listening_beyond_this_machine_warns_and_the_default_does_not(review_files, tmp_path):
    # Reference: the address the operating system reports the server bound to, and the page itself
    # fetched through the loopback interface (0.0.0.0 listens on every interface, that one too).
    outside = ReviewServer(review_files["coded"], review_files["dictionary"], tmp_path / "a.jsonl", "ann",
                           "--host", "0.0.0.0")
    try:
        assert outside.base.startswith("http://0.0.0.0:")
        port = outside.base.rsplit(":", 1)[1]
        with urllib.request.urlopen(f"http://127.0.0.1:{port}/?token={outside.token}", timeout=30) as page:
            assert page.status == 200
    finally:
        outside.kill()
    assert "warning: listening on 0.0.0.0, not only on this machine" in outside.stderr_text
    local = ReviewServer(review_files["coded"], review_files["dictionary"], tmp_path / "b.jsonl")
    local.kill()
    assert local.base.startswith("http://127.0.0.1:") and "warning" not in local.stderr_text
