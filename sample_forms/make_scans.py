"""Draw the demo's scanned inputs: simulated scans of the sample forms, with known poses.

Run after ``make_forms.py``: ``python sample_forms/make_scans.py``. Writes scans into
``sample_forms/inputs/`` and their planted truth into ``sample_forms/expected_scans.json``.
The scans are made by ``layoutcheck.simulate`` (render, turn, scale, shift, blur, noise, fill-in
scribbles, a stamp, JPEG or bitonal thresholding), so they are invented, like the forms.
"""

from __future__ import annotations

import json
from pathlib import Path

HERE = Path(__file__).resolve().parent
REFS = HERE / "references"
INPUTS = HERE / "inputs"

#: name, source PDF, page, format, scan settings, planted verdict, note
SCANS = (
    ("scan_101_filled.jpg", "references/KBH-101_vessel_arrival.pdf", 1,
     dict(dpi=200, rotation_deg=0.2, noise_sigma=3, blur_sigma_px=0.5, fill=True, stamp=True, seed=11),
     "pass", "JPEG scan of a filled form, nearly straight"),
    ("scan_101_skewed.png", "references/KBH-101_vessel_arrival.pdf", 1,
     dict(dpi=200, rotation_deg=-1.4, blur_sigma_px=0.6, fill=True, seed=12),
     "skewed", "PNG scan turned 1.4 degrees clockwise by the feeder"),
    ("scan_101_fit_to_letter.png", "references/KBH-101_vessel_arrival.pdf", 1,
     dict(dpi=200, scale=(0.9407, 0.9407), blur_sigma_px=0.5, seed=13),
     "rescaled", "A4 form printed fit to page (94.07 %) and scanned"),
    ("scan_101_old_revision.png", "inputs/101_old_revision.pdf", 1,
     dict(dpi=200, rotation_deg=0.3, blur_sigma_px=0.5, seed=14),
     "mismatched", "scan of the older revision: 'Gross tonnage' sits 12 mm to the right"),
    ("scan_205_bitonal.tif", "references/KBH-205_cargo_manifest.pdf", 1,
     dict(dpi=300, rotation_deg=0.25, blur_sigma_px=0.7, bitonal_threshold=150, fill=True, seed=15),
     "pass", "group-4 bitonal TIFF at 300 dpi"),
)
#: A two-page scanner PDF of KBH-310 (one image per page, no text layer).
SCANNER_PDF = ("scan_310_scanner.pdf", "references/KBH-310_berth_application.pdf",
               dict(dpi=150, rotation_deg=0.35, blur_sigma_px=0.5, fill=True), "pass",
               "image-only scanner PDF, two pages at 150 dpi")


#: A phone photo of a filled KBH-101 on a desk (layoutcheck.simulate_camera): colour JPEG with no
#: usable dpi, seen in perspective, light falling off towards the corners, a soft shadow.
PHOTO = ("photo_101_filled.jpg", "references/KBH-101_vessel_arrival.pdf",
         dict(size=(3264, 2448), perspective=0.04, bend_mm=0.3, fill=True, seed=31), "pass",
         "phone photo of a filled form on a desk, seen in perspective (a camera capture)")


def make_photo() -> dict:
    """Write the demo's photo; its planted truth as an ``expected_scans.json`` entry."""
    from layoutcheck.simulate_camera import CameraSettings, simulate_photo

    name, src, kw, verdict, note = PHOTO
    photo = simulate_photo(HERE / src, CameraSettings(**kw))
    photo.save(INPUTS / name)
    corners = photo.homography.apply([[0, 0], [photo.page_size_pt[0], 0], [*photo.page_size_pt], [0, photo.page_size_pt[1]]])
    return {"input": f"inputs/{name}", "template": "KBH-101", "page": 1, "verdict": verdict, "capture": "camera",
            "homography_px": [[round(float(v), 9) for v in row] for row in photo.homography.matrix],
            "corners_px": [[round(float(v), 2) for v in c] for c in corners], "note": note}


def main() -> None:
    from layoutcheck.simulate import save_scan, simulate_scan

    expected = []
    for name, src, page, kw, verdict, note in SCANS:
        scan = simulate_scan(HERE / src, page=page, **kw)
        save_scan(scan, INPUTS / name)
        expected.append(_entry(name, src, page, verdict, scan, note))
    name, src, kw, verdict, note = SCANNER_PDF
    scans = [simulate_scan(HERE / src, page=p, seed=20 + p, **kw) for p in (1, 2)]
    save_scan(scans, INPUTS / name)
    for p, scan in enumerate(scans, start=1):
        expected.append(_entry(name, src, p, verdict, scan, note))
    expected.append(make_photo())
    (HERE / "expected_scans.json").write_text(json.dumps(expected, indent=1) + "\n", encoding="utf-8")
    for e in expected:
        print(f"{e['input']:34s} page {e['page']}: {e['verdict']}")


def _entry(name, src, page, verdict, scan, note):
    stem = Path(src).name.split("_")[0]
    # References are named KBH-xxx_...; derived inputs xxx_...: both name form KBH-xxx.
    template = stem if stem.startswith("KBH-") else f"KBH-{stem}"
    return {
        "input": f"inputs/{name}", "template": template, "page": page, "verdict": verdict,
        "rotation_deg": round(scan.pose.rotation_deg, 4), "scale": round(scan.pose.scale, 5),
        "dpi": scan.dpi, "note": note,
    }


if __name__ == "__main__":
    main()
