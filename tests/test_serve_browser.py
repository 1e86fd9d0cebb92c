"""`coverkit serve` in a real browser: Debian's headless Chromium driven by Selenium through the installed
chromedriver (no browser download). Load the page, add a station by clicking the map, and check that the figures
panel shows the covered share the JSON API gives for the same change (issue 12, tests).

Skips with a reason where no browser is installed; fails instead when ``COVERKIT_CI`` is set (``.ci/run``).
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
import tempfile
import time
import urllib.request
from pathlib import Path

import pytest

from .conftest import DEMO, REPO, demo_study_head

CHROMIUM, DRIVER = Path("/usr/bin/chromium"), Path("/usr/bin/chromedriver")
#: A point beside a road in the demo county's south-east (the Tarn Oxle green candidate site, data/demo).
CLICK_LON, CLICK_LAT = -34.875526, 41.058088


def _need_browser() -> None:
    missing = [str(p) for p in (CHROMIUM, DRIVER) if not p.exists()]
    try:
        import selenium  # noqa: F401
    except ImportError:
        missing.append("the selenium package")
    if missing:
        reason = f"no browser: {', '.join(missing)} missing (apt-get install chromium chromium-driver)"
        if os.environ.get("COVERKIT_CI"):
            pytest.fail(reason + "; CI must run the browser tests")
        pytest.skip(reason)


@pytest.fixture(scope="module")
def server(tmp_path_factory):
    _need_browser()
    folder = tmp_path_factory.mktemp("serve-browser")
    study = folder / "study.toml"
    study.write_text(
        demo_study_head("browser test")
        + f"""
[[demand]]
name = "residents"
raster = "{DEMO / "population.tif"}"
[[standard]]
name = "ALS 8 min"
turnout_s = 60
travel_s = 480
[outputs]
folder = "{folder / "out"}"
"""
    )
    env = {**os.environ, "PYTHONPATH": str(REPO)}
    cmd = [sys.executable, "-m", "coverkit", "serve", str(study), "--port", "0", "--no-browser", "--quiet"]
    proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env, cwd=REPO)
    line = proc.stdout.readline().strip()
    if not line.startswith("ready http://127.0.0.1:"):
        proc.kill()
        pytest.fail(f"serve did not print its ready line: {line!r} {proc.stderr.read()[-500:]}")
    yield line.split(" ", 1)[1]
    proc.terminate()
    proc.wait(timeout=20)


@pytest.fixture(scope="module")
def browser(server):
    from selenium import webdriver
    from selenium.webdriver.chrome.service import Service

    profile = tempfile.mkdtemp(prefix="coverkit-chromium-")
    opts = webdriver.ChromeOptions()
    opts.binary_location = str(CHROMIUM)
    for arg in (
        "--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
        "--disable-component-update", "--disable-sync", "--no-first-run", "--disable-dev-shm-usage",
        f"--user-data-dir={profile}", "--window-size=1400,900",
    ):  # fmt: skip
        opts.add_argument(arg)
    driver = webdriver.Chrome(service=Service(str(DRIVER)), options=opts)
    yield driver
    driver.quit()
    shutil.rmtree(profile, ignore_errors=True)


def _wait(driver, script: str, timeout_s: float = 60.0):
    end = time.monotonic() + timeout_s
    while time.monotonic() < end:
        value = driver.execute_script(script)
        if value:
            return value
        time.sleep(0.2)
    raise AssertionError(f"timed out waiting for: {script}; page says {driver.find_element('id', 'message').text}")


def test_add_station_by_click_shows_api_share(server, browser):
    from selenium.webdriver.common.action_chains import ActionChains

    browser.get(server)
    first = _wait(browser, "return document.body.dataset.ready")
    assert "Planning estimates only" in browser.find_element("id", "caution").text
    browser.find_element("css selector", "#tools button[data-tool='add']").click()
    pt = browser.execute_script(f"const p = map.latLngToContainerPoint([{CLICK_LAT}, {CLICK_LON}]); return [p.x, p.y];")
    box = browser.find_element("id", "map")
    size = box.size
    ActionChains(browser).move_to_element_with_offset(
        box, int(pt[0] - size["width"] / 2), int(pt[1] - size["height"] / 2)
    ).click().perform()
    _wait(browser, f"return document.body.dataset.ready !== '{first}'")
    changes = browser.execute_script("return state.changes.map(c => [c.kind, c.id, c.lon, c.lat]);")
    assert len(changes) == 1 and changes[0][:2] == ["add", "N1"], changes
    shown = float(browser.find_element("css selector", "#figures tbody tr .share-now").get_attribute("data-value"))
    _, lon, lat = changes[0][1:]
    body = {"scenario": {"name": "tried in coverkit serve"}, "base_change": [{"add": {"id": "N1", "lon": lon,
            "lat": lat, "units": 1}}]}  # fmt: skip
    token = server.split("token=")[1]
    req = urllib.request.Request(
        server.split("/?")[0] + "/api/compare",
        data=json.dumps(body).encode(),
        headers={"Content-Type": "application/json", "Authorization": f"Bearer {token}"},
    )
    with urllib.request.urlopen(req, timeout=60) as r:
        rows = json.loads(r.read())["rows"]
    assert shown == pytest.approx(rows[0]["covered_share_after"], rel=1e-12)
    # a station added in the south-east gains coverage there (the county's gaps lie on its edges: data/demo)
    assert rows[0]["covered_share_after"] > rows[0]["covered_share_before"]
    assert "→" in browser.find_element("css selector", "#figures tbody tr .share").text
