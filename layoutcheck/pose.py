"""Pose of a page: a 2-D transform from template points to input points.

A :class:`Pose` is one homogeneous 3 x 3 matrix; rotation, scales, shear and shift are derived
from it, never stored twice. Its kinds differ only in how many parameters a fit frees: a
similarity (4), an affine map (6) or a projective one (8, a homography: a photographed sheet seen
in perspective). Every kind maps points, inverts, composes and projects a frame the same way;
for a projective pose the derived quantities (rotation, scales, shear) are those of its local
linear map at :attr:`Pose.anchor` (the centre of the points it was fitted on), and
:meth:`Pose.affine_over` gives the best affine approximation over a region. Both sides are in points, top-left origin, y down (see
:mod:`layoutcheck.elements`), so ``scale`` is the size of the content on the input relative to the
template in physical units.

Sign of the rotation: in y-down coordinates the matrix ``[[cos a, -sin a], [sin a, cos a]]`` turns
content *clockwise* as a person sees the page. :attr:`Pose.rotation_deg` reports what a person sees,
positive when the content appears turned counterclockwise, so it is ``-a``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .elements import MM_PER_POINT


class DegenerateFit:
    """A fit that could not be made; tests false and carries the reason."""

    def __init__(self, reason: str):
        self.reason = reason

    def __bool__(self) -> bool:
        return False

    def __repr__(self) -> str:
        return f"DegenerateFit({self.reason!r})"


@dataclass(frozen=True)
class Pose:
    """Transform from template points to input points, held as one 3 x 3 matrix.

    Examples
    --------
    >>> p = Pose.from_params(rotation_deg=2.0, scale=0.94, shift=(10.0, -5.0))
    >>> round(p.rotation_deg, 6), round(p.scale, 6)
    (2.0, 0.94)
    """

    matrix: np.ndarray
    #: Template point at which the derived quantities of a projective pose are measured.
    anchor: tuple[float, float] = (0.0, 0.0)

    def __post_init__(self) -> None:
        m = np.array(self.matrix, dtype=float)
        if m.shape == (2, 3):
            m = np.vstack([m, [0.0, 0.0, 1.0]])
        if m.shape != (3, 3):
            raise ValueError(f"a pose needs a 3x3 or 2x3 matrix, got shape {m.shape}")
        if not np.all(np.isfinite(m)) or abs(m[2, 2]) < 1e-300:
            raise ValueError("a pose needs a finite matrix with a non-zero last element")
        m = m / m[2, 2]  # one representative of the homogeneous matrix
        m.setflags(write=False)
        object.__setattr__(self, "matrix", m)
        object.__setattr__(self, "anchor", (float(self.anchor[0]), float(self.anchor[1])))

    # -- construction -------------------------------------------------------------------------
    @classmethod
    def identity(cls) -> "Pose":
        return cls(np.eye(3))

    @classmethod
    def from_params(
        cls,
        rotation_deg: float = 0.0,
        scale: float | tuple[float, float] = 1.0,
        shift: tuple[float, float] = (0.0, 0.0),
        center: tuple[float, float] = (0.0, 0.0),
    ) -> "Pose":
        """Rotate (counterclockwise as seen, degrees) and scale about ``center``, then shift.

        ``scale`` may be ``(sx, sy)``: the template's x and y axes are scaled before turning.
        """
        sx, sy = (scale, scale) if np.isscalar(scale) else scale  # type: ignore[misc]
        a = -math.radians(rotation_deg)  # seen counterclockwise = negative in y-down coordinates
        c, s = math.cos(a), math.sin(a)
        lin = np.array([[c, -s], [s, c]]) @ np.diag([sx, sy])
        cen = np.asarray(center, dtype=float)
        t = cen - lin @ cen + np.asarray(shift, dtype=float)
        m = np.eye(3)
        m[:2, :2] = lin
        m[:2, 2] = t
        return cls(m)

    @classmethod
    def from_pairs(
        cls,
        model_pts: np.ndarray,
        input_pts: np.ndarray,
        kind: str = "similarity",
        weights: np.ndarray | None = None,
    ) -> "Pose | DegenerateFit":
        """Least-squares pose mapping ``model_pts`` onto ``input_pts``.

        Minimises ``sum_i w_i * ||P(model_i) - input_i||^2`` over similarities (rotation, one
        scale, shift; the closed form of Umeyama 1991, written here as the equivalent linear
        problem in ``a = s cos, b = s sin``), over affine maps (``kind="affine"``) or over
        homographies (``kind="projective"``: the normalised direct linear solve of Hartley 1997,
        points centred and scaled first, then Levenberg-Marquardt on the same weighted distances
        with ``scipy.optimize.least_squares``).

        Parameters
        ----------
        model_pts, input_pts : (N, 2) arrays
            Corresponding points, template side and input side, in points.
        kind : {"similarity", "affine", "projective"}
        weights : (N,) array, optional
            Non-negative weight per pair.

        Returns
        -------
        Pose or DegenerateFit
            A :class:`DegenerateFit` (tests false, has ``reason``) when the points cannot fix
            the pose: too few, coincident or (for affine) collinear, or (for projective) three of
            every four on a line.

        Examples
        --------
        >>> src = np.array([[0.0, 0.0], [100.0, 0.0], [0.0, 50.0]])
        >>> p = Pose.from_params(rotation_deg=1.0, scale=1.02, shift=(3.0, 4.0))
        >>> fit = Pose.from_pairs(src, p.apply(src))
        >>> bool(np.allclose(fit.matrix, p.matrix))
        True
        """
        src = np.asarray(model_pts, dtype=float).reshape(-1, 2)
        dst = np.asarray(input_pts, dtype=float).reshape(-1, 2)
        if src.shape != dst.shape:
            return DegenerateFit(f"point sets differ in size: {len(src)} and {len(dst)}")
        w = np.ones(len(src)) if weights is None else np.asarray(weights, dtype=float).ravel()
        if len(w) != len(src):
            return DegenerateFit(f"{len(w)} weights for {len(src)} point pairs")
        keep = w > 0
        src, dst, w = src[keep], dst[keep], w[keep]
        need = {"similarity": 2, "affine": 3, "projective": 4}.get(kind)
        if need is None:
            raise ValueError(f"unknown pose kind {kind!r}: use 'similarity', 'affine' or 'projective'")
        if len(src) < need:
            return DegenerateFit(f"{kind} pose needs at least {need} point pairs, got {len(src)}")
        wsum = w.sum()
        mu_s = (w[:, None] * src).sum(0) / wsum
        mu_d = (w[:, None] * dst).sum(0) / wsum
        s0 = src - mu_s
        d0 = dst - mu_d
        spread = float((w * (s0**2).sum(1)).sum() / wsum)
        if spread < 1e-12:
            return DegenerateFit("model points coincide: the pose is not determined")
        if kind == "projective":
            return _fit_projective(src, dst, w, mu_s)
        m = np.eye(3)
        if kind == "similarity":
            # Centred, the problem separates: a = sum w (x.x'), b = sum w (x cross x') over spread.
            a = float((w * (s0[:, 0] * d0[:, 0] + s0[:, 1] * d0[:, 1])).sum() / wsum) / spread
            b = float((w * (s0[:, 0] * d0[:, 1] - s0[:, 1] * d0[:, 0])).sum() / wsum) / spread
            lin = np.array([[a, -b], [b, a]])
        else:
            cov = (w[:, None, None] * (s0[:, :, None] * s0[:, None, :])).sum(0)
            if np.linalg.cond(cov) > 1e10:
                return DegenerateFit("model points are collinear: an affine pose is not determined")
            cross = (w[:, None, None] * (d0[:, :, None] * s0[:, None, :])).sum(0)
            lin = cross @ np.linalg.inv(cov)
        m[:2, :2] = lin
        m[:2, 2] = mu_d - lin @ mu_s
        return cls(m, tuple(mu_s))

    # -- use ----------------------------------------------------------------------------------
    def apply(self, pts: np.ndarray) -> np.ndarray:
        """Map (N, 2) template points to input points (homogeneous division for every kind)."""
        p = np.asarray(pts, dtype=float).reshape(-1, 2)
        m = self.matrix
        out = p @ m[:2, :2].T + m[:2, 2]
        if self.is_projective:
            out = out / (p @ m[2, :2] + m[2, 2])[:, None]
        return out

    def project_frame(self, frame) -> np.ndarray:
        """Corners of a frame ``(x0, top, x1, bottom)`` on the input, 4 x 2, in the order
        top-left, top-right, bottom-right, bottom-left (in the template's sense)."""
        x0, top, x1, bottom = (float(v) for v in frame)
        return self.apply(np.array([[x0, top], [x1, top], [x1, bottom], [x0, bottom]]))

    def jacobian(self, pts: np.ndarray) -> np.ndarray:
        """Local linear map (N, 2, 2) at each template point: d(input) / d(template)."""
        p = np.asarray(pts, dtype=float).reshape(-1, 2)
        m = self.matrix
        wgt = p @ m[2, :2] + m[2, 2]
        mapped = self.apply(p)
        # d(u/w)/dx = (m00 - u m20) / w, and alike for the other three entries.
        jac = (m[None, :2, :2] - mapped[:, :, None] * m[None, 2, :2][:, None, :]) / wgt[:, None, None]
        return jac

    def local_scales(self, pts: np.ndarray) -> np.ndarray:
        """Smallest and largest stretch (N, 2) of the pose at each template point.

        The singular values of :meth:`jacobian`: input length per template length along the
        direction shrunk most and the one stretched most.
        """
        return np.linalg.svd(self.jacobian(pts), compute_uv=False)[:, ::-1]

    def affine_over(self, frame, n: int = 9) -> "Pose":
        """Best affine approximation (least squares on an ``n`` x ``n`` grid) over a frame.

        For an affine pose this is the pose itself.
        """
        if not self.is_projective:
            return self
        x0, top, x1, bottom = (float(v) for v in frame)
        gx, gy = np.meshgrid(np.linspace(x0, x1, n), np.linspace(top, bottom, n))
        grid = np.column_stack([gx.ravel(), gy.ravel()])
        fit = Pose.from_pairs(grid, self.apply(grid), "affine")
        return fit if fit else Pose(self.jacobian_pose().matrix)

    def perspective_over(self, frame) -> float:
        """How far the pose departs from its best affine approximation over a frame: the largest
        distance between the two at the frame's corners, in the units the pose maps to (0 for an
        affine pose)."""
        if not self.is_projective:
            return 0.0
        x0, top, x1, bottom = (float(v) for v in frame)
        corners = np.array([[x0, top], [x1, top], [x1, bottom], [x0, bottom]])
        return float(np.hypot(*(self.apply(corners) - self.affine_over(frame).apply(corners)).T).max())

    def jacobian_pose(self) -> "Pose":
        """First-order (affine) approximation at :attr:`anchor`."""
        a = np.array(self.anchor)
        lin = self.jacobian(a)[0]
        m = np.eye(3)
        m[:2, :2] = lin
        m[:2, 2] = self.apply(a)[0] - lin @ a
        return Pose(m, self.anchor)

    def residuals(self, model_pts: np.ndarray, input_pts: np.ndarray) -> np.ndarray:
        """Euclidean distance, in points, between mapped model points and input points."""
        return np.hypot(*(self.apply(model_pts) - np.asarray(input_pts, dtype=float).reshape(-1, 2)).T)

    def inverse(self) -> "Pose":
        return Pose(np.linalg.inv(self.matrix), tuple(self.apply(self.anchor)[0]))

    def compose(self, then: "Pose") -> "Pose":
        """The pose that applies ``self`` first and ``then`` after it."""
        return Pose(then.matrix @ self.matrix, self.anchor)

    # -- derived quantities -------------------------------------------------------------------
    @property
    def is_projective(self) -> bool:
        """Whether the last row carries perspective (a homography, not an affine map)."""
        return bool(abs(self.matrix[2, 0]) > 1e-15 or abs(self.matrix[2, 1]) > 1e-15)

    @property
    def kind(self) -> str:
        """``"similarity"``, ``"affine"`` or ``"projective"``: the fewest parameters that hold it."""
        if self.is_projective:
            return "projective"
        a, b, c, d = self.matrix[:2, :2].ravel()
        return "similarity" if abs(a - d) < 1e-12 and abs(b + c) < 1e-12 else "affine"

    @property
    def linear(self) -> np.ndarray:
        """The 2 x 2 linear part; for a projective pose its local linear map at :attr:`anchor`."""
        if self.is_projective:
            return self.jacobian(np.array(self.anchor))[0]
        return self.matrix[:2, :2]

    @property
    def translation(self) -> np.ndarray:
        return self.matrix[:2, 2].copy()

    @property
    def rotation_deg(self) -> float:
        """Turn of the content as a person sees it, counterclockwise positive, in (-180, 180]."""
        lin = self.linear
        a = -math.degrees(math.atan2(lin[1, 0], lin[0, 0]))
        return 180.0 if a <= -180.0 else a

    @property
    def scale(self) -> float:
        """Overall scale: the square root of the area ratio."""
        return math.sqrt(abs(float(np.linalg.det(self.linear))))

    @property
    def scale_x(self) -> float:
        """Length on the input of one template unit along the template's x axis."""
        return float(np.hypot(*self.linear[:, 0]))

    @property
    def scale_y(self) -> float:
        """Length on the input of one template unit along the template's y axis."""
        return float(np.hypot(*self.linear[:, 1]))

    @property
    def shear_deg(self) -> float:
        """How far the mapped template axes are from perpendicular, in degrees."""
        cx, cy = self.linear[:, 0], self.linear[:, 1]
        cosang = float(cx @ cy) / (np.linalg.norm(cx) * np.linalg.norm(cy))
        return math.degrees(math.asin(max(-1.0, min(1.0, cosang))))

    def shift_mm(self, template_size: tuple[float, float], input_size: tuple[float, float]) -> np.ndarray:
        """Where the template page's centre lands relative to the input page's centre, in mm.

        Zero for content that is centred on the input page, whatever its turn or scale; this is
        what "shifted" means to a person looking at the sheet.
        """
        tc = np.array(template_size, dtype=float) / 2.0
        ic = np.array(input_size, dtype=float) / 2.0
        return (self.apply(tc)[0] - ic) * MM_PER_POINT

    def as_2x3(self, frame=None) -> list[list[float]]:
        """The 2 x 3 affine matrix; for a projective pose its best affine approximation over
        ``frame`` (default: its first-order approximation at :attr:`anchor`)."""
        approx = self if not self.is_projective else (self.affine_over(frame) if frame is not None else self.jacobian_pose())
        return [[float(v) for v in row] for row in approx.matrix[:2]]

    def as_3x3(self) -> list[list[float]]:
        """The homogeneous matrix, last element 1."""
        return [[float(v) for v in row] for row in self.matrix]


def _conditioner(pts: np.ndarray, w: np.ndarray) -> np.ndarray:
    """Similarity moving the weighted centroid to 0 and the mean distance to sqrt(2) (Hartley)."""
    mu = (w[:, None] * pts).sum(0) / w.sum()
    d = float((w * np.hypot(*(pts - mu).T)).sum() / w.sum())
    k = math.sqrt(2.0) / max(d, 1e-12)
    return np.array([[k, 0.0, -k * mu[0]], [0.0, k, -k * mu[1]], [0.0, 0.0, 1.0]])


def _fit_projective(src: np.ndarray, dst: np.ndarray, w: np.ndarray, anchor: np.ndarray) -> "Pose | DegenerateFit":
    """Weighted homography: normalised direct linear solve, then least squares on distances."""
    from scipy.optimize import least_squares

    ts, td = _conditioner(src, w), _conditioner(dst, w)
    s = src @ ts[:2, :2].T + ts[:2, 2]
    d = dst @ td[:2, :2].T + td[:2, 2]
    n = len(s)
    x, y, u, v = s[:, 0], s[:, 1], d[:, 0], d[:, 1]
    one, zero = np.ones(n), np.zeros(n)
    a = np.empty((2 * n, 9))
    a[0::2] = np.column_stack([x, y, one, zero, zero, zero, -u * x, -u * y, -u])
    a[1::2] = np.column_stack([zero, zero, zero, x, y, one, -v * x, -v * y, -v])
    a *= np.sqrt(np.repeat(w, 2))[:, None]
    _, sv, vt = np.linalg.svd(a, full_matrices=False)
    # A unique homography leaves exactly one null direction: the next singular value must not
    # vanish too (it does when three of every four points lie on a line).
    if len(sv) < 9 or sv[-2] < 1e-9 * sv[0]:
        return DegenerateFit("model points are collinear: a projective pose is not determined")
    h = vt[-1].reshape(3, 3)
    sw = np.sqrt(w)

    def mapped(p):
        hm = np.append(p, 1.0).reshape(3, 3)
        den = s @ hm[2, :2] + 1.0
        return (s @ hm[:2, :2].T + hm[:2, 2]) / den[:, None], den

    def resid(p):
        u, _ = mapped(p)
        return ((u - d) * sw[:, None]).ravel()

    def jac(p):
        # d(u)/d(h00, h01, h02) = (x, y, 1) / den; d(u)/d(h20, h21) = -u (x, y) / den; alike for v.
        u, den = mapped(p)
        x, y = s[:, 0], s[:, 1]
        k = sw / den
        j = np.zeros((n, 2, 8))
        j[:, 0, 0], j[:, 0, 1], j[:, 0, 2] = x * k, y * k, k
        j[:, 1, 3], j[:, 1, 4], j[:, 1, 5] = x * k, y * k, k
        j[:, :, 6] = -u * (x * k)[:, None]
        j[:, :, 7] = -u * (y * k)[:, None]
        return j.reshape(2 * n, 8)

    if abs(h[2, 2]) > 1e-12 and n > 4:
        h = h / h[2, 2]
        fit = least_squares(resid, h.ravel()[:8], jac=jac, method="lm", xtol=1e-14, ftol=1e-14)
        h = np.append(fit.x, 1.0).reshape(3, 3)
    m = np.linalg.inv(td) @ h @ ts
    if not np.all(np.isfinite(m)) or abs(m[2, 2]) < 1e-300:
        return DegenerateFit("points do not fix a projective pose")
    return Pose(m, tuple(anchor))
