"""The reports as a person sees them: Debian's chromium, headless, driven by selenium.

One browser for the module. Each report is opened from its file with the Chrome
DevTools Protocol's network events recorded (performance log) and the console
collected: the page must request nothing but itself, log nothing, show its numbers
as text, load every image, fit a phone's and a desktop's width, keep hostile text
as text, and print on A4 with its sections on their own pages. Checks are common
practice, no source; the protocol's events are as documented by the Chrome
DevTools Protocol (Network.requestWillBeSent, Page.printToPDF).
"""

from __future__ import annotations

import io
import json
import os
import re

import pytest
import yaml

from noisecal.history import printable
from tests.report.conftest import HOSTILE, chromium_paths

JOBS = ("static", "recheck", "motion", "odometry", "targets", "toy", "unit")
PHONE, DESKTOP = (390, 844), (1280, 900)


@pytest.fixture(scope="module")
def browser():
    browser_path, driver_path = chromium_paths()
    if browser_path is None or driver_path is None:
        reason = ("Debian's chromium and chromium-driver are not installed "
                  "(apt-get install chromium chromium-driver; make test installs them)")
        if os.environ.get("CI"):
            pytest.fail(reason + ": CI must run the browser tests")
        pytest.skip(reason)
    from selenium import webdriver
    from selenium.webdriver.chrome.service import Service

    opts = webdriver.ChromeOptions()
    opts.binary_location = browser_path
    for arg in ("--headless=new", "--no-sandbox", "--disable-gpu", "--disable-dev-shm-usage",
                "--hide-scrollbars", "--no-first-run", "--disable-extensions",
                "--disable-background-networking", "--disable-component-update",
                "--disable-sync", "--metrics-recording-only"):
        opts.add_argument(arg)
    opts.set_capability("goog:loggingPrefs", {"performance": "ALL", "browser": "ALL"})
    driver = webdriver.Chrome(service=Service(driver_path), options=opts)
    try:
        yield driver
    finally:
        driver.quit()


def _viewport(driver, size, mobile):
    driver.execute_cdp_cmd("Emulation.setDeviceMetricsOverride", {
        "width": size[0], "height": size[1], "deviceScaleFactor": 1, "mobile": mobile})


def _open(driver, path, size=DESKTOP, mobile=False):
    """Open ``path``; return (URLs requested, console entries)."""
    _viewport(driver, size, mobile)
    driver.get_log("performance")  # drain what earlier pages left
    driver.get_log("browser")
    url = path.resolve().as_uri()
    driver.get(url)
    driver.execute_script("return document.readyState")
    requested = []
    for entry in driver.get_log("performance"):
        msg = json.loads(entry["message"])["message"]
        if msg["method"] == "Network.requestWillBeSent":
            requested.append(msg["params"]["request"]["url"])
    return url, requested, driver.get_log("browser")


@pytest.mark.parametrize("name", JOBS)
def test_loads_offline_with_a_clean_console(browser, made, name):
    """Nothing is requested but the file itself (inline images are data: URIs, which the
    browser decodes without a request), and the console stays empty (a blocked request
    or a CSP violation would be logged there)."""
    url, requested, console = _open(browser, made[name])
    assert [u for u in requested if not u.startswith("data:")] == [url]
    assert console == []
    assert browser.execute_script("return document.scripts.length") == 0


@pytest.mark.parametrize("name", JOBS)
def test_images_load_with_their_size(browser, made, name):
    """Every image decodes: complete, with the natural size its PNG header gives."""
    _open(browser, made[name])
    sizes = browser.execute_script(
        "return Array.from(document.images).map(i => [i.complete, i.naturalWidth, "
        "i.naturalHeight, i.getAttribute('width'), i.getAttribute('height')])")
    assert sizes
    for complete, w, h, aw, ah in sizes:
        assert complete and w > 0 and h > 0 and (w, h) == (int(aw), int(ah))


def _overflow(driver):
    return driver.execute_script("""
        const w = document.documentElement.clientWidth, bad = [];
        for (const el of document.body.querySelectorAll('*')) {
          const r = el.getBoundingClientRect();
          if (r.width === 0 && r.height === 0) continue;
          if (r.right > w + 0.5 || r.left < -0.5)
            bad.push(`${el.tagName}.${el.className} ${r.left.toFixed(1)}..${r.right.toFixed(1)}`);
        }
        return [document.documentElement.scrollWidth, w, bad.slice(0, 8)];""")


@pytest.mark.parametrize("name", JOBS)
@pytest.mark.parametrize("size,mobile", [(PHONE, True), (DESKTOP, False)],
                         ids=["phone", "desktop"])
def test_nothing_overflows_the_viewport(browser, made, name, size, mobile, tmp_path):
    """At a phone's width (390 px, mobile viewport) and a desktop's (1280 px) no element
    reaches beyond the viewport's sides, the page does not scroll sideways, and the
    screenshot is the viewport's width with text drawn on it."""
    from matplotlib.image import imread

    _open(browser, made[name], size, mobile)
    scroll, width, bad = _overflow(browser)
    assert width == size[0]
    assert scroll <= width and bad == [], bad
    png = browser.get_screenshot_as_png()
    (tmp_path / f"{name}-{size[0]}.png").write_bytes(png)
    img = imread(io.BytesIO(png))
    assert img.shape[1] == size[0]
    dark = (img[..., :3].mean(axis=2) < 0.5).mean()
    assert dark > 0.005  # text is drawn, not a blank page


def test_key_numbers_are_text(browser, made):
    """The headline numbers are in the DOM as text: the toy result's (written by hand)
    and the static job's terms as its YAML block gives them, to 4 significant digits."""
    _open(browser, made["toy"])
    head = browser.find_element("id", "headline").text
    for s in ("1.234e-05", "1.1e-05 … 1.4e-05", "< 3.2e-07", "0.5678", "rad/s/Hz^0.5"):
        assert s in head
    block = yaml.safe_load((made["folder"] / "static.yaml").read_text())
    _open(browser, made["static"])
    head = browser.find_element("id", "headline").text
    for ch, entry in block["channels"].items():
        for term in ("white_noise", "bias_instability", "bias_random_walk"):
            e = entry[term]
            shown = f"{e['value']:.4g}" if "value" in e else f"< {e['upper_bound']:.4g}"
            assert shown in head, (ch, term, shown)
    prov = browser.find_element("id", "provenance").text
    assert block["provenance"]["input"]["sha256"] in prov
    assert str(block["provenance"]["input"]["size_bytes"]) in prov


def test_hostile_serial_is_shown_as_text(browser, made):
    """A serial holding a script, quotes, markup and a newline: no script runs, no
    element is made of it, and the page shows it as written (newline as \\n)."""
    for name in ("unit", "toy"):
        _open(browser, made[name])
        assert browser.execute_script("return typeof window.__pwned") == "undefined"
        assert browser.execute_script(
            "return document.querySelectorAll('script, b').length") == 0
        assert printable(HOSTILE) in browser.find_element("tag name", "body").text
    _open(browser, made["unit"])
    assert browser.find_element("id", "serial").text == printable(HOSTILE)
    assert browser.title.endswith(printable(HOSTILE))


@pytest.mark.parametrize("name", ["static", "unit"])
def test_prints_on_a4_with_a_page_per_section(browser, made, name):
    """Printed to PDF on A4 (210 × 297 mm = 8.27 × 11.69 in, ISO 216), each section
    starts a page: at least as many pages as sections."""
    _open(browser, made[name])
    sections = browser.execute_script("return document.querySelectorAll('section').length")
    pdf = browser.execute_cdp_cmd("Page.printToPDF", {
        "paperWidth": 8.27, "paperHeight": 11.69, "printBackground": True,
        "preferCSSPageSize": True})
    import base64

    data = base64.b64decode(pdf["data"])
    pages = len(re.findall(rb"/Type\s*/Page(?!s)", data))
    assert pages >= sections >= 3
    box = re.search(rb"/MediaBox\s*\[\s*0\s+0\s+([\d.]+)\s+([\d.]+)\s*\]", data)
    assert box and (float(box[1]), float(box[2])) == pytest.approx((595.3, 841.9), abs=1.5)
