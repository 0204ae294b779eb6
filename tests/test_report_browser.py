"""The report pages in a real browser: headless Chromium (Debian's package, driven through chromedriver).

Loaded from a file, as from an e-mail attachment: every figure renders (a natural
width above zero), no request leaves the page (the browser's own network log: only
the file itself and data: URLs), the verdict sentence and the comparison-star table
are what the archive's stored night report says, and a screenshot is not blank.
``.ci/run`` installs the packages chromium and chromium-driver when they are absent;
these tests skip, saying so, only when no browser could be installed.
"""

from __future__ import annotations

import io
import json
import shutil
from pathlib import Path

import numpy as np
import pytest

import varstar

from helpers import run

CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser") or shutil.which("google-chrome")
DRIVER = shutil.which("chromedriver")
pytestmark = pytest.mark.skipif(
    not (CHROMIUM and DRIVER),
    reason="no Chromium and chromedriver here (.ci/run installs Debian's chromium and chromium-driver)",
)


@pytest.fixture(scope="module")
def browser():
    from selenium import webdriver
    from selenium.webdriver.chrome.service import Service

    opts = webdriver.ChromeOptions()
    opts.binary_location = CHROMIUM
    for arg in ("--headless=new", "--no-sandbox", "--disable-gpu", "--disable-dev-shm-usage", "--window-size=1200,900"):
        opts.add_argument(arg)
    opts.set_capability("goog:loggingPrefs", {"performance": "ALL"})
    drv = webdriver.Chrome(service=Service(DRIVER), options=opts)  # the driver given: nothing is downloaded
    yield drv
    drv.quit()


def _load(drv, page: Path) -> list[str]:
    """Open ``page``; return the URL of every request the page made (from the browser's network log)."""
    drv.get_log("performance")  # empty the log of earlier pages
    drv.get(page.resolve().as_uri())
    drv.execute_script("return document.readyState")
    urls = []
    for entry in drv.get_log("performance"):
        msg = json.loads(entry["message"])["message"]
        if msg["method"] == "Network.requestWillBeSent":
            urls.append(msg["params"]["request"]["url"])
    return urls


def _not_blank(png: bytes) -> bool:
    import matplotlib.image as mpimg

    img = mpimg.imread(io.BytesIO(png), format="png")
    return img.shape[0] > 100 and float(np.std(img[..., :3])) > 0.02


@pytest.fixture(scope="module")
def pages(demo_archive_path, tmp_path_factory):
    d = tmp_path_factory.mktemp("pages")
    arch = d / "a.h5"
    shutil.copyfile(demo_archive_path, arch)
    label = "2026-09-19"  # the demo's night with passing clouds
    for argv in (["report", arch, label, "--html", d / "night.html"], ["report", arch, "--html", d / "archive.html"]):
        from varstar.cli import main

        assert main([str(a) for a in argv]) == 0
    return arch, label, d / "night.html", d / "archive.html"


def test_the_night_page_renders_offline_and_says_what_the_archive_says(browser, pages):
    arch, label, night_html, _ = pages
    urls = _load(browser, night_html)
    # no request left the page: the file itself, and figures as data: URLs
    assert all(u.startswith(("file:", "data:")) for u in urls), [u[:60] for u in urls]
    sizes = browser.execute_script("return Array.from(document.images).map(i => [i.naturalWidth, i.alt])")
    assert sizes and all(w > 0 and alt for w, alt in sizes), sizes
    rep = varstar.open_archive(arch).night_report(label)
    verdict = browser.find_element("id", "verdict").text
    used = sum(b["n_used"] for b in rep["bands"].values())
    assert f"{used} of {rep['n_exposures']}" in verdict, verdict
    rows = browser.execute_script(
        "return Array.from(document.querySelectorAll('#comparisons [data-star]')).map(r => [r.dataset.star, r.dataset.status])")
    comps = varstar.open_archive(arch).comparisons()
    comps = comps[(comps["night"] == label) & (comps["status"] != "not_comparison")]
    assert sorted(map(tuple, rows)) == sorted(zip(comps["star"], comps["status"])), rows
    assert _not_blank(browser.get_screenshot_as_png())


def test_the_archive_page_renders_offline_and_links_every_night(browser, pages):
    arch, _, _, archive_html = pages
    urls = _load(browser, archive_html)
    assert all(u.startswith(("file:", "data:")) for u in urls), [u[:60] for u in urls]
    sizes = browser.execute_script("return Array.from(document.images).map(i => i.naturalWidth)")
    assert sizes and min(sizes) > 0
    links = browser.execute_script(
        "return Array.from(document.querySelectorAll('a[href^=\"#night-\"]')).map(a => a.getAttribute('href').slice(1))")
    labels = list(varstar.open_archive(arch).nights()["night"])
    assert sorted(set(links)) == sorted(f"night-{lab}" for lab in labels)
    assert all(browser.execute_script(f"return !!document.getElementById('{i}')") for i in set(links))
    assert _not_blank(browser.get_screenshot_as_png())


def test_a_hostile_target_name_renders_as_text(browser, demo_data, tmp_path, capsys):
    text = (demo_data.folder / "target.toml").read_text(encoding="utf-8")
    lines = ['name = "<script>alert(1)</script>"' if ln.startswith("name =") else ln for ln in text.splitlines()]
    (tmp_path / "t.toml").write_text("\n".join(lines) + "\n", encoding="utf-8")
    arch = tmp_path / "a.h5"
    varstar.create_archive(arch, varstar.read_target(tmp_path / "t.toml"))
    varstar.ingest(arch, demo_data.nights[:1])
    rc, _, err = run(capsys, "report", arch, "--html", tmp_path / "x.html")
    assert rc == 0, err
    _load(browser, tmp_path / "x.html")
    assert "<script>alert(1)</script>" in browser.find_element("tag name", "body").text  # shown, not run
    assert browser.execute_script("return document.scripts.length === 0 || "
                                  "Array.from(document.scripts).every(s => !s.text.includes('alert(1)'))")
