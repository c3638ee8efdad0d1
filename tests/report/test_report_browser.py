"""report.html in a real browser: Debian's headless Chromium at a 1280x800 window.

The page of the tiny run (conftest.py) is loaded once; each test checks one thing a reader
would meet. What counts as "works in a browser" is the browser's own verdict: console errors
and failed loads as Chromium reports them, ``naturalWidth`` of each decoded image, the DOM's
element ids, layout boxes and the captured screenshot. A negative control proves each check
can fail. Without Chromium the tests skip with the install line, except under CI, where
scripts/setup installs it and a missing browser is a failure.
"""

from __future__ import annotations

import os
from pathlib import Path

import pytest

from .chromium import INSTALL_HINT, PageCheck, find_chromium, inspect_page

WIDTH, HEIGHT = 1280, 800
SUMMARY_ID = "decision-summary"
# A page of tables and four plots is taller than one screen; past 60,000 px something is
# repeated or unbounded (common practice, no source: a sanity bound, about 75 screens).
MAX_PAGE_HEIGHT = 60_000


def _browser() -> str:
    browser = find_chromium()
    if browser is None:
        if os.environ.get("CI"):
            pytest.fail(f"CI is set but {INSTALL_HINT}")
        pytest.skip(INSTALL_HINT)
    return browser


@pytest.fixture(scope="module")
def page(tiny_run) -> PageCheck:
    """The tiny run's report.html as headless Chromium saw it."""
    return inspect_page(tiny_run / "report.html", WIDTH, HEIGHT, SUMMARY_ID,
                        browser=_browser())


def test_page_loads_at_the_window_size_within_the_time_budget(page):
    assert page.facts["viewport"] == {"width": WIDTH, "height": HEIGHT}
    assert page.seconds < 30, page.seconds


def test_no_console_errors(page):
    assert page.console_errors == []


def test_every_image_decodes(page):
    images = page.facts["images"]
    assert len(images) >= 4, images  # the four plots of the report
    for image in images:
        assert image["scheme"] == "data", image  # embedded, not fetched
        assert image["width"] > 0 and image["height"] > 0, image


def test_every_in_page_link_has_its_target(page):
    broken = [link["href"] for link in page.facts["links"] if link["local"] and not link["exists"]]
    assert broken == []
    # a link to anywhere but this page would leave the file
    assert [link["href"] for link in page.facts["links"] if not link["local"]] == []


def test_page_is_self_contained(page):
    assert page.requests and page.requests[0] == page.url  # the page itself was loaded
    assert page.outside_requests == []


def test_full_page_screenshot_covers_the_whole_page(page):
    width, height = page.screenshot_size
    assert width == WIDTH
    assert HEIGHT < height <= MAX_PAGE_HEIGHT, height
    # not cut off: as tall as the document the browser laid out
    assert height == pytest.approx(page.facts["scrollHeight"], abs=2)


def test_decision_summary_is_visible_in_the_first_screen(page):
    probe = page.facts["probe"]
    assert probe is not None, f"no element id={SUMMARY_ID!r} in report.html"
    assert probe["shown"] and probe["width"] > 0 and probe["height"] > 0, probe
    assert 0 <= probe["top"] < HEIGHT, probe  # it starts within the first 800 px


def test_each_check_can_fail_on_a_broken_page(tmp_path: Path):
    """Negative control: a page with every fault the checks above look for."""
    broken = tmp_path / "broken.html"
    broken.write_text(
        '<!DOCTYPE html><html><head><meta charset="utf-8"><title>x</title></head><body>'
        '<div style="height:2000px"></div><p id="decision-summary">late</p>'
        '<a href="#missing">broken link</a>'
        '<img alt="bad" src="data:image/png;base64,AAAA">'
        '<img alt="remote" src="http://127.0.0.1:9/remote.png">'
        '<script>console.error("planted error")</script></body></html>',
        encoding="utf-8",
    )
    seen = inspect_page(broken, WIDTH, HEIGHT, SUMMARY_ID, browser=_browser())
    assert any("planted error" in e for e in seen.console_errors), seen.console_errors
    assert [i["width"] for i in seen.facts["images"]] == [0, 0]
    assert [(x["href"], x["exists"]) for x in seen.facts["links"]] == [("#missing", False)]
    assert seen.outside_requests == ["http://127.0.0.1:9/remote.png"]
    assert seen.facts["probe"]["top"] >= HEIGHT  # below the first screen
