"""Trial slip surfaces: circles and polylines, in the section's own x (not the movement frame).

A circular slip surface is the lower half of its circle, y = yc - sqrt(R^2 - (x - xc)^2); the
sliding mass lies between it and the ground. Surfaces are plain frozen dataclasses with
``as_polyline(n)`` for drawing; slicing (``solver.slicing``) decides whether a surface is
admissible for a section.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from solver.errors import SurfaceError


@dataclass(frozen=True)
class CircularSurface:
    """Circular slip surface: centre (``centre_x``, ``centre_y``) [m] and ``radius`` [m]. The
    fields may be arrays of equal shape (a family of trial circles)."""

    centre_x: float
    centre_y: float
    radius: float

    def as_polyline(self, n: int = 100) -> np.ndarray:
        """``n`` points [m] along the lower half of the circle, left to right, for drawing; an
        array (n, 2) (or (..., n, 2) for a family of circles)."""
        angle = np.linspace(np.pi, 2 * np.pi, n)
        xc, yc, r = (np.asarray(v, dtype=float)[..., None] for v in
                     (self.centre_x, self.centre_y, self.radius))
        return np.stack([xc + r * np.cos(angle), yc + r * np.sin(angle)], axis=-1)


@dataclass(frozen=True)
class PolylineSurface:
    """Non-circular slip surface: vertices ``points`` (k, 2) [m], x strictly increasing."""

    points: np.ndarray

    def __post_init__(self) -> None:
        points = np.array(self.points, dtype=float)
        if points.ndim != 2 or points.shape[1] != 2 or len(points) < 2:
            raise SurfaceError(
                f"a polyline surface needs (k, 2) points, k >= 2, got {self.points!r}"
            )
        if not np.isfinite(points).all():
            raise SurfaceError(f"polyline surface points must be finite, got {self.points!r}")
        step = np.diff(points[:, 0])
        if (step <= 0).any():
            i = int(np.argmax(step <= 0))
            raise SurfaceError(
                f"polyline surface doubles back: x = {points[i, 0]:g} is followed by "
                f"x = {points[i + 1, 0]:g} m"
            )
        points.setflags(write=False)
        object.__setattr__(self, "points", points)

    def as_polyline(self, n: int = 100) -> np.ndarray:
        """At least ``n`` points [m] along the polyline, all its vertices included, for drawing
        (named like ``CircularSurface.as_polyline``; ``points`` is the field)."""
        x = np.union1d(np.linspace(self.points[0, 0], self.points[-1, 0], n), self.points[:, 0])
        return np.column_stack([x, np.interp(x, *self.points.T)])

    def __eq__(self, other) -> bool:
        return isinstance(other, PolylineSurface) and np.array_equal(self.points, other.points)

    def __hash__(self) -> int:
        return hash(self.points.tobytes())


def circle_from_scarp_toe(
    ground,
    scarp_x,
    toe_x,
    *,
    radius=None,
    tangent_elevation=None,
) -> CircularSurface:
    """The circle through two points of the ground, with a given radius or tangent elevation.

    Parameters
    ----------
    ground : array (n, 2) or Section
        [m] Ground surface points (x strictly increasing), or a section (its ground is used).
    scarp_x, toe_x : float or array
        [m] Offsets where the slip surface meets the ground, at its upper end (where the main
        scarp forms) and its lower end (the toe of the surface of rupture; Cruden and Varnes
        1996), in either order.
    radius : float or array, optional
        [m] Radius, at least half the distance between the two points. The centre is taken
        above the chord, so the surface is the shorter arc below it.
    tangent_elevation : float or array, optional
        [m] Elevation of the lowest point of the circle, below both ground points; that lowest
        point must lie between them.

    Give exactly one of ``radius`` and ``tangent_elevation``. Scalar input raises SurfaceError
    for an impossible circle; array input gives NaN for those elements (slicing then rejects
    them), so that a family of trial circles need not be filtered first.

    Notes
    -----
    With the points A, B and tangent elevation y_t, h_A = y_A - y_t and h_B = y_B - y_t, the
    centre (x_c, y_t + R) satisfies (x_A - x_c)^2 + h_A^2 = 2 R h_A and likewise for B, so x_c
    solves (h_B - h_A) x_c^2 - 2 (h_B x_A - h_A x_B) x_c + h_B x_A^2 - h_A x_B^2
    + h_A h_B (h_A - h_B) = 0 and R = ((x_A - x_c)^2 + h_A^2) / (2 h_A).
    """
    if (radius is None) == (tangent_elevation is None):
        raise SurfaceError("give exactly one of radius and tangent_elevation")
    points = np.asarray(getattr(ground, "ground", ground), dtype=float)
    scalar = all(np.ndim(v) == 0 for v in (scarp_x, toe_x, radius, tangent_elevation))
    xa, xb = np.broadcast_arrays(np.asarray(scarp_x, dtype=float), np.asarray(toe_x, dtype=float))
    xa, xb = np.minimum(xa, xb), np.maximum(xa, xb)
    outside = (xa < points[0, 0]) | (xb > points[-1, 0]) | (xa == xb)
    ya = np.interp(xa, *points.T)
    yb = np.interp(xb, *points.T)
    with np.errstate(invalid="ignore", divide="ignore"):
        if radius is not None:
            r = np.asarray(radius, dtype=float)
            dx, dy = xb - xa, yb - ya
            chord = np.hypot(dx, dy)
            offset = np.sqrt(r**2 - (chord / 2) ** 2)
            # Unit normal to the chord pointing upwards: (-dy, dx) / chord has dx > 0.
            xc = (xa + xb) / 2 - offset * dy / chord
            yc = (ya + yb) / 2 + offset * dx / chord
            bad = outside | ~(r >= chord / 2)
            problem = f"radius = {radius!r} m is shorter than half the chord"
        else:
            yt = np.asarray(tangent_elevation, dtype=float)
            ha, hb = ya - yt, yb - yt
            qa = hb - ha
            qb = -2 * (hb * xa - ha * xb)
            qc = hb * xa**2 - ha * xb**2 + ha * hb * (ha - hb)
            equal = np.abs(qa) < 1e-12 * np.maximum(np.abs(ha) + np.abs(hb), 1.0)
            disc = np.sqrt(qb**2 - 4 * qa * qc)
            roots = np.stack([(-qb + disc) / (2 * qa), (-qb - disc) / (2 * qa)])
            inside = (roots >= xa) & (roots <= xb)
            xc = np.where(inside[0], roots[0], roots[1])
            xc = np.where(equal, (xa + xb) / 2, xc)
            r = ((xa - xc) ** 2 + ha**2) / (2 * ha)
            yc = yt + r
            bad = outside | ~(ha > 0) | ~(hb > 0) | ~(equal | inside.any(axis=0))
            problem = (
                f"tangent_elevation = {tangent_elevation!r} m must lie below both ground points "
                "and the circle's lowest point between them"
            )
    if scalar and bool(bad):
        if bool(outside):
            problem = (
                f"scarp_x = {scarp_x!r} and toe_x = {toe_x!r} m must be two different "
                f"offsets on the ground (x = {points[0, 0]:g} to {points[-1, 0]:g} m)"
            )
        raise SurfaceError(f"no circle through the ground at these points: {problem}")
    xc, yc, r = (np.where(bad, np.nan, v) for v in np.broadcast_arrays(xc, yc, r))
    if scalar:
        return CircularSurface(float(xc), float(yc), float(r))
    return CircularSurface(xc, yc, r)
