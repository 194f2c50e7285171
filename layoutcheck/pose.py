"""Pose of a page: a 2-D transform from template points to input points.

A :class:`Pose` is one homogeneous 3 x 3 matrix; rotation, scales, shear and shift are derived
from it, never stored twice. Both sides are in points, top-left origin, y down (see
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

    def __post_init__(self) -> None:
        m = np.array(self.matrix, dtype=float)
        if m.shape == (2, 3):
            m = np.vstack([m, [0.0, 0.0, 1.0]])
        if m.shape != (3, 3):
            raise ValueError(f"a pose needs a 3x3 or 2x3 matrix, got shape {m.shape}")
        m.setflags(write=False)
        object.__setattr__(self, "matrix", m)

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
        problem in ``a = s cos, b = s sin``) or over affine maps (``kind="affine"``).

        Parameters
        ----------
        model_pts, input_pts : (N, 2) arrays
            Corresponding points, template side and input side, in points.
        kind : {"similarity", "affine"}
        weights : (N,) array, optional
            Non-negative weight per pair.

        Returns
        -------
        Pose or DegenerateFit
            A :class:`DegenerateFit` (tests false, has ``reason``) when the points cannot fix
            the pose: too few, coincident or (for affine) collinear.

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
        need = {"similarity": 2, "affine": 3}.get(kind)
        if need is None:
            raise ValueError(f"unknown pose kind {kind!r}: use 'similarity' or 'affine'")
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
        return cls(m)

    # -- use ----------------------------------------------------------------------------------
    def apply(self, pts: np.ndarray) -> np.ndarray:
        """Map (N, 2) template points to input points."""
        p = np.asarray(pts, dtype=float).reshape(-1, 2)
        return p @ self.matrix[:2, :2].T + self.matrix[:2, 2]

    def residuals(self, model_pts: np.ndarray, input_pts: np.ndarray) -> np.ndarray:
        """Euclidean distance, in points, between mapped model points and input points."""
        return np.hypot(*(self.apply(model_pts) - np.asarray(input_pts, dtype=float).reshape(-1, 2)).T)

    def inverse(self) -> "Pose":
        return Pose(np.linalg.inv(self.matrix))

    def compose(self, then: "Pose") -> "Pose":
        """The pose that applies ``self`` first and ``then`` after it."""
        return Pose(then.matrix @ self.matrix)

    # -- derived quantities -------------------------------------------------------------------
    @property
    def linear(self) -> np.ndarray:
        return self.matrix[:2, :2]

    @property
    def translation(self) -> np.ndarray:
        return self.matrix[:2, 2].copy()

    @property
    def rotation_deg(self) -> float:
        """Turn of the content as a person sees it, counterclockwise positive, in (-180, 180]."""
        a = -math.degrees(math.atan2(self.matrix[1, 0], self.matrix[0, 0]))
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

    def as_2x3(self) -> list[list[float]]:
        return [[float(v) for v in row] for row in self.matrix[:2]]
