"""The interactive map of the HTML reports (issue 12, point 5): one self-contained file that opens offline.

Outside checks: the HTML is read with Python's own HTML parser (html.parser, the WHATWG tokenising rules) to list
every URL a browser would fetch (script/img/iframe/... ``src``, stylesheet ``href``, CSS ``url()`` and
``@import``); the GeoJSON is read with the standard ``json`` module and its figures compared with the study's
GeoPackage as GDAL reads it (pyogrio) and with :func:`coverkit.coverage.per_base`; the drawn map is checked in the
system Chromium (a real browser engine, via selenium) opened from ``file://``, so no server is involved.

Skips the browser test with a reason where no browser is installed; fails instead when ``COVERKIT_CI`` is set.
"""

from __future__ import annotations

import json
import math
import os
import re
import shutil
import tempfile
import time
from html.parser import HTMLParser
from pathlib import Path

import pandas as pd
import pyogrio
import pytest

from coverkit.coverage import per_base
from coverkit.layer_names import layer_name

from .conftest import DEMO, REPO, demo_study_head

CHROMIUM, DRIVER = Path("/usr/bin/chromium"), Path("/usr/bin/chromedriver")
#: Attributes whose URL a browser loads by itself (HTML Living Standard: fetching elements), per tag.
FETCHED = {
    "script": ("src",), "img": ("src", "srcset"), "iframe": ("src",), "embed": ("src",), "object": ("data",),
    "source": ("src", "srcset"), "video": ("src", "poster"), "audio": ("src",), "track": ("src",),
    "input": ("src",), "image": ("href",), "use": ("href",),
}  # fmt: skip
REMOTE = re.compile(r"^\s*(https?:)?//", re.IGNORECASE)
CSS_URL = re.compile(r"""url\(\s*['"]?([^'")]+)|@import\s+['"]([^'"]+)""", re.IGNORECASE)


class _Fetches(HTMLParser):
    """Every URL the page would fetch on load: element sources, stylesheets, CSS urls; and the inline JSON."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.urls: list[str] = []
        self.json: dict[str, str] = {}
        self._in: tuple[str, dict] | None = None
        self._text: list[str] = []

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        for name in FETCHED.get(tag, ()):
            if a.get(name):
                self.urls.append(a[name])
        if tag == "link" and {"stylesheet", "preload", "icon"} & set((a.get("rel") or "").lower().split()):
            self.urls.append(a.get("href") or "")
        if a.get("style"):
            self.urls += [u or i for u, i in CSS_URL.findall(a["style"])]
        if tag in ("style", "script"):
            self._in, self._text = (tag, a), []

    def handle_data(self, data):
        if self._in:
            self._text.append(data)

    def handle_endtag(self, tag):
        if self._in and tag == self._in[0]:
            text = "".join(self._text)
            if tag == "style":
                self.urls += [u or i for u, i in CSS_URL.findall(text)]
            elif self._in[1].get("type") == "application/json":
                self.json[self._in[1].get("id")] = text
            self._in = None


def _parse(path: Path) -> _Fetches:
    p = _Fetches()
    p.feed(path.read_text(encoding="utf-8"))
    p.close()
    return p


def _map_data(path: Path) -> dict:
    return json.loads(_parse(path).json["ckmap-data"])


@pytest.fixture(scope="module")
def demo_run(demo_command):
    """The demo study (examples/demo-study.toml, the template ``coverkit demo`` writes and runs), maps and report
    included: the study run of the session's ``coverkit demo`` (tests/conftest.py)."""
    return demo_command[2]


@pytest.fixture(scope="module")
def compared(tmp_path_factory):
    """The flood scenario (closed roads, slower roads) on the demo county, one standard, with its report (a 200 m area
    grid: the checks are sums over its areas and what the browser draws, which hold at any cell size)."""
    from coverkit.compare_run import compare_study
    from coverkit.report.compare_report import write_compare_report

    folder = tmp_path_factory.mktemp("web-map-compare")
    study = folder / "study.toml"
    study.write_text(
        demo_study_head("web map compare")
        + f"""[[demand]]
name = "residents"
raster = "{DEMO / "population.tif"}"
[[demand]]
name = "calls"
points = "{DEMO / "incidents.csv"}"
kind = "incidents"
[[standard]]
name = "ALS 8 min"
turnout_s = 60
travel_s = 480
[outputs]
grid_cell_m = 200
"""
    )
    run = compare_study(study, REPO / "examples" / "scenarios" / "flood-and-winter.toml", folder / "out")
    run.outputs.update(write_compare_report(run, folder / "out"))
    return run


@pytest.mark.parametrize("which", ["study", "compare"])
def test_report_fetches_nothing_from_the_web(demo_run, compared, which):
    path = demo_run.outputs["report"] if which == "study" else compared.outputs["report"]
    parsed = _parse(path)
    remote = [u for u in parsed.urls if REMOTE.match(u)]
    assert not remote, remote
    # the only other URLs are the embedded PNGs (data: URIs): nothing relative to fetch from disk either
    assert all(u.startswith("data:") or u == "#default#VML" for u in parsed.urls), set(parsed.urls) - {""}
    text = path.read_text(encoding="utf-8")
    assert "BSD 2-Clause License" in text and "Leaflet 1.9.4" in text  # the vendored library's licence, inlined
    assert "marker-icon.png" not in text.split("</style>")[0]  # circle markers only: no marker images


def test_gap_figures_equal_the_geopackage(demo_run):
    data = _map_data(demo_run.outputs["report"])
    gpkg = demo_run.outputs["layers"]
    for srun in demo_run.runs:
        name = srun.standard.name
        table = pyogrio.read_dataframe(gpkg, layer=layer_name("gaps", standard=name), read_geometry=False)
        feats = data["standards"][name]["now"]["gaps"]["features"]
        shown = pd.DataFrame([f["properties"] for f in feats]).set_index("gap_id").sort_index()
        table = table.set_index("gap_id").sort_index()
        assert list(shown.index) == list(table.index), name
        cols = [c for c in table.columns if c.startswith("uncovered_")] + ["area_km2"]
        assert cols and set(cols) <= set(shown.columns)
        pd.testing.assert_frame_equal(shown[cols], table[cols], check_dtype=False, rtol=1e-9)
        # coordinates: EPSG:4326 longitudes/latitudes with at most 6 decimals
        ring = feats[0]["geometry"]["coordinates"][0]
        ring = ring[0] if isinstance(ring[0][0], list) else ring
        assert all(-180 <= x <= 180 and -90 <= y <= 90 for x, y in ring)
        assert all(len(repr(v).split(".")[-1]) <= 6 for pt in ring for v in pt)


def test_base_figures_equal_per_base(demo_run):
    data = _map_data(demo_run.outputs["report"])
    feats = {f["properties"]["id"]: f["properties"]["figures"] for f in data["bases"]["now"]["features"]}
    assert set(feats) == set(demo_run.bases["id"].astype(str))
    for srun in demo_run.runs:
        for dem, res in srun.results.items():
            for row in per_base(res).to_dict("records"):
                shown = feats[row["base_id"]][srun.standard.name][dem]
                for key in ("first_due_demand", "sole_cover", "first_due_covered", "reaches_in_standard"):
                    assert shown[key] == pytest.approx(row[key], rel=1e-12, abs=1e-9), (row["base_id"], key)


def test_compare_map_changed_areas_add_up(compared):
    data = _map_data(compared.outputs["report"])
    assert data["states"] == ["before", "after"]
    assert len(data["closed_roads"]["features"]) == len(compared.changes.closed) > 0
    rows = compared.summary.set_index(["standard", "demand"])
    residents = next(s.name for s in compared.study.demand if s.kind == "residents")
    for std, fc in data["changed"].items():
        props = pd.DataFrame([f["properties"] for f in fc["features"]])
        weights = props.groupby("change")["weight"].sum()
        row = rows.loc[(std, residents)]
        # changed_areas puts every point that loses (gains) coverage in exactly one lost (gained) area
        assert weights.get("lost", 0.0) == pytest.approx(row["lost_weight"], rel=1e-9, abs=1e-6)
        assert weights.get("gained", 0.0) == pytest.approx(row["gained_weight"], rel=1e-9, abs=1e-6)
        assert row["lost_weight"] > 0  # the flood closes roads: someone loses coverage
    # the roads carry a ramp stop before and after; the flood makes some roads slower or unreached
    stops = pd.DataFrame([f["properties"] for f in data["roads"]["features"]])
    assert (stops["after"] != stops["before"]).any()


# -- in a real browser ---------------------------------------------------------------------------------------------
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
def browser():
    _need_browser()
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
    opts.set_capability("goog:loggingPrefs", {"browser": "ALL"})
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
    raise AssertionError(f"timed out waiting for: {script}")


PATHS = "return document.querySelectorAll('#ckmap .leaflet-overlay-pane path, #ckmap .leaflet-pane svg path').length;"


def _toggle(driver, name: str) -> int:
    before = driver.execute_script("return document.getElementById('ckmap').dataset.drawn;")
    driver.find_element("css selector", f"#ckmap input[name='{name}']").click()
    _wait(driver, f"return document.getElementById('ckmap').dataset.drawn !== '{before}'")
    return driver.execute_script(PATHS)


#: A screen point (whole pixels) where the first hit-testable path of a pane is the topmost element.
FIND_POINT = """
for (const p of document.querySelectorAll(`#ckmap .leaflet-${arguments[0]}-pane path.leaflet-interactive`)) {
  const n = p.getTotalLength(), m = p.getScreenCTM();
  for (let k = 0; k <= 40; k++) {
    const q = p.getPointAtLength((n * k) / 40);
    const x = Math.round(q.x * m.a + m.e), y = Math.round(q.y * m.d + m.f);
    if (document.elementFromPoint(x, y) === p) return [x, y];
  }
}
return null;
"""


def _hover(driver, pane: str) -> str:
    """Move the mouse onto a path of ``pane`` and give the tooltip text shown (base labels left out)."""
    from selenium.webdriver.common.actions.action_builder import ActionBuilder

    driver.execute_script("document.getElementById('ckmap').scrollIntoView()")
    point = driver.execute_script(FIND_POINT, pane)
    assert point, f"no path of the {pane} pane can be hovered"
    action = ActionBuilder(driver)
    action.pointer_action.move_to_location(*point)
    action.perform()
    tips = "return [...document.querySelectorAll('#ckmap .leaflet-tooltip:not(.ckmap-label)')].map(t => t.innerText)"
    return _wait(driver, f"{tips}.join('\\n')")


def _num(x: float) -> str:
    return f"{math.floor(x + 0.5):,}"  # JavaScript's Math.round (halves up), as the page rounds


@pytest.mark.parametrize("which", ["study", "compare"])
def test_map_draws_from_file(demo_run, compared, browser, which):
    path = demo_run.outputs["report"] if which == "study" else compared.outputs["report"]
    browser.get_log("browser")  # drop what an earlier page logged
    browser.get(Path(path).resolve().as_uri())
    _wait(browser, "return window.coverkitMaps && window.coverkitMaps.ckmap && document.getElementById('ckmap')"
          ".dataset.drawn")  # fmt: skip
    panes = browser.execute_script(
        "return [...document.querySelectorAll('#ckmap .leaflet-pane')].map(p => p.className)"
    )
    assert any("leaflet-map-pane" in p for p in panes) and any("leaflet-overlay-pane" in p for p in panes), panes
    caution = browser.find_element("css selector", "#ckmap .ckmap-caution")
    assert caution.is_displayed() and "Planning estimates only" in caution.text
    data = _map_data(path)
    std = next(iter(data["standards"]))
    state = data["states"][-1]
    n_gaps = len(data["standards"][std][state]["gaps"]["features"])
    drawn = browser.execute_script(PATHS)
    assert drawn > 0
    # Leaflet draws one SVG path per feature: hiding the gaps takes away exactly that many paths
    assert _toggle(browser, "gaps") == drawn - n_gaps
    assert _toggle(browser, "gaps") == drawn
    n_due = len(data["standards"][std][state]["first_due"]["features"])
    assert _toggle(browser, "first_due") == drawn + n_due
    assert _toggle(browser, "first_due") == drawn  # back to the gaps alone in the areas pane
    if which == "compare":
        # switching to before recolours the roads from their before ramp stops
        colours = (
            "return [...document.querySelectorAll('#ckmap .leaflet-ck-roads-pane path')]"
            ".map(p => p.getAttribute('stroke')).join()"
        )
        after = browser.execute_script(colours)
        browser.find_element("css selector", "#ckmap input[name='state'][value='before']").click()
        _wait(browser, f"return ({colours.removeprefix('return ')}) !== {json.dumps(after)}")
        state = "before"
    # hover: a gap shows its number and uncovered counts, a base its per-base figures (of the state shown)
    text = _hover(browser, "ck-areas")
    gap_id = int(re.search(r"Gap (\d+)", text).group(1))
    gap = next(
        f["properties"]
        for f in data["standards"][std][state]["gaps"]["features"]
        if f["properties"]["gap_id"] == gap_id
    )
    for key in (k for k in gap if k.startswith("uncovered_")):
        assert f"uncovered {key.removeprefix('uncovered_')}: {_num(gap[key])}" in text, (key, text)
    text = _hover(browser, "ck-bases")
    base = next(
        f["properties"] for f in data["bases"][state]["features"] if re.search(rf"\b{f['properties']['id']}\b", text)
    )
    for figures in base["figures"][std].values():
        assert (
            f"first-due {_num(figures['first_due_demand'])}" in text
            and f"sole cover {_num(figures['sole_cover'])}" in text
        )
    # nothing fetched from the web and no errors on the console
    fetched = browser.execute_script("return performance.getEntriesByType('resource').map(r => r.name);")
    assert not [u for u in fetched if REMOTE.match(u) or u.startswith("http")], fetched
    errors = [e for e in browser.get_log("browser") if e["level"] == "SEVERE"]
    assert not errors, errors
