"""``layoutcheck show``: a page that shows what a template learned."""

from __future__ import annotations

import dataclasses
import html
import re
from pathlib import Path

import pytest
from click.testing import CliRunner

import layoutcheck as lc
from layoutcheck.cli import main
from layoutcheck.elements import MM_PER_POINT

ROOT = Path(__file__).resolve().parent.parent
REFERENCE = ROOT / "sample_forms" / "references" / "KBH-101_vessel_arrival.pdf"
HOSTILE = '<img src=x onerror="window.__pwned=1">'


def hostile_template() -> lc.Template:
    """KBH-101 with a caption a person typed badly, and two elements marked unstable."""
    (t,) = lc.load_templates(ROOT / "templates" / "KBH-101.json")
    p = t.pages[0]
    els = list(p.elements)
    k = next(i for i, e in enumerate(els) if e.kind == "box")
    els[k] = dataclasses.replace(els[k], caption=HOSTILE)
    unstable = (els[k].id, els[k + 1].id)
    page = dataclasses.replace(p, elements=tuple(els), unstable=unstable, seen={els[k].id: 2, els[k + 1].id: 2})
    return lc.Template(t.name, (page,), ("a.pdf", "b.pdf", "c.pdf"))


def test_every_element_section_and_zone_is_on_the_page(tmp_path):
    out = tmp_path / "t.html"
    res = CliRunner().invoke(main, ["show", str(ROOT / "templates" / "KBH-101.json"), "-o", str(out),
                                    "--reference", str(REFERENCE)])
    assert res.exit_code == 0, res.output
    text = out.read_text(encoding="utf-8")
    (t,) = lc.load_templates(ROOT / "templates" / "KBH-101.json")
    p = t.pages[0]
    rows = re.findall(r'<tr data-id="([^"]+)"', text)
    shapes = re.findall(r'<polygon class="mk (?:element|unstable)" data-id="([^"]+)"', text)
    assert rows == [e.id for e in p.elements] == shapes
    for s in p.sections:
        assert f"{s.id}: {html.escape(s.name)}" in text
    for z in p.zones:
        assert f'<td class="id">{z.name}</td>' in text
    # The page is ISO 216 A4, 210 x 297 mm.
    assert "210 × 297 mm" in text
    assert text.count("data:image/png;base64,") == 1  # the reference's picture, embedded
    # A frame in mm is the frame in points times 25.4 / 72 (1 pt = 1/72 in, 1 in = 25.4 mm).
    e = p.elements[0]
    assert ", ".join(f"{v * 25.4 / 72:.1f}" for v in e.frame) in text
    assert MM_PER_POINT == pytest.approx(25.4 / 72)


def test_unstable_elements_are_marked_and_text_is_escaped(tmp_path):
    t = hostile_template()
    out = lc.show_template(t, tmp_path / "t.html")
    text = out.read_text(encoding="utf-8")
    assert HOSTILE not in text and "&lt;img src=x onerror=" in text
    u1, u2 = t.pages[0].unstable
    assert re.findall(r'<tr data-id="([^"]+)" class="unstable"', text) == [u1, u2]
    assert re.findall(r'<polygon class="mk unstable" data-id="([^"]+)"', text) == [u1, u2]
    # Samples: the two unstable elements were on 2 of the 3 samples, every other on all 3.
    assert re.findall(r"<td class=\"num\">(\d) of 3</td>", text).count("2") == 2
    # No reference file to be found: the elements are drawn on a blank page, and the page says so.
    assert "data:image" not in text and "The reference was not found" in text
    csp = html.unescape(re.search(r'http-equiv="Content-Security-Policy" content="([^"]+)"', text).group(1))
    assert "default-src 'none'" in csp and "script-src 'sha256-" in csp


def test_set_aside_elements_are_drawn_with_their_reason(tmp_path):
    """Elements a scanned sample set aside as probable fill-in are on the page, marked as such,
    with the reason, and not counted among the form's own elements."""
    (t,) = lc.load_templates(ROOT / "templates" / "KBH-101.json")
    p = t.pages[0]
    scribble = dataclasses.replace(p.elements[0], id="hline-901", kind="hline", frame=(100.0, 400.0, 180.0, 401.0))
    page = dataclasses.replace(p, set_aside=(scribble,), set_aside_why={"hline-901": "not straight (0.05 mm off its line)"},
                               samples=1, seen={**{e.id: 1 for e in p.elements}, "hline-901": 1})
    out = lc.show_template(lc.Template(t.name, (page,), ("filled.png",)), tmp_path / "t.html")
    text = out.read_text(encoding="utf-8")
    assert re.findall(r'<tr data-id="([^"]+)" class="aside"', text) == ["hline-901"]
    assert re.findall(r'<polygon class="mk aside" data-id="([^"]+)"', text) == ["hline-901"]
    assert "(not straight (0.05 mm off its line))" in text
    assert "1 set aside as probable fill-in" in text


def test_a_person_promotes_set_aside_elements_from_the_command_line(tmp_path):
    """After looking at the page ``show`` wrote, a person takes a set-aside element into the form."""
    (t,) = lc.load_templates(ROOT / "templates" / "KBH-101.json")
    p = t.pages[0]
    rule = dataclasses.replace(p.elements[0], id="hline-901", kind="hline", frame=(100.0, 400.0, 180.0, 401.0))
    page = dataclasses.replace(p, set_aside=(rule,), set_aside_why={"hline-901": "seen on 1 of 2 samples"},
                               samples=2, seen={**{e.id: 2 for e in p.elements}, "hline-901": 1})
    path = tmp_path / "t.json"
    lc.save_template(lc.Template(t.name, (page,), ("a.png", "b.png")), path)
    res = CliRunner().invoke(main, ["promote", str(path), "hline-901"])
    assert res.exit_code == 0, res.output
    (got,) = lc.load_templates(path)
    assert [e.id for e in got.pages[0].elements][-1] == "hline-901" and got.pages[0].set_aside == ()
    assert got.pages[0].elements[-1].frame == (100.0, 400.0, 180.0, 401.0)
    # An id that is not set aside: one line naming the template, page and element; nothing written.
    before = path.read_bytes()
    res = CliRunner().invoke(main, ["promote", str(path), "box-999"])
    assert res.exit_code == 1
    assert res.output.strip() == "Error: template KBH-101 page 1: no element 'box-999' set aside"
    assert path.read_bytes() == before
