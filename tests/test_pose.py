"""Pose: fits, signs, derived quantities and paper sizes, checked against outside references.

Outside references used here: scikit-image (``SimilarityTransform``/``AffineTransform``
``from_estimate``, the 0.26 API), OpenCV (``estimateAffinePartial2D``, ``estimateAffine2D``,
``getRotationMatrix2D``), numpy (``linalg.lstsq``), ISO 216 (A4), ANSI/ASME Y14.1 (Letter) and
ISO 32000-1 (1 pt = 1/72 in).
"""

from __future__ import annotations

import math

import cv2
import numpy as np
import pytest
from skimage.transform import AffineTransform, SimilarityTransform

from layoutcheck.elements import MM_PER_POINT
from layoutcheck.pose import DegenerateFit, Pose

# ISO 216: A4 is 210 x 297 mm; ISO 32000-1 8.3.2.3: 1 pt = 1/72 in; 1 in = 25.4 mm exactly.
A4_PT = (210.0 / 25.4 * 72.0, 297.0 / 25.4 * 72.0)
# ANSI/ASME Y14.1: Letter is 8.5 x 11 in.
LETTER_PT = (8.5 * 72.0, 11.0 * 72.0)

REL = 1e-9


def rel_err(a: np.ndarray, b: np.ndarray) -> float:
    a, b = np.asarray(a, float), np.asarray(b, float)
    return float(np.abs(a - b).max() / max(np.abs(b).max(), 1e-300))


def f32(a: np.ndarray) -> np.ndarray:
    """Points exactly representable in float32, so OpenCV (which works on float32 points,
    from memory) sees the very same numbers as we do."""
    return np.asarray(a, float).astype(np.float32).astype(float)


def points_on_a4(n: int, seed: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    return rng.uniform([20.0, 20.0], [A4_PT[0] - 20.0, A4_PT[1] - 20.0], (n, 2))


SIM = Pose.from_params(rotation_deg=1.3, scale=0.97, shift=(12.5, -7.25), center=(297.6, 420.9))
AFF = Pose(np.array([[0.981, 0.012, 5.5], [-0.021, 1.034, -4.25]]))


# -- fits against scikit-image, OpenCV and numpy ----------------------------------------------------
@pytest.mark.parametrize("noise", [0.0, 0.4])
def test_similarity_fit_matches_skimage(noise):
    src = points_on_a4(40, 1)
    dst = SIM.apply(src) + np.random.default_rng(2).normal(0.0, noise, src.shape)
    ours = Pose.from_pairs(src, dst, "similarity")
    # scikit-image 0.26: SimilarityTransform.from_estimate is the least-squares similarity (Umeyama).
    theirs = SimilarityTransform.from_estimate(src, dst)
    assert theirs
    assert rel_err(ours.matrix, theirs.params) < REL
    if noise == 0.0:
        assert rel_err(ours.matrix, SIM.matrix) < REL


def test_affine_fit_matches_skimage_noise_free():
    src = points_on_a4(40, 3)
    dst = AFF.apply(src)
    ours = Pose.from_pairs(src, dst, "affine")
    # scikit-image 0.26: AffineTransform.from_estimate. Noise-free only: under noise it solves the
    # homogeneous system by SVD (from memory), not ordinary least squares, so it differs from us
    # by about 1e-4 relative; the noisy affine case is checked against numpy and OpenCV below.
    theirs = AffineTransform.from_estimate(src, dst)
    assert theirs
    assert rel_err(ours.matrix, theirs.params) < REL
    assert rel_err(ours.matrix, AFF.matrix) < REL


@pytest.mark.parametrize("noise", [0.0, 0.4])
def test_affine_fit_matches_numpy_lstsq(noise):
    src = points_on_a4(40, 4)
    dst = AFF.apply(src) + np.random.default_rng(5).normal(0.0, noise, src.shape)
    ours = Pose.from_pairs(src, dst, "affine")
    # numpy.linalg.lstsq: the ordinary least-squares affine map [x y 1] @ M = [x' y'].
    design = np.column_stack([src, np.ones(len(src))])
    sol = np.linalg.lstsq(design, dst, rcond=None)[0].T
    assert rel_err(ours.matrix[:2], sol) < REL


def exact_similarity_pairs(n: int = 30):
    """Integer template points and a similarity with short binary fractions: every mapped point is
    exact in float32, so OpenCV's minimal-sample fit is exact and its refinement has no work."""
    rng = np.random.default_rng(6)
    src = rng.integers(20, 560, (n, 2)).astype(float)
    a, b = 0.9375, 0.03125  # s cos, s sin: scale 0.93802, turned 1.909 deg clockwise as seen
    m = np.array([[a, -b, 12.5], [b, a, -7.25], [0.0, 0.0, 1.0]])
    return src, Pose(m).apply(src), m


def test_similarity_fit_matches_opencv_noise_free():
    src, dst, m = exact_similarity_pairs()
    ours = Pose.from_pairs(src, dst, "similarity")
    # OpenCV estimateAffinePartial2D, LMEDS: all points are inliers of a noise-free set.
    cv, inl = cv2.estimateAffinePartial2D(src, dst, method=cv2.LMEDS)
    assert cv is not None and inl.all()
    assert rel_err(ours.matrix[:2], cv) < REL
    assert rel_err(ours.matrix, m) < REL


def test_affine_fit_matches_opencv_noise_free():
    src, _, _ = exact_similarity_pairs()
    m = np.array([[1.0625, 0.015625, 3.5], [-0.03125, 0.96875, -2.25], [0.0, 0.0, 1.0]])
    dst = Pose(m).apply(src)
    ours = Pose.from_pairs(src, dst, "affine")
    # OpenCV estimateAffine2D, LMEDS.
    cv, inl = cv2.estimateAffine2D(src, dst, method=cv2.LMEDS)
    assert cv is not None and inl.all()
    assert rel_err(ours.matrix[:2], cv) < REL


@pytest.mark.parametrize("kind", ["similarity", "affine"])
def test_fit_matches_opencv_with_noise(kind):
    """With noise OpenCV's answer comes from an iterative refinement on float32 points that stops
    at about float precision (from memory), so the matrices agree to 1e-6 relative, not 1e-9;
    and ours, the closed-form least-squares answer, must have the smaller residual."""
    src = f32(points_on_a4(40, 7))
    truth = SIM if kind == "similarity" else AFF
    dst = f32(truth.apply(src) + np.random.default_rng(8).normal(0.0, 0.4, src.shape))
    ours = Pose.from_pairs(src, dst, kind)
    est = cv2.estimateAffinePartial2D if kind == "similarity" else cv2.estimateAffine2D
    # OpenCV with every point an inlier: RANSAC with a threshold far beyond any residual.
    cv, inl = est(src, dst, method=cv2.RANSAC, ransacReprojThreshold=1e6)
    assert cv is not None and inl.all()
    assert rel_err(ours.matrix[:2], cv) < 1e-6
    ssq_ours = float((ours.residuals(src, dst) ** 2).sum())
    ssq_cv = float((Pose(cv).residuals(src, dst) ** 2).sum())
    assert ssq_ours <= ssq_cv * (1 + 1e-12)


def test_weighted_fit_is_fit_on_repeated_points():
    src = points_on_a4(12, 9)
    dst = SIM.apply(src) + np.random.default_rng(10).normal(0.0, 0.5, src.shape)
    w = np.arange(1, 13)
    ours = Pose.from_pairs(src, dst, "similarity", weights=w.astype(float))
    # scikit-image on the points repeated w times: integer weights are repetitions.
    theirs = SimilarityTransform.from_estimate(np.repeat(src, w, axis=0), np.repeat(dst, w, axis=0))
    assert rel_err(ours.matrix, theirs.params) < REL


# -- round trips --------------------------------------------------------------------------------------
@pytest.mark.parametrize("pose", [SIM, AFF, Pose.from_params(-90.0, 1.5, (30.0, 40.0))], ids=["sim", "aff", "quarter"])
def test_round_trip(pose):
    pts = points_on_a4(50, 11)
    back = pose.inverse().apply(pose.apply(pts))
    np.testing.assert_allclose(back, pts, rtol=0, atol=1e-9)
    np.testing.assert_allclose(pose.compose(pose.inverse()).matrix, np.eye(3), rtol=0, atol=1e-12)


def test_compose_order():
    first = Pose.from_params(shift=(10.0, 0.0))
    then = Pose.from_params(scale=2.0)
    # shift first, then scale: (1, 1) -> (11, 1) -> (22, 2)
    np.testing.assert_allclose(first.compose(then).apply(np.array([[1.0, 1.0]])), [[22.0, 2.0]])


# -- the sign of the rotation ------------------------------------------------------------------------
def test_counterclockwise_moves_right_point_up():
    c = np.array([300.0, 400.0])
    p = Pose.from_params(rotation_deg=10.0, center=tuple(c))
    right, above = p.apply(np.array([c + [100.0, 0.0], c + [0.0, -100.0]]))
    # Counterclockwise as a person sees a y-down page: a point to the right of the centre moves
    # up (smaller y), a point above the centre moves left.
    assert right[1] < c[1] and right[0] < c[0] + 100.0
    assert above[0] < c[0]
    assert right[1] == pytest.approx(c[1] - 100.0 * math.sin(math.radians(10.0)), abs=1e-9)
    assert p.rotation_deg == pytest.approx(10.0, abs=1e-12)
    assert p.apply(c[None])[0] == pytest.approx(c, abs=1e-12)


def test_rotation_sign_matches_opencv_and_skimage():
    c = (297.5, 420.75)  # exact in float32: OpenCV takes the centre as a float32 point
    p = Pose.from_params(rotation_deg=7.5, scale=1.2, center=c)
    # OpenCV getRotationMatrix2D: positive angle = counterclockwise, origin top-left (its
    # documentation, from memory) -- the same convention as ours.
    assert rel_err(p.matrix[:2], cv2.getRotationMatrix2D(c, 7.5, 1.2)) < REL
    # scikit-image: SimilarityTransform(rotation=r) has [[cos r, -sin r], [sin r, cos r]], so a
    # counterclockwise turn as seen on a y-down page is rotation=-r.
    q = Pose.from_params(rotation_deg=7.5, scale=1.2)
    assert rel_err(q.matrix, SimilarityTransform(rotation=-math.radians(7.5), scale=1.2).params) < REL


@pytest.mark.parametrize("deg", [-179.0, -45.0, -1.3, 0.0, 0.2, 90.0, 180.0])
def test_rotation_deg_round_trip(deg):
    assert Pose.from_params(rotation_deg=deg, scale=0.9).rotation_deg == pytest.approx(deg, abs=1e-9)


# -- degenerate input -------------------------------------------------------------------------------
def test_coincident_points():
    src = np.full((5, 2), 100.0)
    fit = Pose.from_pairs(src, src + 3.0)
    assert isinstance(fit, DegenerateFit) and bool(fit) is False
    assert fit.reason == "model points coincide: the pose is not determined"
    # scikit-image refuses the same input.
    assert not SimilarityTransform.from_estimate(src, src + 3.0)


def test_one_pair():
    fit = Pose.from_pairs(np.array([[1.0, 2.0]]), np.array([[3.0, 4.0]]))
    assert isinstance(fit, DegenerateFit) and bool(fit) is False
    assert fit.reason == "similarity pose needs at least 2 point pairs, got 1"
    fit = Pose.from_pairs(np.array([[1.0, 2.0], [5.0, 6.0]]), np.array([[3.0, 4.0], [7.0, 9.0]]), "affine")
    assert not fit and fit.reason == "affine pose needs at least 3 point pairs, got 2"


def test_collinear_points_for_affine():
    src = np.column_stack([np.linspace(10, 500, 8), np.linspace(30, 300, 8)])
    dst = SIM.apply(src)
    fit = Pose.from_pairs(src, dst, "affine")
    assert isinstance(fit, DegenerateFit) and bool(fit) is False
    assert fit.reason == "model points are collinear: an affine pose is not determined"
    # numpy.linalg.matrix_rank: the design matrix [x y 1] of collinear points has rank 2 < 3, so
    # the affine least-squares problem has no unique answer. (scikit-image 0.26 and OpenCV's
    # RANSAC both return some matrix here; neither is a reference for this case.)
    assert np.linalg.matrix_rank(np.column_stack([src, np.ones(len(src))])) == 2
    # A similarity is still determined by collinear points.
    sim = Pose.from_pairs(src, dst, "similarity")
    assert sim and rel_err(sim.matrix, SIM.matrix) < REL


def test_zero_weights_count_as_absent():
    src = points_on_a4(3, 12)
    fit = Pose.from_pairs(src, src, "similarity", weights=np.array([1.0, 0.0, 0.0]))
    assert not fit and fit.reason == "similarity pose needs at least 2 point pairs, got 1"


# -- derived quantities --------------------------------------------------------------------------
def test_scales_and_shear_of_hand_built_affine():
    a = math.radians(-3.0)
    rot = np.array([[math.cos(a), -math.sin(a)], [math.sin(a), math.cos(a)]])
    m = np.eye(3)
    m[:2, :2] = rot @ np.diag([1.02, 0.95])
    m[:2, 2] = (4.0, -2.0)
    p = Pose(m)
    assert p.scale_x == pytest.approx(1.02, abs=1e-12)
    assert p.scale_y == pytest.approx(0.95, abs=1e-12)
    assert p.scale == pytest.approx(math.sqrt(1.02 * 0.95), abs=1e-12)
    assert p.shear_deg == pytest.approx(0.0, abs=1e-9)
    assert p.rotation_deg == pytest.approx(3.0, abs=1e-9)
    # A pure shear x' = x + k y: the template's y axis goes to (k, 1), so it lengthens to
    # sqrt(1 + k^2) and leans atan(k) off the perpendicular.
    k = 0.05
    s = Pose(np.array([[1.0, k, 0.0], [0.0, 1.0, 0.0]]))
    assert s.scale_x == pytest.approx(1.0, abs=1e-12)
    assert s.scale_y == pytest.approx(math.hypot(1.0, k), abs=1e-12)
    assert s.shear_deg == pytest.approx(math.degrees(math.atan(k)), abs=1e-9)
    assert s.scale == pytest.approx(1.0, abs=1e-12)


def test_shift_mm_is_offset_of_the_centre():
    tsize, isize = A4_PT, LETTER_PT
    centred = Pose.from_params(scale=0.9, center=(tsize[0] / 2, tsize[1] / 2),
                               shift=((isize[0] - tsize[0]) / 2, (isize[1] - tsize[1]) / 2))
    np.testing.assert_allclose(centred.shift_mm(tsize, isize), [0.0, 0.0], atol=1e-9)
    off = centred.compose(Pose.from_params(shift=(72.0, -36.0)))
    # 72 pt = 1 in = 25.4 mm (ISO 32000-1; the inch by definition).
    np.testing.assert_allclose(off.shift_mm(tsize, isize), [25.4, -12.7], atol=1e-9)
    assert MM_PER_POINT == pytest.approx(25.4 / 72.0, abs=1e-15)


# -- fit to page: A4 on Letter and Letter on A4 ----------------------------------------------------
def fit_scale(src: tuple[float, float], dst: tuple[float, float]) -> float:
    return min(dst[0] / src[0], dst[1] / src[1])


def test_fit_to_page_scales():
    # A4 595.276 x 841.890 pt (ISO 216 with ISO 32000-1 points), Letter 612 x 792 pt (ANSI/ASME Y14.1).
    assert round(A4_PT[0], 3) == 595.276 and round(A4_PT[1], 3) == 841.890
    assert LETTER_PT == (612.0, 792.0)
    assert round(fit_scale(A4_PT, LETTER_PT), 4) == 0.9407
    assert round(fit_scale(LETTER_PT, A4_PT), 4) == 0.9727


def draw_form(path, page_size, content_size, scale, title):
    """A small form (border, rules, boxes, checkboxes, marks, labels) drawn in a frame of
    ``content_size`` points, scaled by ``scale`` and centred on a page of ``page_size``."""
    from reportlab.pdfgen import canvas

    w, h = content_size
    c = canvas.Canvas(str(path), pagesize=page_size)
    c.translate((page_size[0] - scale * w) / 2.0, (page_size[1] - scale * h) / 2.0)
    c.scale(scale, scale)
    c.setLineWidth(0.8)
    for x, y in ((28, h - 42), (w - 42, h - 42), (28, 28), (w - 42, 28)):
        c.rect(x, y, 14, 14, stroke=0, fill=1)  # registration marks
    c.setFont("Helvetica", 10)
    c.drawString(60, h - 70, title)
    c.line(60, h - 80, w - 60, h - 80)
    y = h - 130
    for row in range(7):
        c.drawString(60, y + 22, f"Field {row + 1}")
        c.rect(60, y, 180 + 20 * row, 18)
        c.rect(330, y, 120 - 8 * row, 18)
        c.rect(w - 100, y + 3, 11, 11)  # checkbox
        y -= 62
    c.line(60, y + 20, w - 60, y + 20)
    c.rect(60, 90, w - 120, 70)
    c.drawString(70, 140, "Remarks")
    c.showPage()
    c.save()


@pytest.mark.parametrize("ref_size, page_size, expected", [(A4_PT, LETTER_PT, 0.9407), (LETTER_PT, A4_PT, 0.9727)],
                         ids=["a4-on-letter", "letter-on-a4"])
def test_solver_measures_fit_to_page(tmp_path, ref_size, page_size, expected):
    from layoutcheck.check import check_file, learn

    s = fit_scale(ref_size, page_size)
    assert round(s, 4) == expected
    ref = tmp_path / "KBH-901_reference.pdf"
    inp = tmp_path / "KBH-901_fit.pdf"
    draw_form(ref, ref_size, ref_size, 1.0, "KBH-901 Pilot Boarding Record")
    draw_form(inp, page_size, ref_size, s, "KBH-901 Pilot Boarding Record")
    template = learn([str(ref)], with_raster=False)
    (rec,) = list(check_file(str(inp), [template]))
    assert rec["error"] is None
    assert rec["verdict"] == "rescaled"
    pose = rec["pose"]
    assert pose["scale"] == pytest.approx(s, abs=2e-5)
    assert pose["scale_x"] == pytest.approx(s, abs=2e-5)
    assert pose["scale_y"] == pytest.approx(s, abs=2e-5)
    assert pose["rotation_deg"] == pytest.approx(0.0, abs=1e-3)
    assert pose["shift_mm"] == pytest.approx([0.0, 0.0], abs=0.02)
    assert rec["offending"] == []
    assert [f["verdict"] for f in rec["findings"]] == ["rescaled"]
