"""Shared fixtures: forms drawn in the test with reportlab, with faults planted by argument."""

from __future__ import annotations

import math
from pathlib import Path

import pytest

MM = 72.0 / 25.4  # points per mm (1 pt = 1/72 in, ISO 32000-1; 1 in = 25.4 mm)
A4 = (210 * MM, 297 * MM)  # ISO 216
LETTER = (8.5 * 72.0, 11 * 72.0)  # ANSI/ASME Y14.1


def form_items(variant: str = "main"):
    """Boxes, checkboxes, rules and labels of a test form, top-left mm coordinates.

    Returns a dict name -> (kind, x_mm, y_mm, w_mm, h_mm, caption).
    """
    items = {}
    if variant == "main":
        items["title"] = ("label", 20, 18, 0, 0, "PORT ENTRY TEST FORM T-7")
        items["rule_top"] = ("hline", 15, 26, 180, 0, None)
        fields = ["Vessel name", "Call sign", "Flag", "Tonnage", "Master", "Agent"]
        for k, cap in enumerate(fields):
            col, row = k % 2, k // 2
            items[cap] = ("box", 20 + col * 90, 40 + row * 22, 80, 12, cap)
        items["rule_mid"] = ("hline", 15, 112, 180, 0, None)
        for k, cap in enumerate(["Cargo", "Passengers", "Fuel", "Waste"]):
            items[f"tick {cap}"] = ("checkbox", 20 + k * 45, 122, 5, 5, cap)
        for k, cap in enumerate(["Port of call", "Arrival date", "Departure date"]):
            items[cap] = ("box", 20, 145 + k * 20, 170, 12, cap)
        items["rule_low"] = ("hline", 15, 210, 180, 0, None)
        items["Signature"] = ("box", 20, 225, 100, 25, "Signature")
        items["Date"] = ("box", 130, 225, 60, 12, "Date")
        items["Stamp"] = ("box", 130, 250, 60, 25, "Official use")
    else:  # a different form of the same house style
        items["title"] = ("label", 20, 18, 0, 0, "CREW ROSTER TEST FORM T-9")
        items["rule_top"] = ("hline", 15, 26, 180, 0, None)
        for r in range(12):
            for c, w in enumerate((12, 70, 50, 40)):
                x = 20 + sum((12, 70, 50, 40)[:c])
                items[f"cell {r} {c}"] = ("box", x, 40 + r * 10, w, 10, None)
        items["Remarks"] = ("box", 20, 180, 172, 40, "Remarks")
    return items


def draw_form(path, *, variant="main", pagesize=A4, rotate_deg=0.0, scale=1.0, shift_mm=(0.0, 0.0),
              omit=(), move=None, fill=False, label_text=None):
    """Draw a test form; the page transform goes into the content stream.

    ``rotate_deg`` turns the content counterclockwise as seen, about the page centre; ``scale``
    (number or (sx, sy)) scales about the page centre, and the A4 content is centred on a
    ``pagesize`` page; ``move`` maps item names to (dx_mm, dy_mm) with y down.
    """
    from reportlab.pdfgen import canvas

    move = move or {}
    sx, sy = (scale, scale) if isinstance(scale, (int, float)) else scale
    c = canvas.Canvas(str(path), pagesize=pagesize, invariant=1)
    pw, ph = pagesize
    c.saveState()
    # Centre of the page; the A4 design is centred on it, then turned and scaled about it.
    c.translate(pw / 2 + shift_mm[0] * MM, ph / 2 - shift_mm[1] * MM)
    c.rotate(rotate_deg)
    c.scale(sx, sy)
    c.translate(-A4[0] / 2, -A4[1] / 2)
    H = A4[1]
    c.setLineWidth(0.8)
    for name, (kind, x, y, w, h, cap) in form_items(variant).items():
        if name in omit:
            continue
        dx, dy = move.get(name, (0.0, 0.0))
        x, y = x + dx, y + dy
        if kind == "label":
            c.setFont("Helvetica-Bold", 12)
            c.drawString(x * MM, H - y * MM, label_text if (label_text and name == "title") else cap)
            continue
        if kind == "hline":
            c.line(x * MM, H - y * MM, (x + w) * MM, H - y * MM)
            continue
        c.rect(x * MM, H - (y + h) * MM, w * MM, h * MM)
        if cap:
            c.setFont("Helvetica", 8)
            if kind == "checkbox":
                c.drawString((x + w + 2) * MM, H - (y + h - 1) * MM, cap)
            else:
                c.drawString(x * MM, H - (y - 1.5) * MM, cap)
    if fill:
        c.setFont("Courier", 10)
        c.drawString(22 * MM, H - 49 * MM, "MV Quiet Tern")
        c.drawString(112 * MM, H - 49 * MM, "KX4Q")
        c.setLineWidth(1.4)
        path_obj = c.beginPath()
        path_obj.moveTo(25 * MM, H - 240 * MM)
        for k in range(1, 30):
            path_obj.lineTo((25 + k * 2.5) * MM, H - (240 + 4 * math.sin(k * 1.3)) * MM)
        c.drawPath(path_obj, stroke=1, fill=0)
        c.line(20.5 * MM, H - 122.5 * MM, 24.5 * MM, H - 126.5 * MM)  # a tick in the first checkbox
    c.restoreState()
    c.showPage()
    c.save()
    return Path(path)


@pytest.fixture(scope="session")
def forms_dir(tmp_path_factory):
    return tmp_path_factory.mktemp("forms")


@pytest.fixture(scope="session")
def reference_pdf(forms_dir):
    return draw_form(forms_dir / "reference.pdf")


@pytest.fixture(scope="session")
def vector_template(reference_pdf):
    from layoutcheck.check import learn

    return learn([str(reference_pdf)], name="T-7", with_raster=False)


# -- every record the tests produce is validated against the shipped JSON Schema ---------------
# The record schema is ours; the validator is the jsonschema package (draft 2020-12). The hooks
# wrap the places records leave the library: the batch's record sink (verify, watch, check_file
# of the API), the API's result object, and the check functions tests call directly.
import functools  # noqa: E402

import jsonschema  # noqa: E402

import layoutcheck.api as _api  # noqa: E402
import layoutcheck.batch as _batch  # noqa: E402
import layoutcheck.check as _check  # noqa: E402

RECORD_VALIDATOR = jsonschema.Draft202012Validator(_api.schema("record"))
VALIDATED = {"records": 0}


def validate_record(rec: dict) -> dict:
    RECORD_VALIDATOR.validate(rec)
    VALIDATED["records"] += 1
    return rec


def _validating(fn, pick=lambda out: [out]):
    @functools.wraps(fn)
    def inner(*args, **kwargs):
        out = fn(*args, **kwargs)
        for rec in pick(out):
            validate_record(rec)
        return out
    return inner


def _validating_iter(fn):
    @functools.wraps(fn)
    def inner(*args, **kwargs):
        for rec in fn(*args, **kwargs):
            yield validate_record(rec)
    return inner


_check.check_page = _validating(_check.check_page)
_check.record_for = _validating(_check.record_for)
_check.check_file = _validating_iter(_check.check_file)
_sink_write = _batch.RecordSink.write
_batch.RecordSink.write = lambda self, record: _sink_write(self, validate_record(record))
_result_init = _api.PageResult.__init__
_api.PageResult.__init__ = lambda self, record: _result_init(self, validate_record(record))
