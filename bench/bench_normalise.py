"""Benchmark: normalised pages re-verified, and zone corners against the truth, on simulated scans.

For each scan of a small suite (KBH-101 and KBH-205, grey and bitonal, 150-300 dpi, turned,
scaled, shifted, fitted to other paper, JPEG), the page is checked, its zones are compared with
the true pose the scan was made with, it is normalised into the template's frame, and the
normalised image is checked again: what pose is left should be none (targets: turn within 0.02
degrees, scale within 0.05 %, shift within 0.2 mm). Prints a markdown table and writes it to
bench/results/normalise.md.

Run from the repository root: ``python bench/bench_normalise.py``.
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from layoutcheck.check import CheckSettings, check_page, learn  # noqa: E402
from layoutcheck.normalise import normalise_image, write_image  # noqa: E402
from layoutcheck.pose import Pose  # noqa: E402
from layoutcheck.simulate import simulate_scan  # noqa: E402
from layoutcheck.sources import RasterPage, read_pages  # noqa: E402
from layoutcheck.zones import zone_quad  # noqa: E402

REFS = ROOT / "sample_forms" / "references"
FORMS = {"KBH-101": REFS / "KBH-101_vessel_arrival.pdf", "KBH-205": REFS / "KBH-205_cargo_manifest.pdf"}
LETTER = (612.0, 792.0)  # ANSI Letter, 8.5 x 11 in
A4 = (595.276, 841.89)  # ISO 216, 210 x 297 mm

TARGET_ROT, TARGET_SCALE_PCT, TARGET_SHIFT_MM = 0.02, 0.05, 0.2

SUITE = [
    ("KBH-101", "grey 300, +2.5°, 0.97, (4,-3) mm", dict(dpi=300, rotation_deg=2.5, scale=(0.97, 0.97), shift_mm=(4, -3), noise_sigma=4, blur_sigma_px=0.6)),
    ("KBH-101", "grey 300, -0.4°, (1,1) mm", dict(dpi=300, rotation_deg=-0.4, shift_mm=(1, 1), noise_sigma=3)),
    ("KBH-101", "bitonal 300, -1.2°, (-3,2) mm", dict(dpi=300, rotation_deg=-1.2, shift_mm=(-3, 2), bitonal_threshold=150, noise_sigma=3)),
    ("KBH-101", "bitonal 200, +3.0°, filled, stamp", dict(dpi=200, rotation_deg=3.0, bitonal_threshold=140, fill=True, stamp=True)),
    ("KBH-101", "grey 200, fit to Letter, +1.0°", dict(dpi=200, rotation_deg=1.0, paper_size_pt=LETTER)),
    ("KBH-101", "grey 150, JPEG q60, +2.0°", dict(dpi=150, rotation_deg=2.0, jpeg_quality=60, shift_mm=(2, 2))),
    ("KBH-205", "grey 300, -2.0°, 1.02", dict(dpi=300, rotation_deg=-2.0, scale=(1.02, 1.02), noise_sigma=3)),
    ("KBH-205", "bitonal 200, fit to A4, +0.8°", dict(dpi=200, rotation_deg=0.8, paper_size_pt=A4, bitonal_threshold=150)),
]


def run(out_dir: Path) -> list[dict]:
    templates = {name: learn([str(path)]) for name, path in FORMS.items()}
    rows = []
    for form, label, kw in SUITE:
        t = templates[form]
        tp = t.pages[0]
        scan = simulate_scan(FORMS[form], seed=7, **kw)
        page = RasterPage(f"{form}.png", 1, scan.image, scan.dpi, scan.bitonal)
        rec = check_page(page, [t], CheckSettings(zones=True))
        row = {"form": form, "scan": label, "verdict": rec["verdict"]}
        if rec["pose"] is None:
            rows.append(row)
            continue
        px = scan.dpi / 72.0
        row["zone_err_px"] = max(
            (float(np.hypot(*(np.array(z["quad"]) - zone_quad(z["frame_pt"], scan.pose.matrix) * px).T).max())
             for z in rec["zones"]), default=float("nan"))
        row["zones"] = len(rec["zones"])
        pose = Pose(np.array(rec["pose"]["matrix"]))
        t0 = time.perf_counter()
        norm = normalise_image(scan.image, scan.dpi, pose, (tp.width, tp.height), bitonal=scan.bitonal)
        row["resample_ms"] = (time.perf_counter() - t0) * 1000
        path = out_dir / f"{form}_{len(rows)}.png"
        t0 = time.perf_counter()
        write_image(norm, path)
        row["write_ms"] = (time.perf_counter() - t0) * 1000
        again = check_page(next(read_pages(path)), [t])
        p = again["pose"]
        row["after"] = again["verdict"]
        if p is not None:
            row["rot"] = p["rotation_deg"]
            row["scale_pct"] = (p["scale"] - 1.0) * 100
            row["shift_mm"] = float(np.hypot(*p["shift_mm"]))
        rows.append(row)
    return rows


def table(rows: list[dict]) -> str:
    def f(v, fmt):
        return "-" if v is None or (isinstance(v, float) and np.isnan(v)) else format(v, fmt)

    lines = [
        "| form | scan | verdict | zones | zone corner err px (max) | resample ms | write ms | re-verified | turn left ° | scale left % | shift left mm |",
        "|---|---|---|---|---|---|---|---|---|---|---|",
    ]
    for r in rows:
        lines.append(f"| {r['form']} | {r['scan']} | {r['verdict']} | {r.get('zones', '-')} | {f(r.get('zone_err_px'), '.2f')} | "
                     f"{f(r.get('resample_ms'), '.0f')} | {f(r.get('write_ms'), '.0f')} | {r.get('after', '-')} | "
                     f"{f(r.get('rot'), '+.4f')} | {f(r.get('scale_pct'), '+.4f')} | {f(r.get('shift_mm'), '.3f')} |")
    done = [r for r in rows if "rot" in r]
    if done:
        worst_rot = max(abs(r["rot"]) for r in done)
        worst_scale = max(abs(r["scale_pct"]) for r in done)
        worst_shift = max(r["shift_mm"] for r in done)
        ok = worst_rot <= TARGET_ROT and worst_scale <= TARGET_SCALE_PCT and worst_shift <= TARGET_SHIFT_MM
        lines.append("")
        lines.append(f"Worst left after normalising ({len(done)} of {len(rows)} scans): turn {worst_rot:.4f}° "
                     f"(target {TARGET_ROT}), scale {worst_scale:.4f} % (target {TARGET_SCALE_PCT}), "
                     f"shift {worst_shift:.3f} mm (target {TARGET_SHIFT_MM}): {'met' if ok else 'NOT met'}.")
        zerr = [r["zone_err_px"] for r in done if not np.isnan(r["zone_err_px"])]
        if zerr:
            lines.append(f"Zone corners against the true pose: worst {max(zerr):.2f} px, median {np.median(zerr):.2f} px.")
    return "\n".join(lines)


def main() -> None:
    import tempfile

    with tempfile.TemporaryDirectory() as tmp:
        t0 = time.perf_counter()
        rows = run(Path(tmp))
        total = time.perf_counter() - t0
    text = ("# Normalised pages and zones on simulated scans\n\n"
            "Generated by `python bench/bench_normalise.py`.\n\n" + table(rows) +
            f"\n\nWhole run: {total:.1f} s (simulating, checking twice, normalising and writing PNG).\n")
    print(text)
    out = ROOT / "bench" / "results" / "normalise.md"
    out.parent.mkdir(parents=True, exist_ok=True)
    out.write_text(text, encoding="utf-8")


if __name__ == "__main__":
    main()
