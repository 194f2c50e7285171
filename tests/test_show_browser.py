"""The template page in a real browser (headless Chromium through Playwright)."""

from __future__ import annotations

from pathlib import Path

import pytest

pytestmark = pytest.mark.browser

playwright_api = pytest.importorskip("playwright.sync_api", reason="Playwright for Python is not installed")

import layoutcheck as lc  # noqa: E402
from test_report_browser import ARGS, CHROMIUM  # noqa: E402
from test_show import HOSTILE, REFERENCE, hostile_template  # noqa: E402

ROOT = Path(__file__).resolve().parent.parent


@pytest.fixture(scope="module")
def page(tmp_path_factory):
    if not Path(CHROMIUM).exists():
        pytest.skip(f"{CHROMIUM} is not installed")
    path = lc.show_template(hostile_template(), tmp_path_factory.mktemp("show") / "t.html", reference=REFERENCE)
    url = path.resolve().as_uri()
    with playwright_api.sync_playwright() as p:
        b = p.chromium.launch(executable_path=CHROMIUM, args=ARGS)
        pg = b.new_page(viewport={"width": 1280, "height": 1600})
        events = {"console": [], "pageerror": [], "requests": []}
        pg.on("console", lambda m: events["console"].append((m.type, m.text)))
        pg.on("pageerror", lambda e: events["pageerror"].append(str(e)))
        pg.on("request", lambda r: events["requests"].append(r.url))
        pg.goto(url)
        pg.wait_for_load_state("networkidle")
        yield pg, events, url
        b.close()


def test_opens_without_errors_or_requests(page):
    pg, events, url = page
    assert events["pageerror"] == [] and events["console"] == []
    assert [u for u in events["requests"] if u != url and not u.startswith("data:")] == []
    assert pg.eval_on_selector_all("img", "els => els.filter(e => !(e.complete && e.naturalWidth > 0)).length") == 0
    assert pg.evaluate("typeof window.__pwned") == "undefined"
    assert HOSTILE in pg.inner_text("table.elements")
    assert pg.eval_on_selector_all("script", "els => els.length") == 1


def test_search_filters_rows_and_marks_the_picture(page):
    pg, events, _ = page
    n = pg.eval_on_selector_all("tbody tr[data-id]", "els => els.length")
    pg.fill("input[data-search]", "checkbox-00")
    shown = pg.eval_on_selector_all("tbody tr[data-id]", "els => els.filter(e => !e.hidden).map(e => e.dataset.id)")
    assert shown and all(s.startswith("checkbox-00") for s in shown)
    hits = pg.eval_on_selector_all("svg .hit", "els => els.map(e => e.dataset.id)")
    assert hits == shown
    assert pg.inner_text(".count") == f"{len(shown)} of {n} elements"
    pg.fill("input[data-search]", "")
    assert pg.eval_on_selector_all("tbody tr[data-id]", "els => els.filter(e => !e.hidden).length") == n
    assert events["pageerror"] == []
