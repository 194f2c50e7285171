"""Projective poses (homographies): fits, mapping, inverse, composition, frames and local scales.

Outside references: OpenCV (``perspectiveTransform``, ``getPerspectiveTransform``,
``findHomography``), scikit-image 0.26 (``ProjectiveTransform.from_estimate``), numpy
(``linalg.svd`` of a finite-difference Jacobian) and ISO 216 (A4: 210 x 297 mm).
"""

from __future__ import annotations

import cv2
import numpy as np
import pytest
from skimage.transform import ProjectiveTransform

from layoutcheck.pose import DegenerateFit, Pose

# ISO 216: A4 is 210 x 297 mm; 1 pt = 1/72 in (ISO 32000-1).
A4_PT = (210.0 / 25.4 * 72.0, 297.0 / 25.4 * 72.0)


def planted_homography(dx: float = 0.04) -> np.ndarray:
    """The homography taking the A4 page's corners to corners displaced by up to ``dx`` of its
    width, made by OpenCV from the four corner pairs (an outside construction)."""
    w, h = A4_PT
    src = np.float32([[0, 0], [w, 0], [w, h], [0, h]])
    dst = np.float32([[w * dx, 0.3 * w * dx], [w * (1 - 0.4 * dx), -0.5 * w * dx], [w * (1 + 0.2 * dx), h], [-0.6 * w * dx, h * (1 - dx)]])
    dst = dst * 1.7 + np.float32([120.0, 80.0])  # a photo at 1.7 px per point, sheet off the origin
    return cv2.getPerspectiveTransform(src, dst)


def points_on_a4(n: int, seed: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    return rng.uniform([15.0, 15.0], [A4_PT[0] - 15.0, A4_PT[1] - 15.0], (n, 2))


H = planted_homography()


def test_mapping_agrees_with_opencv_perspective_transform():
    pts = points_on_a4(200, 1)
    ours = Pose(H).apply(pts)
    # OpenCV's perspectiveTransform on the same matrix (float64 points in, float64 out).
    theirs = cv2.perspectiveTransform(pts.reshape(-1, 1, 2), H).reshape(-1, 2)
    assert np.abs(ours - theirs).max() < 1e-9


def test_exact_fit_recovers_the_planted_matrix_and_agrees_with_skimage():
    src = points_on_a4(30, 2)
    dst = cv2.perspectiveTransform(src.reshape(-1, 1, 2), H).reshape(-1, 2)
    ours = Pose.from_pairs(src, dst, "projective")
    assert ours and ours.kind == "projective"
    assert np.abs(ours.matrix - H / H[2, 2]).max() / np.abs(H).max() < 1e-9
    # scikit-image 0.26: ProjectiveTransform.from_estimate (total least squares on the same pairs).
    theirs = ProjectiveTransform.from_estimate(src, dst)
    assert theirs
    grid = points_on_a4(50, 3)
    assert np.abs(ours.apply(grid) - theirs(grid)).max() < 1e-6
    assert np.abs(ours.matrix - theirs.params / theirs.params[2, 2]).max() / np.abs(H).max() < 1e-6


def test_noisy_fit_is_at_least_as_close_as_opencv_least_squares():
    rng = np.random.default_rng(4)
    src = points_on_a4(80, 5)
    truth = cv2.perspectiveTransform(src.reshape(-1, 1, 2), H).reshape(-1, 2)
    dst = truth + rng.normal(0.0, 0.5, truth.shape)
    ours = Pose.from_pairs(src, dst, "projective")
    # OpenCV's findHomography with method 0: least squares on all pairs, refined by
    # Levenberg-Marquardt on the distances (from memory), the same criterion as ours.
    theirs, _ = cv2.findHomography(src, dst, 0)
    err_ours = np.hypot(*(ours.apply(src) - dst).T)
    err_theirs = np.hypot(*(cv2.perspectiveTransform(src.reshape(-1, 1, 2), theirs).reshape(-1, 2) - dst).T)
    assert (err_ours**2).sum() <= (err_theirs**2).sum() * (1 + 1e-6)
    corners = np.array([[0, 0], [A4_PT[0], 0], [A4_PT[0], A4_PT[1]], [0, A4_PT[1]]])
    assert np.abs(ours.apply(corners) - Pose(H).apply(corners)).max() < 1.0


def test_weights_ignore_a_planted_outlier():
    src = points_on_a4(20, 6)
    dst = Pose(H).apply(src)
    dst[7] += (40.0, -25.0)
    w = np.ones(20)
    w[7] = 0.0
    fit = Pose.from_pairs(src, dst, "projective", w)
    assert np.abs(fit.apply(src) - Pose(H).apply(src))[np.arange(20) != 7].max() < 1e-8
    assert np.hypot(*(fit.apply(src[7:8]) - dst[7:8]).T)[0] == pytest.approx(np.hypot(40.0, -25.0), rel=1e-6)


def test_inverse_and_compose_round_trip():
    p = Pose(H)
    pts = points_on_a4(40, 7)
    assert np.abs(p.inverse().apply(p.apply(pts)) - pts).max() < 1e-9
    sim = Pose.from_params(rotation_deg=1.5, scale=0.8, shift=(10.0, 5.0))
    both = sim.compose(p)
    assert both.kind == "projective"
    assert np.abs(both.apply(pts) - p.apply(sim.apply(pts))).max() < 1e-9
    assert np.abs(p.compose(p.inverse()).apply(pts) - pts).max() < 1e-9


def test_project_frame_gives_the_four_mapped_corners_in_order():
    frame = (100.0, 200.0, 300.0, 260.0)
    quad = Pose(H).project_frame(frame)
    want = cv2.perspectiveTransform(np.array([[[100.0, 200.0]], [[300.0, 200.0]], [[300.0, 260.0]], [[100.0, 260.0]]]), H)
    assert np.abs(quad - want.reshape(-1, 2)).max() < 1e-9


def test_jacobian_and_local_scales_against_finite_differences():
    p = Pose(H)
    pts = points_on_a4(10, 8)
    eps = 1e-4
    for q, jac, sv in zip(pts, p.jacobian(pts), p.local_scales(pts)):
        fd = np.column_stack([(p.apply(q + [eps, 0]) - p.apply(q - [eps, 0]))[0] / (2 * eps),
                              (p.apply(q + [0, eps]) - p.apply(q - [0, eps]))[0] / (2 * eps)])
        assert np.abs(jac - fd).max() < 1e-6
        # numpy's SVD of the finite-difference Jacobian: smallest and largest stretch.
        assert np.allclose(sv, np.sort(np.linalg.svd(fd, compute_uv=False)), rtol=1e-6)


def test_affine_poses_are_unchanged_by_the_projective_interface():
    sim = Pose.from_params(rotation_deg=2.0, scale=1.1, shift=(3.0, 4.0))
    assert sim.kind == "similarity" and not sim.is_projective
    assert sim.affine_over((0, 0, 100, 100)) is sim
    assert np.allclose(sim.local_scales(np.zeros((1, 2))), [[1.1, 1.1]])
    aff = Pose(np.array([[1.02, 0.01, 1.0], [0.0, 0.97, 2.0]]))
    assert aff.kind == "affine"


def test_best_affine_approximation_is_closer_than_the_tangent_map():
    p = Pose(H)
    frame = (0.0, 0.0, *A4_PT)
    grid = np.column_stack([g.ravel() for g in np.meshgrid(np.linspace(0, A4_PT[0], 15), np.linspace(0, A4_PT[1], 15))])
    best = p.affine_over(frame)
    tangent = Pose(p.jacobian_pose().matrix)
    assert best.kind in ("affine", "similarity")
    e_best = np.abs(best.apply(grid) - p.apply(grid)).max()
    e_tan = np.abs(tangent.apply(grid) - p.apply(grid)).max()
    assert e_best < e_tan
    assert np.allclose(p.as_2x3(frame), best.matrix[:2])


def test_degenerate_projective_fits_say_why():
    line = np.column_stack([np.linspace(0, 100, 10), np.linspace(0, 50, 10)])
    bad = Pose.from_pairs(line, line * 2, "projective")
    assert isinstance(bad, DegenerateFit) and not bad
    assert bad.reason == "model points are collinear: a projective pose is not determined"
    few = Pose.from_pairs(line[:3], line[:3], "projective")
    assert few.reason == "projective pose needs at least 4 point pairs, got 3"


def test_perspective_over_a_frame_against_a_numpy_least_squares_affine_fit():
    """How far a keystone departs from its best affine pose: an affine map fitted by
    ``numpy.linalg.lstsq`` on the same 9 x 9 grid (outside reference), at the frame's corners."""
    w, h = 595.0, 842.0  # A4 in points (ISO 216: 210 x 297 mm; 1 pt = 1/72 in)
    src = np.float32([[0, 0], [w, 0], [w, h], [0, h]])
    dst = src.copy()
    dst[0, 0] += 12.0  # the top edge 24 pt shorter: a phone tilted about the page's width
    dst[1, 0] -= 12.0
    pose = Pose(cv2.getPerspectiveTransform(src, dst).astype(float))
    gx, gy = np.meshgrid(np.linspace(0, w, 9), np.linspace(0, h, 9))
    grid = np.column_stack([gx.ravel(), gy.ravel()])
    design = np.column_stack([grid, np.ones(len(grid))])
    coef, *_ = np.linalg.lstsq(design, pose.apply(grid), rcond=None)
    corners = np.column_stack([src, np.ones(4)]) @ coef
    want = np.hypot(*(pose.apply(src) - corners).T).max()
    assert pose.perspective_over((0, 0, w, h)) == pytest.approx(want, abs=1e-6)
    assert 5.0 < want < 12.0
    assert Pose(np.array([[1.0, 0.02, 3.0], [0.01, 0.98, -2.0], [0, 0, 1]])).perspective_over((0, 0, w, h)) == 0.0
