"""Hand-built slice tables for the tests of solver.methods (no dependence on solver.slicing).

All geometry is in the movement frame of solver.slices: x increases towards the toe, so the
crest is at small x, and alpha > 0 where the base descends in the direction of movement.
"""

from __future__ import annotations

import numpy as np

from solver.constants import GAMMA_W
from solver.slices import Slices


def make_slices(**arrays) -> Slices:
    """A Slices table from per-slice arrays of shape (n_slices,) or (n_surfaces, n_slices);
    unspecified loads are zero and every slice is active."""
    per_slice = {
        name: np.atleast_2d(np.asarray(value, dtype=float))
        for name, value in arrays.items()
        if name
        in ("x_left", "x_right", "alpha", "y_base", "y_top", "weight", "y_weight", "cohesion",
            "tan_phi", "pore_pressure", "surcharge")
    }
    shape = np.broadcast_shapes(*(a.shape for a in per_slice.values()))
    per_slice = {name: np.broadcast_to(a, shape).copy() for name, a in per_slice.items()}
    for name in ("pore_pressure", "surcharge"):
        per_slice.setdefault(name, np.zeros(shape))
    per_slice.setdefault("y_weight", 0.5 * (per_slice["y_base"] + per_slice["y_top"]))
    others = {
        name: value
        for name, value in arrays.items()
        if name not in per_slice
    }
    others.setdefault("active", np.ones(shape, dtype=bool))
    others.setdefault("base_material", np.zeros(shape, dtype=int))
    for name in ("crack_water_force", "crack_water_y", "centre_x", "centre_y", "radius",
                 "moment_x", "moment_y"):
        if name in others:
            others[name] = np.broadcast_to(
                np.asarray(others[name], dtype=float), (shape[0],)
            ).copy()
    return Slices(**per_slice, **others)


def infinite_slope_slices(
    slope_angle, depth, unit_weight, cohesion, friction_angle, water_depth=0.0,
    n_slices=40, length=100.0,
) -> Slices:
    """Identical slices of a planar slip surface parallel to a uniform slope (one surface).

    depth and water_depth are vertical [m]; pore pressure from seepage parallel to the slope,
    u = gamma_w h_w cos^2(beta) (Skempton and DeLory 1957). The moment point is 50 m above the
    middle of the surface.
    """
    beta = np.radians(slope_angle)
    edges = np.linspace(0.0, length * np.cos(beta), n_slices + 1)
    x_mid = 0.5 * (edges[:-1] + edges[1:])
    width = np.diff(edges)
    y_base = -x_mid * np.tan(beta)
    centre_x = 0.5 * edges[-1]
    return make_slices(
        x_left=edges[:-1],
        x_right=edges[1:],
        alpha=np.full(n_slices, beta),
        y_base=y_base,
        y_top=y_base + depth,
        weight=unit_weight * depth * width,
        cohesion=np.full(n_slices, cohesion),
        tan_phi=np.full(n_slices, np.tan(np.radians(friction_angle))),
        pore_pressure=np.full(n_slices, GAMMA_W * water_depth * np.cos(beta) ** 2),
        moment_x=centre_x,
        moment_y=-centre_x * np.tan(beta) + 50.0,
    )


def wedge_slices(
    height, slope_angle, plane_angles, unit_weight, cohesion, friction_angle, n_slices=20
) -> Slices:
    """Planar wedges through the toe of a slope of the given height and angle, one surface per
    plane angle (each flatter than the slope). Toe at (0, 0); the crest is a slice boundary so
    that every slice has a straight top and the weights are exact."""
    beta = np.radians(slope_angle)
    theta = np.radians(np.atleast_1d(np.asarray(plane_angles, dtype=float)))[:, np.newaxis]
    x_entry = -height / np.tan(theta)
    x_crest = -height / np.tan(beta)
    n_top = n_slices // 2
    n_face = n_slices - n_top
    on_top = np.linspace(0.0, 1.0, n_top + 1)
    on_face = np.linspace(0.0, 1.0, n_face + 1)[1:]
    edges = np.concatenate(
        [
            x_entry + (x_crest - x_entry) * on_top,
            np.broadcast_to(x_crest * (1.0 - on_face), (theta.shape[0], n_face)),
        ],
        axis=1,
    )
    x_mid = 0.5 * (edges[:, :-1] + edges[:, 1:])
    y_base = -x_mid * np.tan(theta)
    y_top = np.minimum(height, -x_mid * np.tan(beta))
    width = np.diff(edges, axis=1)
    shape = width.shape
    return make_slices(
        x_left=edges[:, :-1],
        x_right=edges[:, 1:],
        alpha=np.broadcast_to(theta, shape),
        y_base=y_base,
        y_top=y_top,
        weight=unit_weight * (y_top - y_base) * width,
        cohesion=np.full(shape, cohesion),
        tan_phi=np.full(shape, np.tan(np.radians(friction_angle))),
        moment_x=x_crest,
        moment_y=2.0 * height,
    )


def simple_slope_ground(height, slope_angle, crest_x=0.0):
    """Ground of a simple slope: level crest at y = height for x <= crest_x, a face at
    slope_angle down to the toe, level ground at y = 0 beyond."""
    toe_x = crest_x + height / np.tan(np.radians(slope_angle))

    def ground(x):
        return np.clip(height - (x - crest_x) * np.tan(np.radians(slope_angle)), 0.0, height)

    return ground, toe_x


def circle_slices(
    ground, circles, unit_weight, cohesion, friction_angle, ru=0.0, n_slices=40,
    surcharge_pressure=0.0, surcharge_from=None, surcharge_to=None,
) -> Slices:
    """Slices of circular surfaces (rows of ``circles`` = centre_x, centre_y, radius) through a
    homogeneous slope with ground elevation function ``ground(x)``. Pore pressure
    u = ru gamma h (Bishop and Morgenstern 1960). Slice weights and centroids are integrated
    with 40 sub-intervals per slice; alpha is the tangent inclination at the mid-point, where
    the base lies on the circle."""
    circles = np.atleast_2d(np.asarray(circles, dtype=float))
    rows = []
    for centre_x, centre_y, radius in circles:
        x_probe = np.linspace(centre_x - radius, centre_x + radius, 20001)[1:-1]
        below = ground(x_probe) - (centre_y - np.sqrt(radius**2 - (x_probe - centre_x) ** 2))
        inside = np.flatnonzero(below > 0)
        x_entry, x_exit = _refine_crossing(ground, centre_x, centre_y, radius, x_probe, inside)
        edges = np.linspace(x_entry, x_exit, n_slices + 1)
        sub = edges[:-1, None] + (edges[1:] - edges[:-1])[:, None] * (
            (np.arange(40) + 0.5) / 40
        )
        base_sub = centre_y - np.sqrt(radius**2 - (sub - centre_x) ** 2)
        top_sub = np.maximum(ground(sub), base_sub)
        width = np.diff(edges)
        area = np.mean(top_sub - base_sub, axis=1) * width
        first_moment = np.mean(0.5 * (top_sub**2 - base_sub**2), axis=1) * width
        x_mid = 0.5 * (edges[:-1] + edges[1:])
        y_base = centre_y - np.sqrt(radius**2 - (x_mid - centre_x) ** 2)
        y_top = ground(x_mid)
        surcharge = np.zeros(n_slices)
        if surcharge_pressure:
            overlap = np.clip(
                np.minimum(edges[1:], surcharge_to) - np.maximum(edges[:-1], surcharge_from),
                0.0,
                None,
            )
            surcharge = surcharge_pressure * overlap
        rows.append(
            dict(
                x_left=edges[:-1],
                x_right=edges[1:],
                alpha=np.arcsin((centre_x - x_mid) / radius),
                y_base=y_base,
                y_top=y_top,
                weight=unit_weight * area,
                y_weight=first_moment / area,
                cohesion=np.full(n_slices, cohesion),
                tan_phi=np.full(n_slices, np.tan(np.radians(friction_angle))),
                pore_pressure=ru * unit_weight * (y_top - y_base),
                surcharge=surcharge,
            )
        )
    stacked = {name: np.stack([row[name] for row in rows]) for name in rows[0]}
    return make_slices(
        **stacked,
        centre_x=circles[:, 0],
        centre_y=circles[:, 1],
        radius=circles[:, 2],
        moment_x=circles[:, 0],
        moment_y=circles[:, 1],
    )


def _refine_crossing(ground, centre_x, centre_y, radius, x_probe, inside):
    from scipy.optimize import brentq

    def gap(x):
        return ground(x) - (centre_y - np.sqrt(radius**2 - (x - centre_x) ** 2))

    step = x_probe[1] - x_probe[0]
    first, last = x_probe[inside[0]], x_probe[inside[-1]]
    x_entry = brentq(gap, max(first - step, centre_x - radius), first)
    x_exit = brentq(gap, last, min(last + step, centre_x + radius))
    return x_entry, x_exit


def polyline_slices(
    ground, vertices, unit_weight, cohesion, friction_angle, ru=0.0, slices_per_segment=8,
    moment_point=None,
) -> Slices:
    """Slices of one polyline slip surface (vertices left to right; the first and the last lie
    on the ground) through a homogeneous slope; the vertices are slice boundaries, so every
    base is straight. Weights are integrated with 40 sub-intervals per slice."""
    vertices = np.asarray(vertices, dtype=float)
    edges = np.concatenate(
        [
            np.linspace(a, b, slices_per_segment + 1)[:-1]
            for a, b in zip(vertices[:-1, 0], vertices[1:, 0])
        ]
        + [vertices[-1:, 0]]
    )

    def base(x):
        return np.interp(x, vertices[:, 0], vertices[:, 1])

    x_mid = 0.5 * (edges[:-1] + edges[1:])
    slope = np.diff(base(edges)) / np.diff(edges)
    sub = edges[:-1, None] + np.diff(edges)[:, None] * ((np.arange(40) + 0.5) / 40)
    base_sub = base(sub)
    top_sub = np.maximum(ground(sub), base_sub)
    width = np.diff(edges)
    area = np.mean(top_sub - base_sub, axis=1) * width
    first_moment = np.mean(0.5 * (top_sub**2 - base_sub**2), axis=1) * width
    y_base = base(x_mid)
    y_top = ground(x_mid)
    n = x_mid.size
    if moment_point is None:
        moment_point = (x_mid.mean(), y_top.max() + 0.5 * (x_mid[-1] - x_mid[0]))
    return make_slices(
        x_left=edges[:-1],
        x_right=edges[1:],
        alpha=-np.arctan(slope),
        y_base=y_base,
        y_top=y_top,
        weight=unit_weight * area,
        y_weight=first_moment / area,
        cohesion=np.full(n, cohesion),
        tan_phi=np.full(n, np.tan(np.radians(friction_angle))),
        pore_pressure=ru * unit_weight * (y_top - y_base),
        moment_x=moment_point[0],
        moment_y=moment_point[1],
    )


def pad(slices: Slices, leading: int = 0, trailing: int = 3) -> Slices:
    """The same surfaces with zero-filled inactive slices added before and after."""
    values = {}
    for name in slices.__dataclass_fields__:
        value = getattr(slices, name)
        if isinstance(value, np.ndarray) and value.ndim == 2:
            n = value.shape[0]
            fill = False if value.dtype == bool else (-1 if name == "base_material" else 0)
            before = np.full((n, leading), fill, dtype=value.dtype)
            after = np.full((n, trailing), fill, dtype=value.dtype)
            value = np.concatenate([before, value, after], axis=1)
        values[name] = value
    return Slices(**values)


def concatenate(*tables: Slices) -> Slices:
    """Several slice tables with the same number of slices, stacked as one batch."""
    values = {}
    for name in tables[0].__dataclass_fields__:
        first = getattr(tables[0], name)
        if isinstance(first, np.ndarray):
            values[name] = np.concatenate([getattr(t, name) for t in tables], axis=0)
        else:
            values[name] = first
    return Slices(**values)
