"""End to end in a real browser: `tracktrue dashboard` served locally, every page opened in Chromium."""

import os
import socket
import subprocess
import sys
import time
import urllib.request
from pathlib import Path

import pytest

from dashboard import planner
from dashboard.wording import component_label
from test_dashboard_fixture import build_store
from tracktrue.store import STORE_ENV

CHROMIUM = Path("/usr/bin/chromium")
CHROMIUM_ARGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
                 "--disable-background-networking", "--disable-component-update", "--disable-sync"]
ARTIFACTS = Path(__file__).resolve().parents[1] / "test-artifacts"
PAGES = (("", "Fleet triage"), ("plan", "Workshop plan"), ("vehicle", "Vehicle record"),
         ("intake", "Log intake"))

pytestmark = [pytest.mark.browser, pytest.mark.slow,
              pytest.mark.skipif(not CHROMIUM.exists(), reason="needs Debian's chromium at /usr/bin/chromium "
                                 "(apt-get install chromium); no browser is downloaded at test time")]


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def wait_healthy(url: str, proc: subprocess.Popen, timeout_s: float = 60) -> None:
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        if proc.poll() is not None:
            raise AssertionError(f"tracktrue dashboard exited with {proc.returncode}")
        try:
            with urllib.request.urlopen(f"{url}/_stcore/health", timeout=2) as r:
                if r.status == 200:
                    return
        except OSError:
            time.sleep(0.3)
    raise AssertionError(f"{url} not healthy after {timeout_s} s")


@pytest.fixture(scope="module")
def served(tmp_path_factory):
    store = build_store(tmp_path_factory.mktemp("browser-store"))
    top = store.read_table("vehicle_status").sort_values("rank").head(5)
    planner.add_vehicles(store, top[["vehicle_id", "depot", "rank"]], planner.default_start())
    port = free_port()
    env = {**os.environ, STORE_ENV: ""}
    script = Path(sys.executable).with_name("tracktrue")  # the installed console script
    command = [str(script)] if script.exists() else [sys.executable, "-m", "tracktrue.cli"]
    proc = subprocess.Popen([*command, "dashboard", "--store", str(store.root), "--port", str(port)],
                            env=env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    url = f"http://127.0.0.1:{port}"
    try:
        wait_healthy(url, proc)
        yield url, store
    finally:
        proc.terminate()
        try:
            proc.wait(timeout=20)
        except subprocess.TimeoutExpired:
            proc.kill()


def settle(page) -> None:
    """Wait until Streamlit reports the script run finished and the page stopped changing."""
    page.wait_for_selector("[data-testid='stApp']", timeout=30_000)
    for _ in range(2):  # twice: a run can start right after the first one ends (layout, reruns)
        page.wait_for_timeout(1000)
        page.wait_for_function(
            "() => { const a = document.querySelector(\"[data-testid='stApp']\");"
            " return a && a.getAttribute('data-test-script-state') === 'notRunning'"
            " && !document.querySelector(\"[data-testid='stSkeleton']\"); }", timeout=60_000)
    page.wait_for_timeout(1000)  # charts and the data grid draw after the run ends


def screenshot(page, path: Path) -> None:
    """The whole page: Streamlit scrolls inside its main block, so grow the viewport to fit it."""
    height = page.evaluate("() => { const m = document.querySelector(\"[data-testid='stMain']\");"
                           " return m ? m.scrollHeight : document.body.scrollHeight; }")
    page.set_viewport_size({"width": 1500, "height": min(max(1100, height + 40), 7000)})
    settle(page)  # a new viewport can make the app run again
    page.screenshot(path=str(path))
    page.set_viewport_size({"width": 1500, "height": 1100})


def test_every_page_opens_in_chromium_and_the_triage_shows_the_top_vehicle(served):
    from playwright.sync_api import sync_playwright

    url, store = served
    top = store.read_table("vehicle_status").sort_values("rank").iloc[0]
    ARTIFACTS.mkdir(exist_ok=True)
    with sync_playwright() as pw:
        browser = pw.chromium.launch(executable_path=str(CHROMIUM), args=CHROMIUM_ARGS, headless=True)
        try:
            page = browser.new_page(viewport={"width": 1500, "height": 1100})
            for path, title in PAGES:
                page.goto(f"{url}/{path}")
                settle(page)
                assert page.get_by_role("heading", name=title).count() >= 1, title
                assert page.locator("[data-testid='stException']").count() == 0, path
                screenshot(page, ARTIFACTS / f"dashboard-{path or 'triage'}.png")
                if path == "":
                    grid = page.locator("[data-testid='stDataFrame']").first
                    assert grid.is_visible()
                    # The data grid draws on a canvas; its accessible table mirrors the cells.
                    cells = page.locator("[data-testid='stDataFrame'] table").first.inner_text()
                    assert top["vehicle_id"] in cells
                    assert component_label(top["suspected_component"]) in cells
        finally:
            browser.close()
