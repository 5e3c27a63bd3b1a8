"""A review server on loopback in a thread, and headless Debian Chromium driven by Selenium (no download)."""

from __future__ import annotations

import contextlib
import os
import shutil
import socket
import threading
import time
from pathlib import Path

import pytest

CHROMIUM = "/usr/bin/chromium"
CHROMEDRIVER = "/usr/bin/chromedriver"
START_TIMEOUT_S = 15.0


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


@contextlib.contextmanager
def running_server(config):
    """Serve ``config`` with uvicorn on 127.0.0.1 in a thread; stopped (and joined) on exit."""
    import uvicorn

    from surfinspect.review.app import create_app

    port = free_port()
    server = uvicorn.Server(uvicorn.Config(create_app(config), host="127.0.0.1", port=port, log_level="warning"))
    thread = threading.Thread(target=server.run, daemon=True)
    thread.start()
    deadline = time.monotonic() + START_TIMEOUT_S
    while not server.started:
        if time.monotonic() > deadline or not thread.is_alive():
            server.should_exit = True
            raise RuntimeError("the review server did not start in time")
        time.sleep(0.05)
    try:
        yield f"http://127.0.0.1:{port}"
    finally:
        server.should_exit = True
        thread.join(timeout=10)


def chromium_missing() -> str | None:
    for path in (CHROMIUM, CHROMEDRIVER):
        if not (os.path.isfile(path) and os.access(path, os.X_OK)):
            return f"{path} not installed (apt-get install chromium chromium-driver; .ci/run does it)"
    try:
        import selenium  # noqa: F401
    except ImportError:
        return "selenium not installed (pip install -e '.[test]')"
    return None


@contextlib.contextmanager
def chromium(profile: Path):
    """Headless Chromium through Debian's chromedriver, with a fresh profile and no network of its own."""
    reason = chromium_missing()
    if reason:
        pytest.skip(reason)
    from selenium import webdriver
    from selenium.webdriver.chrome.service import Service

    os.environ.setdefault("SE_OFFLINE", "true")  # Selenium Manager must not look anything up
    options = webdriver.ChromeOptions()
    options.binary_location = CHROMIUM
    for flag in (
        "--headless",
        "--no-sandbox",
        "--disable-gpu",
        "--disable-quic",
        "--no-first-run",
        "--disable-background-networking",
        "--disable-component-update",
        "--disable-sync",
        "--disable-dev-shm-usage",
        f"--user-data-dir={profile}",
        "--window-size=1400,1000",
    ):
        options.add_argument(flag)
    driver = webdriver.Chrome(service=Service(executable_path=CHROMEDRIVER), options=options)
    driver.set_page_load_timeout(30)
    driver.set_script_timeout(15)
    try:
        yield driver
    finally:
        driver.quit()
        shutil.rmtree(profile, ignore_errors=True)


def by_css(driver, css):
    from selenium.webdriver.common.by import By

    return driver.find_element(By.CSS_SELECTOR, css)


def all_css(driver, css):
    from selenium.webdriver.common.by import By

    return driver.find_elements(By.CSS_SELECTOR, css)


def unnamed_controls(driver) -> list[str]:
    """Every link, button and form field whose computed accessible name (Chromium's) is empty."""
    out = []
    for el in all_css(driver, "a[href], button, input:not([type=hidden]), select, textarea, [tabindex='0']"):
        if el.is_displayed() and not (el.accessible_name or "").strip():
            out.append(el.get_attribute("outerHTML")[:120])
    return out


def tab_order(driver, steps: int) -> list[str]:
    """Accessible names of the first ``steps`` elements Tab reaches on a freshly loaded page."""
    from selenium.webdriver.common.action_chains import ActionChains
    from selenium.webdriver.common.keys import Keys

    driver.refresh()
    seen = []
    for _ in range(steps):
        ActionChains(driver).send_keys(Keys.TAB).perform()
        seen.append(driver.switch_to.active_element.accessible_name)
    return seen
