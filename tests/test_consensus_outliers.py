"""The consensus solver under planted outliers and planted faults, on synthetic A4 forms.

Each test builds a form of known elements, maps it through a known pose, plants wrong
correspondences or faults at known places, and asserts exactly what the solver finds.
"""

from __future__ import annotations

import numpy as np
import pytest

from layoutcheck.consensus import FrameArrays, candidate_pairs, solve, solve_correspondences
from layoutcheck.elements import KIND_CLASS, Element, frame_from_center, points
from layoutcheck.pose import Pose
from layoutcheck.template import Section
from layoutcheck.verdict import offending

# ISO 216 A4 in ISO 32000-1 points (1/72 in).
A4 = (210.0 / 25.4 * 72.0, 297.0 / 25.4 * 72.0)
ROT, SCALE, SHIFT = 1.3, 0.97, (9.0, -6.5)
POSE = Pose.from_params(rotation_deg=ROT, scale=SCALE, shift=SHIFT, center=(A4[0] / 2, A4[1] / 2))
#: Where the declaration band starts (points from the top); nothing of the body lies below it.
DECL_TOP = 720.0


def synthetic_form(seed: int = 0) -> tuple[list[Element], list[str]]:
    """About 150 elements over an A4 page: rows of boxes of varied sizes with checkboxes,
    rules between rows, two vertical rules, and a declaration band of four boxes and a rule at
    the bottom. Returns the elements and the ids of the declaration band."""
    rng = np.random.default_rng(seed)
    els: list[Element] = []

    def add(kind, frame):
        els.append(Element(f"{kind}-{len(els):03d}", kind, frame))

    y = 60.0
    while y < DECL_TOP - 40.0:
        x = 45.0
        h = float(rng.uniform(12.0, 22.0))
        while True:
            if rng.random() < 0.2:
                w, bh, kind = 10.0, 10.0, "checkbox"
            else:
                w, bh, kind = float(rng.uniform(25.0, 110.0)), h, "box"
            if x + w > A4[0] - 45.0:
                break
            add(kind, (x, y, x + w, y + bh))
            x += w + float(rng.uniform(12.0, 30.0))
        if rng.random() < 0.7:
            x0 = float(rng.uniform(45.0, 200.0))
            x1 = float(rng.uniform(x0 + 120.0, A4[0] - 45.0))
            add("hline", (x0, y + 27.0, x1, y + 28.0))
        y += 36.0
    add("vline", (30.0, 60.0, 31.0, 420.0))
    add("vline", (A4[0] - 31.0, 200.0, A4[0] - 30.0, 640.0))
    first_decl = len(els)
    add("hline", (45.0, DECL_TOP, A4[0] - 45.0, DECL_TOP + 1.0))
    add("box", (45.0, DECL_TOP + 12.0, 300.0, DECL_TOP + 32.0))
    add("box", (320.0, DECL_TOP + 12.0, A4[0] - 45.0, DECL_TOP + 32.0))
    add("box", (45.0, DECL_TOP + 44.0, 200.0, DECL_TOP + 66.0))
    add("box", (220.0, DECL_TOP + 44.0, A4[0] - 45.0, DECL_TOP + 78.0))
    return els, [e.id for e in els[first_decl:]]


def mapped(elements, pose: Pose, rng=None, noise=0.0, angle_noise=0.0) -> list[Element]:
    """The elements as they appear on an input page of pose ``pose`` (template -> input)."""
    out = []
    turn = -pose.rotation_deg  # frame angles are y-down, clockwise-looking positive
    for e in elements:
        c = pose.apply(np.array([e.center]))[0]
        w, h = np.array(e.size) * np.array([pose.scale_x, pose.scale_y])
        a = (e.angle or 0.0) + turn
        if rng is not None:
            c = c + rng.normal(0.0, noise, 2)
            w, h = w + rng.normal(0.0, noise), h + rng.normal(0.0, noise)
            a += rng.normal(0.0, angle_noise)
        out.append(e.replace(frame=frame_from_center(c[0], c[1], max(w, 0.1), max(h, 0.1)), angle=a))
    return out


def planted_pairs(tmpl, rng, wrong_share=0.7):
    """One candidate pair per template element, ``wrong_share`` of them with a wrong partner of
    the same kind class; pairs shuffled. Input index k holds template element ``perm[k]``.

    Returns ``(ti, ii, perm, correct)``, ``correct`` the boolean mask of the planted right pairs.
    """
    n = len(tmpl)
    perm = rng.permutation(n)  # input list order: input k is template element perm[k]
    where_in = np.argsort(perm)  # template element t sits at input index where_in[t]
    classes = np.array([KIND_CLASS[e.kind] for e in tmpl])
    wrong = np.zeros(n, bool)
    wrong[rng.choice(n, int(round(wrong_share * n)), replace=False)] = True
    ti = np.arange(n)
    partner = ti.copy()
    for t in np.flatnonzero(wrong):
        same = np.flatnonzero((classes == classes[t]) & (ti != t))
        partner[t] = rng.choice(same)
    ii = where_in[partner]
    order = rng.permutation(n)
    return ti[order], ii[order], perm, (~wrong)[order]


@pytest.fixture(scope="module")
def form():
    return synthetic_form(0)


def test_synthetic_form_shape(form):
    els, decl = form
    kinds = {k: sum(e.kind == k for e in els) for k in ("box", "checkbox", "hline", "vline")}
    assert 120 <= len(els) <= 200, len(els)
    assert all(v > 0 for v in kinds.values()), kinds
    assert len(decl) == 5


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_seventy_percent_wrong_votes_noise_free(form, seed):
    els, _ = form
    rng = np.random.default_rng(seed)
    ti, ii, perm, correct = planted_pairs(els, rng, 0.7)
    inp = mapped(els, POSE)
    inp = [inp[t] for t in perm]
    assert correct.mean() == pytest.approx(0.3, abs=0.01)
    pose, inl = solve_correspondences(FrameArrays.of(els), FrameArrays.of(inp), ti, ii)
    assert pose is not None
    assert pose.rotation_deg == pytest.approx(ROT, abs=0.01)
    assert pose.scale == pytest.approx(SCALE, abs=1e-4)
    np.testing.assert_allclose(pose.translation, POSE.translation, rtol=0, atol=0.05)
    # The inlier mask is exactly the planted right pairs.
    assert np.array_equal(np.flatnonzero(inl), np.flatnonzero(correct))


@pytest.mark.parametrize("seed", [4, 5])
def test_seventy_percent_wrong_votes_small_noise(form, seed):
    els, _ = form
    rng = np.random.default_rng(seed)
    ti, ii, perm, correct = planted_pairs(els, rng, 0.7)
    inp = mapped(els, POSE, rng, noise=0.1, angle_noise=0.05)
    inp = [inp[t] for t in perm]
    pose, inl = solve_correspondences(FrameArrays.of(els), FrameArrays.of(inp), ti, ii)
    assert pose is not None
    # ~45 right pairs, 0.1 pt noise per coordinate: the least-squares pose is good to about
    # 0.1 / sqrt(45) pt at the centroid and 0.1 / (sqrt(45) * 250 pt) rad in rotation.
    assert pose.rotation_deg == pytest.approx(ROT, abs=0.01)
    assert pose.scale == pytest.approx(SCALE, abs=2e-4)
    page_centre = np.array([[A4[0] / 2, A4[1] / 2]])
    np.testing.assert_allclose(pose.apply(page_centre), POSE.apply(page_centre), rtol=0, atol=0.1)
    assert np.array_equal(np.flatnonzero(inl), np.flatnonzero(correct))


def test_all_pairs_from_candidate_pairs(form):
    """With every same-class pairing as a candidate (as the page solver gets them) the solver
    still finds the pose, and its inliers are exactly the identity pairs."""
    els, _ = form
    inp = mapped(els, POSE)
    tmpl_a, inp_a = FrameArrays.of(els), FrameArrays.of(inp)
    ti, ii = candidate_pairs(tmpl_a, inp_a)
    assert len(ti) > 10 * len(els)  # mostly wrong pairs
    pose, inl = solve_correspondences(tmpl_a, inp_a, ti, ii)
    assert pose.rotation_deg == pytest.approx(ROT, abs=0.01)
    assert pose.scale == pytest.approx(SCALE, abs=1e-4)
    assert np.array_equal(np.flatnonzero(inl), np.flatnonzero(ti == ii))


def test_too_few_right_pairs_is_not_a_pose_of_the_page(form):
    """The check can fail: with only wrong pairs, no planted pose comes back."""
    els, _ = form
    rng = np.random.default_rng(9)
    ti, ii, perm, correct = planted_pairs(els, rng, 1.0)
    inp = [mapped(els, POSE)[t] for t in perm]
    pose, inl = solve_correspondences(FrameArrays.of(els), FrameArrays.of(inp), ti, ii)
    assert not correct.any()
    # Whatever pose wins, almost no pair agrees with it (a chance coincidence or two at most),
    # against ~43 agreeing pairs when 30 % are right.
    assert inl.sum() <= 3


# -- solve on element lists ---------------------------------------------------------------------
def by_id(match):
    return {r.id: r for r in match.elements}


def test_clean_page_all_ok(form):
    els, _ = form
    m = solve(els, mapped(els, POSE))
    assert m.pose.rotation_deg == pytest.approx(ROT, abs=1e-6)
    assert m.pose.scale == pytest.approx(SCALE, abs=1e-7)
    assert {r.status for r in m.elements} == {"ok"}
    assert offending(m) == []
    assert m.support == 1.0


def test_one_box_moved_10mm(form):
    els, _ = form
    boxes = [k for k, e in enumerate(els) if e.kind == "box" and e.frame[1] < DECL_TOP]
    k = boxes[len(boxes) // 2]
    d = points(10.0)  # 10 mm to the right, in the template's axes
    x0, top, x1, bottom = els[k].frame
    moved = list(els)
    moved[k] = els[k].replace(frame=(x0 + d, top, x1 + d, bottom))
    m = solve(els, mapped(moved, POSE))
    res = by_id(m)
    assert res[els[k].id].status == "moved"
    assert res[els[k].id].offset_mm == pytest.approx((10.0, 0.0), abs=0.01)
    assert [r.id for r in m.elements if r.status != "ok"] == [els[k].id]
    assert [o["id"] for o in offending(m)] == [els[k].id]
    assert m.pose.rotation_deg == pytest.approx(ROT, abs=1e-6)


def test_one_box_removed(form):
    els, _ = form
    boxes = [k for k, e in enumerate(els) if e.kind == "box" and e.frame[1] < DECL_TOP]
    k = boxes[7]
    inp = [e for j, e in enumerate(mapped(els, POSE)) if j != k]
    m = solve(els, inp)
    res = by_id(m)
    assert res[els[k].id].status == "missing"
    assert [r.id for r in m.elements if r.status != "ok"] == [els[k].id]
    assert offending(m) == [{"id": els[k].id, "kind": "box", "caption": None, "status": "missing",
                             "frame": [round(v, 2) for v in els[k].frame], "offset_mm": None,
                             "size_ratio": None}]


@pytest.mark.parametrize("seed", [11, 12])
def test_scribbles_are_not_offending(form, seed):
    els, _ = form
    rng = np.random.default_rng(seed)
    inp = mapped(els, POSE, rng, noise=0.1, angle_noise=0.05)
    extra = []
    for j in range(50):
        cx, cy = rng.uniform([20.0, 20.0], [A4[0] - 20, A4[1] - 20])
        if j % 2:
            s = float(rng.uniform(4.0, 15.0))
            extra.append(Element(f"s-{j}", "box", frame_from_center(cx, cy, s, s * rng.uniform(0.6, 1.4)),
                                 angle=float(rng.uniform(-30, 30))))
        else:
            length = float(rng.uniform(10.0, 40.0))
            extra.append(Element(f"s-{j}", "hline", frame_from_center(cx, cy, length, 1.0),
                                 angle=float(rng.uniform(-40, 40))))
    m = solve(els, inp + extra)
    assert offending(m) == []
    assert m.support == 1.0
    assert m.pose.rotation_deg == pytest.approx(ROT, abs=0.01)
    assert m.pose.scale == pytest.approx(SCALE, abs=2e-4)


def test_section_moved_as_one(form):
    els, decl = form
    body = [e.id for e in els if e.id not in decl]
    from layoutcheck.elements import merge_frames

    frames = {e.id: e.frame for e in els}
    sections = (
        Section("section-01", "Vessel details", merge_frames(frames[i] for i in body), tuple(body)),
        Section("section-02", "Declaration", merge_frames(frames[i] for i in decl), tuple(decl)),
    )
    d = points(15.0)  # the whole declaration band 15 mm lower
    moved = [e.replace(frame=(e.frame[0], e.frame[1] + d, e.frame[2], e.frame[3] + d)) if e.id in decl else e
             for e in els]
    m = solve(els, mapped(moved, POSE), sections)
    secs = {s.id: s for s in m.sections}
    assert secs["section-02"].status == "moved"
    assert secs["section-02"].offset_mm == pytest.approx((0.0, 15.0), abs=0.02)
    assert secs["section-01"].status == "ok"
    off = offending(m)
    assert [(o["id"], o["kind"], o["status"]) for o in off] == [("section-02", "section", "moved")]
    # The page pose comes from the body alone.
    assert m.pose.rotation_deg == pytest.approx(ROT, abs=1e-6)
    assert m.pose.scale == pytest.approx(SCALE, abs=1e-7)


@pytest.mark.parametrize("merged_first", [True, False])
def test_partner_of_the_expected_size_wins_a_shared_centre(form, merged_first):
    # A box found twice around the same centre: as itself, and merged with the boxes above and
    # below it into one three times as tall (the rules between them lost in a scan). The box is
    # matched to its own size, in place; the merged one is extra ink. Both input orders.
    els, _ = form
    target = next(e for e in els if e.kind == "box" and e.size[1] > 15 and 200 < e.center[1] < 600)
    inp = mapped(els, POSE)
    k = next(i for i, e in enumerate(els) if e.id == target.id)
    x0, top, x1, bottom = target.frame
    h = bottom - top
    merged = mapped([target.replace(id="merged", frame=(x0, top - h, x1, bottom + h))], POSE)[0]
    inp = [merged] + inp if merged_first else inp + [merged]
    m = solve(els, inp)
    r = next(r for r in m.elements if r.id == target.id)
    assert r.status == "ok"
    assert inp[r.input_index] is not merged
    assert r.input_index == (k + 1 if merged_first else k)


def test_a_turn_allowed_only_beside_the_votes_gives_a_finite_pose(form):
    """The elements of a page turned 10.9 deg vote in the 1-deg bin next to -10 deg (the vote's
    own sign; its boxes also in the bins a quarter turn away). Only turns between -10 and 60 deg
    are allowed, so the one allowed bin beside the peak holds none of the votes itself: the vote
    still gives finite poses, and without the limit it finds the turn."""
    from layoutcheck.consensus import SolverSettings, gated_pairs, vote_pose

    tmpl, _ = form
    inp = mapped(tmpl, Pose.from_params(rotation_deg=10.9, scale=1.0, shift=(300.0, -200.0)))
    ta, ia = FrameArrays.of(tmpl), FrameArrays.of(inp)
    settings = SolverSettings()
    ti, ii = gated_pairs(ta, ia, settings)
    hyps = vote_pose(ta, ia, ti, ii, settings, allow=lambda rot: -10.0 < rot < 60.0)
    assert all(np.isfinite(h.pose.matrix).all() for h in hyps)
    # Pose.from_params is the reference for the turn planted.
    best = vote_pose(ta, ia, ti, ii, settings)[0]
    assert best.pose.rotation_deg == pytest.approx(10.9, abs=0.05)


def test_a_pose_known_nearly_is_refined_without_a_vote(form):
    # A second reading sees the page through a first pose: the form lies within a few
    # millimetres of its place. Refined from the identity (no vote), the pose is the planted one,
    # checked against scikit-image's least-squares similarity on the exact centres (outside
    # reference), and a box moved 10 mm is still named.
    from skimage.transform import SimilarityTransform

    els, _ = form
    small = Pose.from_params(rotation_deg=0.3, scale=1.004, shift=(2.5, -1.5), center=(297.0, 420.0))
    boxes = [k for k, e in enumerate(els) if e.kind == "box" and e.frame[1] < DECL_TOP]
    k = boxes[len(boxes) // 2]
    d = points(10.0)
    x0, top, x1, bottom = els[k].frame
    moved = list(els)
    moved[k] = els[k].replace(frame=(x0 + d, top, x1 + d, bottom))
    seen = mapped(moved, small)
    m = solve(els, seen, near=Pose.identity())
    assert m.hypotheses == 1 and m.pairs == 0  # no vote was held
    src = np.array([e.center for j, e in enumerate(els) if j != k])
    dst = np.array([e.center for j, e in enumerate(seen) if j != k])
    ref = SimilarityTransform.from_estimate(src, dst)  # scikit-image 0.26 API
    assert np.abs(m.pose.matrix - ref.params).max() < 1e-6
    assert [r.id for r in m.elements if r.status != "ok"] == [els[k].id]
    assert by_id(m)[els[k].id].offset_mm == pytest.approx((10.0, 0.0), abs=0.01)
