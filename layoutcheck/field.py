"""The residual field: a smooth displacement left on a page after its pose (paper not flat).

A sheet that does not lie flat on the glass, or that curls in a feeder, moves its content by a
millimetre or so, smoothly, differently in each part of the page. No single pose takes that
out, so without a field a long rule or a box far from the page's centre sits "moved" on an
intact form. The field is fitted over the matched elements, after the pose and the sections'
own shifts: each element's residual (where it is, taken back through the pose, less where the
template has it) is a sample of the field at the element's template place.

The fit is a low-order polynomial in x and y per component (degree 3 where enough elements
carry it, fewer where not), by iteratively reweighted least squares with Tukey's biweight:
an element moved by several millimetres gets no weight, so a moved box cannot bend the field
towards itself and is still found moved. A rule measures the field only across itself (its
place along its length is not known from its extent), so each component takes only the
elements that measure it.

The field works with any pose it is given: residuals come from :meth:`Pose.inverse` and
:meth:`Pose.apply` alone.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .elements import MM_PER_POINT

#: Elements that measure the field on each axis (x, y): boxes and marks on both; a horizontal
#: rule only up and down, a vertical rule only across. Printed text in a scan is too loosely
#: placed (its box moves with blur and threshold) to measure a millimetre.
MEASURES = {
    "box": (True, True), "checkbox": (True, True), "mark": (True, True), "field": (True, True),
    "hline": (False, True), "vline": (True, False),
}
#: Tukey's biweight constant for 95 % efficiency on Gaussian residuals (common practice).
TUKEY_C = 4.685
#: Least and first rejection distances, points: residuals beyond the first (4 mm) never pull
#: the field; the robust scale never goes under 0.35 mm, the spread of a good scan's elements.
FIRST_REJECT = 4.0 / MM_PER_POINT
LEAST_SCALE = 0.35 / MM_PER_POINT


@dataclass(frozen=True)
class ResidualField:
    """A smooth displacement over a template page, template points -> points.

    ``coef`` holds one column of polynomial coefficients per axis, for the monomials of
    :func:`monomials` in coordinates centred on ``centre`` and divided by ``spread``.
    """

    coef: np.ndarray
    degree: int
    centre: np.ndarray
    spread: float
    #: Box around the elements that carry the field (x0, top, x1, bottom), template points.
    extent: tuple[float, float, float, float]
    #: Elements with weight in the final fit, per axis.
    support: tuple[int, int]

    def at(self, pts: np.ndarray) -> np.ndarray:
        """Displacement (N, 2) at template points ``pts`` (N, 2)."""
        pts = np.asarray(pts, dtype=float).reshape(-1, 2)
        return monomials((pts - self.centre) / self.spread, self.degree) @ self.coef

    @property
    def largest(self) -> float:
        """Largest displacement over :attr:`extent`, points (on a 33 x 33 grid)."""
        x0, top, x1, bottom = self.extent
        gx, gy = np.meshgrid(np.linspace(x0, x1, 33), np.linspace(top, bottom, 33))
        d = self.at(np.column_stack([gx.ravel(), gy.ravel()]))
        return float(np.hypot(d[:, 0], d[:, 1]).max())

    @property
    def largest_mm(self) -> float:
        return self.largest * MM_PER_POINT


def monomials(uv: np.ndarray, degree: int) -> np.ndarray:
    """Design matrix ``u**i * v**j`` for ``i + j <= degree``, ordered by total degree then ``j``."""
    u, v = uv[:, 0], uv[:, 1]
    cols = [u ** (d - j) * v ** j for d in range(degree + 1) for j in range(d + 1)]
    return np.column_stack(cols)


def n_terms(degree: int) -> int:
    return (degree + 1) * (degree + 2) // 2


def _tukey(r: np.ndarray, c: float) -> np.ndarray:
    w = np.clip(1.0 - (r / c) ** 2, 0.0, None)
    return w * w


def fit_field(points: np.ndarray, residuals: np.ndarray, measures: np.ndarray, max_degree: int = 3,
              per_term: int = 3, rounds: int = 8) -> ResidualField | None:
    """Fit a smooth residual field robustly.

    Parameters
    ----------
    points : (N, 2) array
        Template places of the matched elements, points.
    residuals : (N, 2) array
        Where each was found (taken back through the pose) less where the template has it,
        points, after any section's own shift.
    measures : (N, 2) bool array
        Which components each element measures (see :data:`MEASURES`).
    max_degree : int
        Highest polynomial degree; an axis uses the highest degree with at least ``per_term``
        elements per coefficient, and no field is fitted on an axis with fewer than three
        times three.
    rounds : int
        Reweighting rounds.

    Returns
    -------
    ResidualField or None
        None when neither axis has enough elements. The weighted squared residual
        ``sum w_i (r_i - f(p_i))**2`` with Tukey weights ``w_i`` is what each round minimises.
    """
    pts = np.asarray(points, dtype=float).reshape(-1, 2)
    res = np.asarray(residuals, dtype=float).reshape(-1, 2)
    meas = np.asarray(measures, dtype=bool).reshape(-1, 2)
    counts = meas.sum(0)
    degrees = [max((d for d in range(max_degree + 1) if c >= per_term * n_terms(d)), default=-1) for c in counts]
    if max(degrees) < 1:
        return None
    degree = max(degrees)
    centre = (pts.min(0) + pts.max(0)) / 2
    spread = max(float(np.abs(pts - centre).max()), 1.0)
    design = monomials((pts - centre) / spread, degree)
    coef = np.zeros((n_terms(degree), 2))
    support = [0, 0]
    for axis in (0, 1):
        d = degrees[axis]
        if d < 0:
            continue
        rows = np.flatnonzero(meas[:, axis])
        a = design[rows, : n_terms(d)]
        y = res[rows, axis]
        # The first weights come from the residuals themselves: far ones never start the fit.
        c = FIRST_REJECT
        fit = np.zeros(n_terms(d))
        w = _tukey(np.abs(y), c)
        for _ in range(rounds):
            if (w > 0).sum() < n_terms(d):
                break
            sw = np.sqrt(w)
            fit = np.linalg.lstsq(a * sw[:, None], y * sw, rcond=None)[0]
            r = y - a @ fit
            sigma = 1.4826 * float(np.median(np.abs(r[w > 0])))
            c = TUKEY_C * max(sigma, LEAST_SCALE)
            w = _tukey(np.abs(r), c)
        coef[: n_terms(d), axis] = fit
        support[axis] = int((w > 0).sum())
    lo, hi = pts[meas.any(1)].min(0), pts[meas.any(1)].max(0)
    return ResidualField(coef, degree, centre, spread, (float(lo[0]), float(lo[1]), float(hi[0]), float(hi[1])),
                         (support[0], support[1]))


def field_of_match(centers: np.ndarray, offsets: np.ndarray, kinds, found: np.ndarray) -> ResidualField | None:
    """The residual field of one page's match.

    ``centers`` are the template elements' centres, ``offsets`` their residuals (NaN where not
    found), ``kinds`` their kinds and ``found`` which of them have a partner to measure with.
    """
    meas = np.array([MEASURES.get(k, (False, False)) for k in kinds], bool).reshape(-1, 2)
    use = np.asarray(found, bool) & meas.any(1) & np.isfinite(offsets).all(1)
    if not use.any():
        return None
    return fit_field(centers[use], offsets[use], meas[use])
