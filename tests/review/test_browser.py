"""The review page in a real browser: Debian's headless Chromium driven by Selenium through Debian's
chromedriver (no browser is downloaded).  On the demo archive a reviewer opens the stations page,
opens a record, zooms in by dragging, marks a period by dragging, saves an annotation, re-runs QC
and reads the new version's flag differences; the screenshot is checked as the report's are (not
blank, no failed resource, no console error).

``QCPIPE_SCREENSHOT_TO=docs/review-page.png`` also writes the screenshot there (README picture).
"""

from __future__ import annotations

import os
import shutil
import socket
import threading
import time
import tomllib
from pathlib import Path

import matplotlib.image as mpimg
import numpy as np
import pytest

CHROMIUM, DRIVER = Path("/usr/bin/chromium"), Path("/usr/bin/chromedriver")
pytestmark = pytest.mark.skipif(not (CHROMIUM.exists() and DRIVER.exists()),
                                reason="Debian's chromium and chromium-driver are needed "
                                       "(tools/ensure-system-libs.sh installs them)")
webdriver = pytest.importorskip("selenium.webdriver", reason="selenium is a test extra (pip install -e '.[test]')")
DEPLOYMENT = "kc-low-ph-2026-09"


@pytest.fixture(scope="module")
def served(review_demo):
    import uvicorn

    from qcpipe.review import create_app

    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    app = create_app(review_demo.workspace)
    server = uvicorn.Server(uvicorn.Config(app, host="127.0.0.1", port=port, log_level="warning"))
    thread = threading.Thread(target=server.run, daemon=True)
    thread.start()
    deadline = time.monotonic() + 20
    while not server.started and time.monotonic() < deadline:
        time.sleep(0.05)
    assert server.started, "uvicorn did not start"
    yield f"http://127.0.0.1:{port}"
    server.should_exit = True
    thread.join(timeout=10)


@pytest.fixture
def browser(tmp_path):
    from selenium.webdriver.chrome.options import Options
    from selenium.webdriver.chrome.service import Service

    opts = Options()
    opts.binary_location = str(CHROMIUM)
    for arg in ("--headless=new", "--no-sandbox", "--disable-gpu", "--no-first-run", "--disable-sync",
                "--disable-background-networking", "--disable-component-update", "--window-size=1400,1700",
                f"--user-data-dir={tmp_path / 'profile'}"):
        opts.add_argument(arg)
    opts.set_capability("goog:loggingPrefs", {"browser": "ALL"})
    driver = webdriver.Chrome(service=Service(str(DRIVER)), options=opts)
    driver.set_page_load_timeout(60)
    yield driver
    driver.quit()


def wait_for(what, timeout: float = 60.0, step: float = 0.25):
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        value = what()
        if value:
            return value
        time.sleep(step)
    raise AssertionError(f"timed out after {timeout} s waiting for {what.__doc__ or what}")


def drag(driver, element, x_from: float, x_to: float, y: float = 0.5) -> None:
    """Drag with the mouse across ``element`` from fraction ``x_from`` to ``x_to`` of its width."""
    from selenium.webdriver.common.action_chains import ActionChains

    w, h = element.size["width"], element.size["height"]
    start = (int(w * (x_from - 0.5)), int(h * (y - 0.5)))
    chain = ActionChains(driver).move_to_element_with_offset(element, *start).click_and_hold()
    steps = 8
    for _ in range(steps):
        chain.move_by_offset(int(w * (x_to - x_from) / steps), 0).pause(0.05)
    chain.release().perform()


def x_range(driver) -> list[float]:
    return driver.execute_script(
        "const r = document.getElementById('chart').layout.xaxis.range;"
        "return r.map(function (v) { return typeof v === 'number' ? v : Date.parse(String(v).replace(' ', 'T') + 'Z'); });")


def test_mark_a_period_save_it_rerun_and_see_the_difference(review_demo, served, browser, tmp_path):
    from selenium.webdriver.common.by import By

    browser.get(served + "/")
    link = browser.find_element(By.LINK_TEXT, DEPLOYMENT)
    link.click()
    wait_for(lambda: browser.find_element(By.ID, "review").get_attribute("data-ready") == "yes")
    whole = x_range(browser)
    plot = browser.find_elements(By.CSS_SELECTOR, "#chart .nsewdrag")[0]

    # zoom: drag across the middle fifth of the first panel; every sample of the window is then sent
    drag(browser, plot, 0.4, 0.6)
    wait_for(lambda: "every sample shown" in browser.find_element(By.ID, "resolution").text)
    zoomed = x_range(browser)
    assert whole[0] < zoomed[0] < zoomed[1] < whole[1]
    assert (zoomed[1] - zoomed[0]) < 0.35 * (whole[1] - whole[0])

    # mark: drag across the middle of the zoomed view
    browser.find_element(By.ID, "mode-mark").click()
    plot = browser.find_elements(By.CSS_SELECTOR, "#chart .nsewdrag")[0]
    drag(browser, plot, 0.3, 0.7)
    start = wait_for(lambda: browser.find_element(By.ID, "start").get_attribute("value"))
    end = browser.find_element(By.ID, "end").get_attribute("value")
    assert start < end
    checked = [c.get_attribute("value") for c in browser.find_elements(By.CSS_SELECTOR, "#variables input")
               if c.is_selected()]
    assert checked == ["ph"]
    browser.find_element(By.CSS_SELECTOR, 'input[name="flag"][value="4"]').click()
    browser.find_element(By.ID, "reason").send_keys("sonde lifted into a rock pool by the swell")
    browser.find_element(By.ID, "reviewer").send_keys("R. Tester")
    browser.find_element(By.ID, "save").click()
    wait_for(lambda: "saved" in browser.find_element(By.ID, "mark-message").text)

    # the annotation is in the workspace's file, with the period selected on the chart
    saved = tomllib.loads((review_demo.workspace.parent / "annotations.toml").read_text())["annotation"]
    assert len(saved) == 1 and saved[0]["variables"] == ["ph"] and saved[0]["flag"] == 4
    assert saved[0]["start"].strftime("%Y-%m-%dT%H:%M:%SZ") == start
    assert saved[0]["end"].strftime("%Y-%m-%dT%H:%M:%SZ") == end
    assert "rock pool" in browser.find_element(By.ID, "annotations").text

    # re-run, then the new version's differences name the manual check moving samples to fail
    browser.find_element(By.ID, "rerun-button").click()
    wait_for(lambda: "re-run finished" in browser.find_element(By.ID, "rerun-message").text, timeout=300, step=1)
    diffs = browser.find_element(By.ID, "diffs").text
    assert f"{DEPLOYMENT}: version 1 to 2" in diffs
    assert "ph manual:" in diffs and "-> fail" in diffs
    assert "version 002" in browser.find_element(By.CSS_SELECTOR, "h1 small").text

    png = tmp_path / "review-page.png"
    browser.save_screenshot(str(png))
    img = mpimg.imread(png)
    rgb = np.round(img[..., :3] * 255).astype(np.uint8).reshape(-1, 3)
    colours = np.unique(rgb, axis=0).shape[0]
    assert colours > 200, f"only {colours} distinct colours: blank or unstyled page?"
    assert (rgb.min(axis=1) < 128).mean() > 0.01, "almost no dark pixels: no text drawn?"
    problems = [e for e in browser.get_log("browser") if e["level"] in ("SEVERE", "ERROR")]
    assert not problems, problems
    target = os.environ.get("QCPIPE_SCREENSHOT_TO")
    if target:
        shutil.copyfile(png, target)
