"""``wallstress serve`` in a real browser: Playwright drives headless Chromium (Debian's
``chromium``) against the server on a free port of 127.0.0.1.

Uploads the bundled sample workbook, sees the summary, the geometry plane and the sortable key
measures, downloads the results and reads their sheets; uploads a hostile file and sees the one
message; checks that no request left 127.0.0.1 and that the page logged no console error.
``WALLSTRESS_SCREENSHOT=path.png`` also saves the screenshot (the README's picture is made so).

Skipped, with the reason, where Playwright or Chromium is not installed.
"""

from __future__ import annotations

import os
import shutil
import socket
import threading
import time
from pathlib import Path

import openpyxl
import pytest

from tests.hostile_files import random_xlsx
from wallstress.jobs import sample_dir

CHROMIUM = next(
    (p for p in (shutil.which("chromium"), "/usr/bin/chromium") if p and Path(p).exists()), None
)
sync_api = pytest.importorskip("playwright.sync_api", reason="Playwright is not installed")
pytestmark = [
    pytest.mark.slow,
    pytest.mark.skipif(
        CHROMIUM is None, reason="Chromium is not installed (apt-get install chromium)"
    ),
]

SAMPLE = sample_dir() / "fernhill_echo_lab.xlsx"


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


@pytest.fixture(scope="module")
def server(tmp_path_factory):
    import uvicorn

    from wallstress.web.app import create_app

    port = _free_port()
    app = create_app(runs_root=tmp_path_factory.mktemp("runs"))
    srv = uvicorn.Server(uvicorn.Config(app, host="127.0.0.1", port=port, log_level="warning"))
    thread = threading.Thread(target=srv.run, daemon=True)
    thread.start()
    end = time.time() + 30
    while not srv.started and time.time() < end:
        time.sleep(0.05)
    assert srv.started, "the server did not start"
    yield f"http://127.0.0.1:{port}"
    srv.should_exit = True
    thread.join(10)


@pytest.fixture(scope="module")
def browser():
    with sync_api.sync_playwright() as p:
        b = p.chromium.launch(executable_path=CHROMIUM, args=["--no-sandbox"])
        yield b
        b.close()


def _watched_page(browser, base):
    page = browser.new_page(accept_downloads=True, viewport={"width": 1280, "height": 900})
    page.requests, page.problems = [], []
    page.on("request", lambda r: page.requests.append(r.url))
    page.on("console", lambda m: m.type == "error" and page.problems.append(m.text))
    page.on("pageerror", lambda e: page.problems.append(str(e)))
    page.set_default_timeout(120_000)
    return page


def _only_local(page, base):
    elsewhere = [u for u in page.requests if not (u.startswith(base) or u.startswith("data:"))]
    assert not elsewhere, f"requests left 127.0.0.1: {elsewhere}"
    assert any(u.endswith("/static/sort.js") for u in page.requests)  # the detector sees requests


def test_upload_see_sort_download(server, browser, tmp_path):
    page = _watched_page(browser, server)
    page.goto(server + "/")
    assert "supports, and never replaces" in page.inner_text(".caution")
    page.set_input_files("#studies", str(SAMPLE))
    page.click("#send")
    page.wait_for_selector("#summary")
    # the plane is drawn (an inline PNG with pixels)
    width = page.eval_on_selector("#plane img", "img => img.naturalWidth")
    assert width > 100
    # the key measures sort by a click on a heading, as numbers
    heading = page.locator("#key-measures th", has_text="LV mass (g)")
    heading.click()
    assert heading.get_attribute("aria-sort") == "ascending"
    col = page.eval_on_selector(
        "#key-measures",
        """t => { const i = [...t.tHead.rows[0].cells].findIndex(h => h.textContent === 'LV mass (g)');
                  return [...t.tBodies[0].rows].map(r => r.cells[i].dataset.sort)
                         .filter(v => v !== '').map(Number); }""",
    )
    assert col == sorted(col) and len(col) > 100
    assert page.locator("#cautions .unverified li").count() > 0
    shot = tmp_path / "serve.png"
    page.evaluate("window.scrollTo(0, 0)")
    page.screenshot(path=str(shot), full_page=False)
    assert shot.stat().st_size > 10_000
    if os.environ.get("WALLSTRESS_SCREENSHOT"):
        shutil.copy(shot, os.environ["WALLSTRESS_SCREENSHOT"])
    link = page.locator("#downloads a", has_text=".wallstress.xlsx")
    with page.expect_download() as got:
        link.click()
    saved = tmp_path / got.value.suggested_filename
    got.value.save_as(saved)
    sheets = openpyxl.load_workbook(saved, read_only=True).sheetnames
    mine = openpyxl.load_workbook(SAMPLE, read_only=True).sheetnames
    assert sheets[: len(mine)] == mine and len(sheets) > len(mine)
    _only_local(page, server)
    assert not page.problems, page.problems
    page.close()


def test_hostile_file_shows_one_message(server, browser, tmp_path):
    page = _watched_page(browser, server)
    page.goto(server + "/")
    page.set_input_files("#studies", str(random_xlsx(tmp_path)))
    page.click("#send")
    page.wait_for_selector("#message")
    text = page.inner_text("#message")
    assert text and "Traceback" not in page.content()
    page.goto(server + "/")  # the server goes on
    assert page.locator("#send").count() == 1
    _only_local(page, server)
    assert not page.problems, page.problems
    page.close()
