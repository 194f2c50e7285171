"""Look at one case of the scan suite: python bench/show_case.py INDEX (writes /tmp/caseINDEX.png)."""
import sys; sys.path.insert(0, 'bench')
from pathlib import Path
from scan_suite import make_cases, scan, REFS
from layoutcheck.check import learn, extract, record_for, CheckSettings
from layoutcheck.sources import RasterPage
idx = int(sys.argv[1])
templates = {p.name: learn([str(p)]) for p in sorted(REFS.glob("*.pdf"))}
import os; cases = make_cases(templates, int(os.environ.get("N", 100)), int(os.environ.get("SEED", 7)))
c = cases[idx]; print(c)
t = templates[c.form]
sc = scan(c, t, Path("/tmp"))
from PIL import Image; Image.fromarray(sc.image).save(f"/tmp/case{idx}.png")
page = RasterPage("x", 1, sc.image, sc.dpi, sc.bitonal)
found = extract(page)
rec = record_for("x", 1, found, [t], CheckSettings(), page=page)
print(rec["verdict"], rec["pose"])
for o in rec["offending"]: print(o)
tp = t.pages[c.page-1]
print(len(tp.raster_elements), len(found.elements))
if len(sys.argv) > 2:  # an element id: show the input elements near where the pose puts it
    import numpy as np
    from layoutcheck.pose import Pose
    eid = sys.argv[2]
    e = next(x for x in tp.elements_for("raster") if x.id == eid)
    pose = Pose(np.array(rec["pose"]["matrix"]))
    c = pose.apply(np.array([e.center]))[0]
    for f in found.elements:
        d = np.hypot(*(np.array(f.center) - c))
        if d < 60:
            print(f"  {f.kind:9s} {f.id:12s} {d:6.1f} pt from {eid}'s place, size {f.size[0]:.1f} x {f.size[1]:.1f} (template {e.size[0]:.1f} x {e.size[1]:.1f})")
