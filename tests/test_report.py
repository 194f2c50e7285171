"""The HTML report, read back as a document: what a person sees must match the JSON records.

Records come from the real pipeline on the bundled sample forms (vector PDFs, fast). The HTML is
parsed with the standard library's html.parser, never searched as text.
"""

from __future__ import annotations

import base64
import hashlib
import io
import json
import math
from html.parser import HTMLParser
from pathlib import Path

import pytest
from PIL import Image

from layoutcheck.check import learn, check_file
from layoutcheck.report import build, write_report
from layoutcheck.verdict import Tolerances

SAMPLES = Path(__file__).resolve().parent.parent / "sample_forms"
MM_PER_POINT = 25.4 / 72.0  # 1 in = 25.4 mm exactly (1959 definition), 1 pt = 1/72 in (ISO 32000-1)
INPUTS = ["inputs/101_old_revision.pdf", "inputs/101_rotated.pdf", "inputs/101_section_moved.pdf",
          "inputs/101_fit_to_letter.pdf", "inputs/101_exact.pdf", "inputs/412_crew_list_as_101.pdf",
          "inputs/205_filled.pdf", "inputs/no_such_file.pdf"]


# -- a small DOM from html.parser ---------------------------------------------------------------
class Node:
    def __init__(self, tag, attrs, parent=None):
        self.tag, self.attrs, self.parent, self.children = tag, dict(attrs), parent, []

    def iter(self):
        yield self
        for c in self.children:
            if isinstance(c, Node):
                yield from c.iter()

    def find_all(self, tag=None, **attrs):
        out = []
        for n in self.iter():
            if tag is not None and n.tag != tag:
                continue
            if all((n.attrs.get(k.rstrip("_").replace("_", "-")) == v) if v is not True
                   else k.rstrip("_").replace("_", "-") in n.attrs for k, v in attrs.items()):
                out.append(n)
        return out

    def find(self, tag=None, **attrs):
        found = self.find_all(tag, **attrs)
        return found[0] if found else None

    def classes(self):
        return (self.attrs.get("class") or "").split()

    def text(self):
        return "".join(c if isinstance(c, str) else c.text() for c in self.children)


VOID = {"meta", "img", "br", "hr", "input", "link", "area", "base", "col", "source", "wbr"}


class TreeBuilder(HTMLParser):
    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.root = Node("#root", {})
        self.cur = self.root

    def handle_starttag(self, tag, attrs):
        node = Node(tag, attrs, self.cur)
        self.cur.children.append(node)
        if tag not in VOID:
            self.cur = node

    def handle_startendtag(self, tag, attrs):
        self.cur.children.append(Node(tag, attrs, self.cur))

    def handle_endtag(self, tag):
        n = self.cur
        while n is not self.root and n.tag != tag:
            n = n.parent
        if n is not self.root:
            self.cur = n.parent

    def handle_data(self, data):
        self.cur.children.append(data)


def parse(path: Path) -> Node:
    b = TreeBuilder()
    b.feed(path.read_text(encoding="utf-8"))
    b.close()
    return b.root


def number(text: str) -> float:
    return float(text.replace("\u2212", "-").replace("°", "").replace("mm", "").replace("%", "").strip())


# -- fixtures ----------------------------------------------------------------------------------
@pytest.fixture(scope="module")
def templates():
    return [learn([str(SAMPLES / "references" / f"{s}.pdf")], with_raster=False)
            for s in ("KBH-101_vessel_arrival", "KBH-205_cargo_manifest")]


@pytest.fixture(scope="module")
def records(templates):
    out = []
    for rel in INPUTS:
        for rec in check_file(str(SAMPLES / rel), templates):
            rec["source"] = rel  # relative to sample_forms/, as the demo stores it
            out.append(rec)
    return out


@pytest.fixture(scope="module")
def report(tmp_path_factory, records, templates):
    path = tmp_path_factory.mktemp("report") / "report.html"
    got = write_report(path, records, templates, Tolerances(), base_dir=SAMPLES)
    assert got == path
    return parse(path), path


def article(doc: Node, k: int) -> Node:
    a = doc.find("article", id=f"p{k + 1}")
    assert a is not None, f"no article for record {k}"
    return a


def by_source(records, name):
    return next(k for k, r in enumerate(records) if r["source"].endswith(name))


# -- the planted faults reach the page ---------------------------------------------------------
def test_records_carry_the_planted_faults(records):
    """The pipeline sees what sample_forms/expected.json plants (so the report has work to do)."""
    expected = json.loads((SAMPLES / "expected.json").read_text(encoding="utf-8"))
    truth = {(e["input"], e["page"]): e["verdict"] for e in expected}
    for r in records:
        if (r["source"], r["page"]) in truth:
            assert r["verdict"] == truth[(r["source"], r["page"])], r["source"]
    assert records[-1]["verdict"] == "error" and records[-1]["page"] is None


def test_one_article_per_record_with_its_verdict(report, records):
    doc, _ = report
    arts = doc.find_all("article")
    assert [a.attrs["data-verdict"] for a in arts] == [r["verdict"] for r in records]
    nav = doc.find("nav")
    assert [li.attrs["data-verdict"] for li in nav.find_all("li")] == [r["verdict"] for r in records]
    for li, k in zip(nav.find_all("li"), range(len(records))):
        assert li.find("a").attrs["href"] == f"#p{k + 1}"


def test_every_offending_element_is_listed_with_its_caption(report, records):
    doc, _ = report
    seen = 0
    for k, r in enumerate(records):
        rows = article(doc, k).find_all("tr", data_id=True)
        assert [row.attrs["data-id"] for row in rows] == [o["id"] for o in r["offending"]]
        for row, o in zip(rows, r["offending"]):
            cap = row.find("td", class_="caption") or [c for c in row.find_all("td") if "caption" in c.classes()][0]
            assert cap.text() == (o["caption"] or "—")
            seen += 1
    assert seen >= 3
    # The old revision: box 'Gross tonnage' planted 12 mm to the right (sample_forms/make_forms.py).
    k = by_source(records, "101_old_revision.pdf")
    items = [li.text() for li in article(doc, k).find("ul", **{"class": "what"}).find_all("li")]
    assert "Box 'Gross tonnage' has moved 12.0 mm right from where this form has it." in items


def test_pose_numbers_match_the_record(report, records):
    doc, _ = report
    checked = 0
    for k, r in enumerate(records):
        a = article(doc, k)
        table = [t for t in a.find_all("table") if "pose" in t.classes()]
        if r["pose"] is None:
            assert not table
            continue
        cells = {td.attrs["data-field"]: td.text() for td in table[0].find_all("td") if "data-field" in td.attrs}
        assert number(cells["rotation_deg"]) == pytest.approx(r["pose"]["rotation_deg"], abs=0.005)
        assert number(cells["scale"]) == pytest.approx(r["pose"]["scale"], abs=5e-5)
        dx, dy = (number(v) for v in cells["shift_mm"].split(","))
        assert (dx, dy) == pytest.approx(tuple(r["pose"]["shift_mm"]), abs=0.05)
        assert number(cells["support"]) == pytest.approx(r["support"], abs=0.005)
        checked += 1
    assert checked >= 5
    # The rotated sample is planted at 2 degrees counterclockwise (sample_forms/expected.json).
    k = by_source(records, "101_rotated.pdf")
    cell = [td for td in article(doc, k).find_all("td") if td.attrs.get("data-field") == "rotation_deg"][0]
    assert number(cell.text()) == pytest.approx(2.0, abs=0.01)


def test_offsets_and_sizes_match_the_record(report, records):
    doc, _ = report
    for k, r in enumerate(records):
        for row, o in zip(article(doc, k).find_all("tr", data_id=True), r["offending"]):
            cells = {td.attrs["data-field"]: td.text() for td in row.find_all("td") if "data-field" in td.attrs}
            if o["offset_mm"] is None:
                assert cells["offset_mm"] == "—"
            else:
                got = tuple(number(v) for v in cells["offset_mm"].split(","))
                assert got == pytest.approx(tuple(o["offset_mm"]), abs=0.05)
            if o["size_ratio"] is None:
                assert cells["size_ratio"] == "—"
            else:
                assert number(cells["size_ratio"]) / 100 == pytest.approx(o["size_ratio"], abs=5e-4)


def test_summary_counts_and_tolerances(report, records):
    doc, _ = report
    counts = {}
    for li in doc.find("ul", **{"class": "counts"}).find_all("li"):
        counts[li.find("span").text()] = int(li.find("b").text())
    for v in ("error", "unrecognised", "mismatched", "rescaled", "skewed", "shifted", "pass"):
        assert counts[v] == sum(r["verdict"] == v for r in records)
    text = doc.find("section").text()
    assert "0.5°" in text and "KBH-101" in text and "KBH-205" in text
    plots = [s for s in doc.find_all("svg") if "plot" in s.classes()]
    assert len(plots) == 3
    # One mark per page with a pose in the turn plot; the 2-degree page lies outside the band.
    marks = [n for n in plots[0].iter() if n.tag in ("circle", "path")]
    assert len(marks) == sum(r["pose"] is not None for r in records)
    assert sum(n.tag == "path" for n in marks) == sum(
        r["pose"] is not None and abs(r["pose"]["rotation_deg"]) > 0.5 for r in records)


def test_filter_buttons_are_buttons_for_each_verdict_present(report, records):
    doc, _ = report
    buttons = doc.find_all("button")
    assert [b.attrs["data-filter"] for b in buttons] == ["all"] + [
        v for v in ("error", "unrecognised", "mismatched", "rescaled", "skewed", "shifted", "pass")
        if any(r["verdict"] == v for r in records)]
    assert all(b.attrs.get("type") == "button" for b in buttons)


# -- overlay geometry --------------------------------------------------------------------------
def polygon(node: Node):
    return [tuple(float(v) for v in p.split(",")) for p in node.attrs["points"].split()]


def test_moved_section_is_drawn_where_it_went(report, records, templates):
    """The section planted 15 mm down is drawn dash-dot at its place and solid 15 mm lower."""
    doc, _ = report
    k = by_source(records, "101_section_moved.pdf")
    svg = article(doc, k).find("div", **{"class": "sheetframe"}).find("svg")
    polys = {c: [polygon(p) for p in svg.find_all("polygon") if c in p.classes()] for c in ("secexp", "secfound", "expected")}
    assert len(polys["secexp"]) == 1 and len(polys["secfound"]) == 1
    exp, fnd = polys["secexp"][0], polys["secfound"][0]
    dy = sum(p[1] for p in fnd) / 4 - sum(p[1] for p in exp) / 4
    dx = sum(p[0] for p in fnd) / 4 - sum(p[0] for p in exp) / 4
    assert dy == pytest.approx(15.0 / MM_PER_POINT, abs=0.3)  # 15 mm in points
    assert dx == pytest.approx(0.0, abs=0.3)
    # Every element of the template page is drawn once, dotted.
    tmpl = {t.name: t for t in templates}[records[k]["template"]]
    assert len(polys["expected"]) == len(tmpl.page(records[k]["template_page"]).elements)
    tags = [t.text() for t in svg.find_all("text")]
    assert tags == ["1 expected", "1 found"]


def test_turned_page_overlay_follows_the_pose(report, records, templates):
    """On the 2-degree page the form's border is drawn turned by 2 degrees counterclockwise."""
    doc, _ = report
    k = by_source(records, "101_rotated.pdf")
    svg = article(doc, k).find("div", **{"class": "sheetframe"}).find("svg")
    polys = [polygon(p) for p in svg.find_all("polygon") if "expected" in p.classes()]
    widest = max(polys, key=lambda q: abs(q[1][0] - q[0][0]))
    (x0, y0), (x1, y1) = widest[0], widest[1]  # top edge, left to right
    seen = -math.degrees(math.atan2(y1 - y0, x1 - x0))  # y down: counterclockwise lifts the right end
    assert seen == pytest.approx(2.0, abs=0.05)


# -- pictures ----------------------------------------------------------------------------------
def test_pictures_are_embedded_lazy_and_at_report_resolution(report, records):
    doc, _ = report
    imgs = doc.find_all("img")
    assert imgs
    for img in imgs:
        assert img.attrs.get("loading") == "lazy"
        assert img.attrs["src"].startswith(("data:image/png;base64,", "data:image/jpeg;base64,"))
    k = by_source(records, "101_exact.pdf")
    src = article(doc, k).find("img").attrs["src"]
    im = Image.open(io.BytesIO(base64.b64decode(src.split(",", 1)[1])))
    # A4 is 210 x 297 mm (ISO 216); at 110 dpi that is 909.4 x 1286.2 px.
    assert im.size[0] == pytest.approx(210 / 25.4 * build.PAGE_DPI, abs=1.5)
    assert im.size[1] == pytest.approx(297 / 25.4 * build.PAGE_DPI, abs=1.5)
    # Every flagged element of the old revision has its crops (missing: one, moved: two).
    k = by_source(records, "101_old_revision.pdf")
    crops = [c for c in article(doc, k).find_all("div") if "crop" in c.classes()]
    assert len(crops) == len(records[k]["offending"])
    for c, o in zip(crops, records[k]["offending"]):
        assert len(c.find_all("img")) == (1 if o["status"] == "missing" else 2)


def test_error_and_unrecognised_pages_are_explained(report, records):
    doc, _ = report
    k = by_source(records, "no_such_file.pdf")
    box = [d for d in article(doc, k).find_all("div") if "explain" in d.classes()][0]
    assert "error" in box.classes()
    assert "could not be checked" in box.text()
    assert "no_such_file.pdf" in box.text()
    k = by_source(records, "412_crew_list_as_101.pdf")
    box = [d for d in article(doc, k).find_all("div") if "explain" in d.classes()][0]
    assert "does not match any form" in box.text()
    assert records[k]["findings"][0]["message"] in box.text()


# -- safety ------------------------------------------------------------------------------------
def test_content_security_policy_pins_the_one_script(report):
    doc, _ = report
    metas = [m for m in doc.find_all("meta") if m.attrs.get("http-equiv", "").lower() == "content-security-policy"]
    assert len(metas) == 1
    policy = {d.split()[0]: d.split()[1:] for d in metas[0].attrs["content"].split(";") if d.strip()}
    assert policy["default-src"] == ["'none'"]
    assert policy["img-src"] == ["data:"]
    scripts = doc.find_all("script")
    assert len(scripts) == 1 and "src" not in scripts[0].attrs
    # CSP Level 2, hash-source: base64 of the SHA-256 of the script element's text.
    digest = base64.b64encode(hashlib.sha256(scripts[0].text().encode("utf-8")).digest()).decode()
    assert policy["script-src"] == [f"'sha256-{digest}'"]


def test_no_external_urls(report):
    doc, _ = report
    for n in doc.iter():
        assert n.tag not in ("link", "iframe", "object", "embed", "base", "form")
        for name, value in n.attrs.items():
            value = value or ""
            if name == "src":
                assert value.startswith("data:image/")
                continue
            if name in ("href", "xlink:href"):
                assert value.startswith("#"), value
            if value.startswith("data:"):
                continue
            low = value.lower()
            assert "http:" not in low and "https:" not in low and not low.startswith("//"), (n.tag, name, value)


def test_personal_data_notice(report):
    doc, _ = report
    note = [p for p in doc.find_all("p") if "notice" in p.classes()][0]
    assert "personal data" in note.text().lower()
    assert "review" in note.text()


def test_controls_and_direction_overrides_are_removed(tmp_path, records, templates):
    k = by_source(records, "101_old_revision.pdf")
    rec = json.loads(json.dumps(records[k]))
    rec["offending"][0]["caption"] = "Rev.\u202e B\x07\u2066x\u2069\x85"
    rec["source"] = "inputs/101_old_revision.pdf"
    out = write_report(tmp_path / "r.html", [rec], templates, Tolerances(), base_dir=SAMPLES)
    raw = out.read_text(encoding="utf-8")
    for ch in ("\u202e", "\x07", "\u2066", "\u2069", "\x85"):
        assert ch not in raw
    doc = parse(out)
    assert doc.find("tr", data_id=rec["offending"][0]["id"]).find_all("td")[2].text() == "Rev. Bx"
    assert build.clean("a\tb\nc\x00\x1b[31m\u202d") == "a\tb\nc[31m"


def test_large_batches_become_an_index_and_a_page_each(tmp_path, records, templates, monkeypatch):
    import layoutcheck.report as rep

    monkeypatch.setattr(rep, "SINGLE_FILE_MAX_PAGES", 2)
    recs = records[:3]
    out = write_report(tmp_path / "big.html", recs, templates, Tolerances(), base_dir=SAMPLES)
    assert out == tmp_path / "big.html"
    doc = parse(out)
    links = [a.attrs["href"] for a in doc.find("nav").find_all("a")]
    assert links == [f"big_pages/{i:05d}.html" for i in (1, 2, 3)]
    for link, r in zip(links, recs):
        page = parse(tmp_path / link)
        meta = [m for m in page.find_all("meta") if m.attrs.get("http-equiv") == "Content-Security-Policy"][0]
        assert "script-src 'none'" in meta.attrs["content"]
        assert not page.find_all("script")
        assert page.find("article").attrs["data-verdict"] == r["verdict"]
    # A folder path gets index.html and pages/.
    out = write_report(tmp_path / "batch", recs, templates, Tolerances(), base_dir=SAMPLES)
    assert out == tmp_path / "batch" / "index.html"
    assert sorted(p.name for p in (tmp_path / "batch" / "pages").iterdir()) == ["00001.html", "00002.html", "00003.html"]


def test_empty_batch(tmp_path, templates):
    out = write_report(tmp_path / "e.html", [], templates, Tolerances())
    doc = parse(out)
    assert not doc.find_all("article")
    assert "No pages were checked." in doc.find("main").text()


def test_normalised_page_is_shown_with_its_zones(tmp_path, templates):
    """A record with a normalised image gets the hand-off section: the image and one outline per
    zone, the moved zone dashed (its own style), in template points."""
    from layoutcheck.check import CheckSettings

    settings = CheckSettings(zones=True, normalise_dir=str(tmp_path / "norm"))
    recs = list(check_file(str(SAMPLES / "inputs" / "101_rotated.pdf"), templates, settings))
    recs += list(check_file(str(SAMPLES / "inputs" / "101_old_revision.pdf"), templates, CheckSettings(zones=True)))
    out = tmp_path / "r.html"
    write_report(out, recs, templates, Tolerances())
    doc = parse(out)
    sections = [n for n in doc.find_all("section") if "handoff" in n.classes()]
    assert len(sections) == 1  # only the page that was normalised
    zones = recs[0]["zones"]
    polys = sections[0].find_all("polygon")
    assert len(polys) == len(zones) > 0
    assert all("zone" in p.classes() for p in polys)  # the rotated page: every zone in place
    # Outline of the first zone: its template frame, untouched by the page's 2-degree turn.
    x0, top, x1, bottom = zones[0]["frame_pt"]
    pts = [tuple(map(float, xy.split(","))) for xy in polys[0].attrs["points"].split()]
    assert pts[0] == pytest.approx((x0, top), abs=0.05) and pts[2] == pytest.approx((x1, bottom), abs=0.05)
    img = sections[0].find("img")
    assert img.attrs["src"].startswith("data:image/")


def test_elements_found_on_a_second_look_are_named(tmp_path, records, templates):
    k = by_source(records, "101_old_revision.pdf")
    rec = json.loads(json.dumps(records[k]))
    rec["second_look"] = ["checkbox-003", "<b>x</b>"]
    rec["source"] = "inputs/101_old_revision.pdf"
    out = write_report(tmp_path / "r.html", [rec], templates, Tolerances(), base_dir=SAMPLES)
    raw = out.read_text(encoding="utf-8")
    assert "Found only on a second look at their expected place" in raw
    assert "checkbox-003, &lt;b&gt;x&lt;/b&gt;." in raw


def test_missing_normalised_image_is_said_in_words(tmp_path, templates, monkeypatch):
    """The normalised image is gone by the time the report is written (moved on to OCR, say):
    the hand-off section says so and the report is still written. Relative output folder, as
    the demo's default ``demo-out`` is."""
    from layoutcheck.check import CheckSettings

    monkeypatch.chdir(tmp_path)
    settings = CheckSettings(zones=True, normalise_dir="norm")
    recs = list(check_file(str(SAMPLES / "inputs" / "101_rotated.pdf"), templates, settings))
    written = Path(recs[0]["normalised"]["path"])
    assert written.is_absolute() and written.parent == tmp_path / "norm"
    written.unlink()
    out = write_report(tmp_path / "r.html", recs, templates, Tolerances())
    doc = parse(out)
    section = next(n for n in doc.find_all("section") if "handoff" in n.classes())
    assert not section.find_all("img")
    note = section.find("p").text()
    assert note.startswith(f"The normalised page {written} could not be shown")
    assert "No such file" in note


def test_failed_normalisation_is_said_in_words(tmp_path, templates):
    from layoutcheck.check import CheckSettings

    recs = list(check_file(str(SAMPLES / "inputs" / "101_rotated.pdf"), templates, CheckSettings()))
    recs[0]["normalised"] = {"path": None, "dpi": 200.0, "error": "101_rotated.pdf page 1: normalised image not written (disk full)"}
    doc = parse(write_report(tmp_path / "r.html", recs, templates, Tolerances()))
    section = next(n for n in doc.find_all("section") if "handoff" in n.classes())
    assert section.find("p").text() == ("No normalised page was written: 101_rotated.pdf page 1: normalised image "
                                         "not written (disk full)")
