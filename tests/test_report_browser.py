"""The HTML report in a real browser (headless Chromium through Playwright).

Two forms drawn here carry hostile label text; the label becomes the caption of a moved element,
so it reaches the report as untrusted text in several places. It must show as text, and nothing
it says may run.
"""

from __future__ import annotations

import struct
from pathlib import Path

import pytest

pytestmark = pytest.mark.browser

playwright_api = pytest.importorskip("playwright.sync_api", reason="Playwright for Python is not installed")

from layoutcheck.check import check_file, learn  # noqa: E402
from layoutcheck.report import write_report  # noqa: E402
from layoutcheck.verdict import Tolerances  # noqa: E402

SAMPLES = Path(__file__).resolve().parent.parent / "sample_forms"
CHROMIUM = "/usr/bin/chromium"
ARGS = ["--no-sandbox", "--disable-gpu", "--disable-background-networking", "--disable-component-update",
        "--disable-sync", "--no-first-run"]
PAYLOADS = {
    "KBH-901_attr_test.pdf": '<img src=x onerror="window.__pwned=1">',
    "KBH-902_script_test.pdf": "<script>window.__pwned=1</script>",
}
MM = 72.0 / 25.4  # points per mm (1 in = 25.4 mm, 1 pt = 1/72 in)


def draw_form(path: Path, payload: str, moved_mm: float = 0.0) -> None:
    """A small notice of the invented harbour board; the payload row moved right by ``moved_mm``."""
    from reportlab.lib.pagesizes import A4
    from reportlab.pdfgen import canvas

    w, h = A4
    c = canvas.Canvas(str(path), pagesize=A4)
    c.rect(15 * MM, 15 * MM, w - 30 * MM, h - 30 * MM)
    c.setFont("Helvetica-Bold", 14)
    c.drawString(25 * MM, h - 30 * MM, "Kestrel Bay Harbour Board - Test Notice")
    c.setFont("Helvetica", 9)
    for k, name in enumerate(["Vessel name", "Call sign", payload, "Flag state", "Master", "Berth"]):
        y = h - (50 + 22 * k) * MM
        dx = moved_mm * MM if name == payload else 0.0
        c.drawString(25 * MM + dx, y + 9 * MM, name)
        c.rect(25 * MM + dx, y, 80 * MM, 7 * MM)
        c.rect(120 * MM, y, 60 * MM, 7 * MM)
    c.line(25 * MM, 40 * MM, w - 25 * MM, 40 * MM)
    c.showPage()
    c.save()


@pytest.fixture(scope="module")
def built(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("browser")
    templates = [learn([str(SAMPLES / "references" / "KBH-101_vessel_arrival.pdf")], with_raster=False)]
    records = []
    for rel in ("inputs/101_old_revision.pdf", "inputs/101_exact.pdf", "inputs/101_rotated.pdf",
                "inputs/101_section_moved.pdf"):
        for rec in check_file(str(SAMPLES / rel), templates):
            rec["source"] = rel
            records.append(rec)
    for name, payload in PAYLOADS.items():
        ref, variant = tmp / name, tmp / name.replace("_test", "_moved")
        draw_form(ref, payload)
        draw_form(variant, payload, moved_mm=15.0)
        t = learn([str(ref)], with_raster=False)
        templates.append(t)
        # The two drawn forms differ in one label only: check each against its own template.
        (rec,) = list(check_file(str(variant), [templates[0], t]))
        # The planted fault: the payload's label and box 15 mm right, so it is named as a caption.
        assert rec["verdict"] == "mismatched" and rec["template"] == t.name
        assert {o["caption"] for o in rec["offending"]} == {payload}
        assert {tuple(o["offset_mm"]) for o in rec["offending"]} == {(15.0, 0.0)}
        records.append(rec)
    path = write_report(tmp / "report.html", records, templates, Tolerances(), base_dir=SAMPLES)
    return path, records


@pytest.fixture(scope="module")
def browser():
    if not Path(CHROMIUM).exists():
        pytest.skip(f"{CHROMIUM} is not installed")
    with playwright_api.sync_playwright() as p:
        b = p.chromium.launch(executable_path=CHROMIUM, args=ARGS)
        yield b
        b.close()


@pytest.fixture
def opened(browser, built):
    path, records = built
    page = browser.new_page(viewport={"width": 1280, "height": 1600})
    events = {"console": [], "pageerror": [], "requests": [], "failed": []}
    page.on("console", lambda m: events["console"].append((m.type, m.text)))
    page.on("pageerror", lambda e: events["pageerror"].append(str(e)))
    page.on("request", lambda r: events["requests"].append(r.url))
    page.on("requestfailed", lambda r: events["failed"].append(r.url))
    url = path.resolve().as_uri()
    page.goto(url)
    page.wait_for_load_state("load")
    yield page, events, records, url
    page.close()


def visible(page, selector):
    return page.eval_on_selector_all(selector, "els => els.filter(e => e.offsetParent !== null).map(e => e.id || e.dataset.verdict)")


def test_opens_without_errors_or_network(opened):
    page, events, records, url = opened
    # Scroll through so every lazy picture loads.
    height = page.evaluate("document.body.scrollHeight")
    for y in range(0, height + 1600, 1200):
        page.evaluate(f"window.scrollTo(0, {y})")
        page.wait_for_timeout(30)
    page.wait_for_load_state("networkidle")
    broken = page.eval_on_selector_all("img", "els => els.filter(e => !(e.complete && e.naturalWidth > 0)).length")
    assert broken == 0
    assert events["pageerror"] == []
    assert [m for m in events["console"] if m[0] in ("error", "warning")] == []
    assert events["failed"] == []
    # Chromium does not report data: URIs as requests; anything reported besides the document
    # itself would be a fetch from disk or network, so there must be none.
    others = [u for u in events["requests"] if u != url]
    assert all(u.startswith("data:") for u in others), others
    assert events["requests"].count(url) == 1


def test_verdict_filter(opened):
    page, events, records, _ = opened
    n = len(records)
    assert len(visible(page, "article.page")) == n
    page.click("button[data-filter='mismatched']")
    shown = page.eval_on_selector_all("article.page", "els => els.filter(e => !e.hidden).map(e => e.dataset.verdict)")
    assert shown == [r["verdict"] for r in records if r["verdict"] == "mismatched"]
    assert len(shown) == 4  # old revision, moved section, the two drawn variants
    nav = page.eval_on_selector_all("nav li", "els => els.filter(e => e.offsetParent !== null).length")
    assert nav == len(shown)
    assert page.get_attribute("button[data-filter='mismatched']", "aria-pressed") == "true"
    assert page.inner_text("#shown") == "4 shown: mismatched"
    page.click("button[data-filter='skewed']")
    assert visible(page, "article.page") == [f"p{k + 1}" for k, r in enumerate(records) if r["verdict"] == "skewed"]
    page.click("button[data-filter='all']")
    assert len(visible(page, "article.page")) == n
    assert events["pageerror"] == []


def test_keyboard_reaches_the_page_list(opened):
    page, _, records, _ = opened
    page.keyboard.press("Tab")
    first = page.evaluate("[document.activeElement.tagName, document.activeElement.getAttribute('href')]")
    assert first == ["A", "#p1"]
    page.keyboard.press("Tab")
    page.keyboard.press("Enter")
    assert page.evaluate("location.hash") == "#p2"


def test_hostile_label_text_shows_as_text_and_does_not_run(opened):
    page, events, records, _ = opened
    body = page.inner_text("body")
    for payload in PAYLOADS.values():
        assert payload in body
    assert page.evaluate("typeof window.__pwned") == "undefined"
    # The payloads did not become elements: the only images are our pictures, the one script ours.
    assert page.eval_on_selector_all("img", "els => els.filter(e => !e.src.startsWith('data:')).length") == 0
    assert page.eval_on_selector_all("script", "els => els.length") == 1
    assert events["pageerror"] == []


def test_screenshot_is_sane(opened, tmp_path):
    page, _, _, _ = opened
    out = tmp_path / "shot.png"
    page.screenshot(path=str(out))
    data = out.read_bytes()
    assert data[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature (ISO/IEC 15948)
    width, height = struct.unpack(">II", data[16:24])  # IHDR: width, height
    assert (width, height) == (1280, 1600)
    assert 20_000 < len(data) < 3_000_000
