"""Two-sided deviation of a triangle mesh from the true ground, measured without the mesher.

The true ground is the surface of docs/terrain.md: ``S(u) = (R + H(u)) u`` for unit directions
``u``, plus the radial wall segments where ``H`` jumps (walls of width 0 on ``mesa`` and ``block``).
Only ``field.height`` and ``field.gradient`` are used, never anything from the mesher.

What :func:`measure` reports, exactly:

``mesh_to_surface``
    The largest distance from a sample point of the mesh to the surface. Sample points: every
    vertex, points at ``1/n`` steps along every edge, and the interior nodes of the barycentric
    grid of step ``1/n`` in every triangle (shared points are evaluated once); then the
    ``refine_worst`` triangles with the largest sampled value are sampled again on a grid of
    step ``1/refine_grid``. Each point first gets an upper bound, its distance to the surface
    point ``S(p/|p|)`` straight above or below it. Then, largest bound first, until no remaining
    bound exceeds the largest distance found (so the maximum is the same as if every point were
    treated in full):

    1. projection: Gauss-Newton on the direction ``u`` minimising ``|S(u) - p|`` (closed-form
       step in the tangent plane from ``H`` and ``grad H``, with step halving), from ``p/|p|``
       and again from the nearest point of the dense surface sample where that one is closer;
       and, when ``walls`` are given, the distance to the wall segment at the rim point nearest
       to ``p``;
    2. search (:func:`polish`): the closest surface point lies within the current distance
       ``d``, so its direction is within ``asin(d/|p|)`` of ``p/|p|``; that cap is searched by
       nested 9x9 grids keeping the 4 best nodes per level, down to 1e-5 m. Projection alone
       stops at a local minimum, e.g. on the farther face below a convex crease.

    Every distance is to an actual surface point, so each value is >= the true distance of
    its point; it is the true distance up to the search resolution unless a basin narrower
    than a coarse grid cell was missed. Between sample points the mesh is not examined: the
    maximum can miss a peak of the true supremum by the variation of the distance between grid
    nodes (second order in the grid step on smooth ground, first order at a crease or wall).

``surface_to_mesh``
    The largest exact Euclidean distance (closest point on triangle, Ericson, "Real-Time
    Collision Detection" 2005, sec. 5.1.5; candidate triangles from scipy's ``cKDTree`` over
    triangle centroids with a lower-bound test that makes the search exact) from a sample
    point of the true surface to the mesh. Surface samples: ``surface_samples`` directions of a
    Fibonacci sphere, optional extra directions (e.g. :func:`feature_directions`, dense where
    features are), and, with ``walls``, points on the wall segments. It is a lower bound of the
    true supremum: a surface bump narrower than the sample spacing can be missed.

``max``
    The larger of the two.

Without ``walls``, a world with vertical walls is measured as if the wall were not part of the
surface: mesh points on a wall are charged their distance to the top or bottom ground (an
over-estimate of at most half the wall height), and no wall points are sampled for
``surface_to_mesh`` (an under-estimate where a mesh cuts a corner of a wall).
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any, Protocol

import numpy as np
from numpy.typing import NDArray
from scipy.spatial import cKDTree

FloatArray = NDArray[np.float64]
IntArray = NDArray[np.int64]

GOLDEN_ANGLE = math.pi * (3.0 - math.sqrt(5.0))

# kind codes of the core feature array (notes on the interface)
KIND_HILL, KIND_MESA, KIND_BLOCK, KIND_CRATER, KIND_RIDGE, KIND_NOISE = range(6)


class Field(Protocol):
    """The terrain function: ``H`` and its gradient at unit directions of shape (N, 3)."""

    def height(self, dirs: FloatArray) -> FloatArray: ...

    def gradient(self, dirs: FloatArray) -> FloatArray: ...


class Walls(Protocol):
    """Vertical wall segments that belong to the surface."""

    def distance(self, points: FloatArray, upper: FloatArray) -> FloatArray:
        """Elementwise ``min(upper, distance from points to a wall point)``."""
        ...

    def sample(self, spacing_m: float) -> FloatArray:
        """(M, 3) points on the walls, about ``spacing_m`` apart."""
        ...


# --------------------------------------------------------------------------- directions


def _normalize(v: FloatArray) -> FloatArray:
    return v / np.linalg.norm(v, axis=-1, keepdims=True)


def fibonacci_directions(n: int) -> FloatArray:
    """(n, 3) unit vectors of the Fibonacci (golden-angle) spiral: near-uniform on the sphere."""
    i = np.arange(n, dtype=np.float64)
    y = 1.0 - (2.0 * i + 1.0) / n
    r = np.sqrt(np.maximum(0.0, 1.0 - y * y))
    phi = i * GOLDEN_ANGLE
    return np.stack([r * np.sin(phi), y, r * np.cos(phi)], axis=1)


def _frame(c: FloatArray) -> tuple[FloatArray, FloatArray]:
    """Two unit vectors completing unit vector ``c`` to an orthonormal frame."""
    helper = np.array([0.0, 1.0, 0.0]) if abs(c[1]) < 0.9 else np.array([0.0, 0.0, 1.0])
    e1 = _normalize(np.cross(helper, c))
    e2 = np.cross(c, e1)
    return e1, e2


def cap_directions(centre: FloatArray, angle: float, n: int) -> FloatArray:
    """(n, 3) near-uniform unit vectors within ``angle`` radians of unit vector ``centre``."""
    angle = min(angle, math.pi)
    i = np.arange(n, dtype=np.float64)
    z = 1.0 - (1.0 - math.cos(angle)) * (i + 0.5) / n
    r = np.sqrt(np.maximum(0.0, 1.0 - z * z))
    phi = i * GOLDEN_ANGLE
    e1, e2 = _frame(np.asarray(centre, dtype=np.float64))
    return np.outer(r * np.cos(phi), e1) + np.outer(r * np.sin(phi), e2) + np.outer(z, centre)


def feature_directions(
    core_features: FloatArray, radius_m: float, *, per_feature: int = 20_000
) -> FloatArray:
    """Extra sample directions dense over each local feature's footprint.

    ``core_features`` is the (n, 16) array of the interface notes. Each hill, mesa, block and
    crater gets a Fibonacci cap over its footprint with a spacing of a sixth of its smallest
    length scale (at most ``per_feature`` points); each ridge a band along its arc. Noise covers
    the whole world and gets nothing here (the uniform sample is all it has).
    """
    out: list[FloatArray] = [np.empty((0, 3))]
    R = float(radius_m)
    for row in np.asarray(core_features, dtype=np.float64).reshape(-1, 16):
        kind = int(row[0])
        c = row[3:6]
        if kind == KIND_HILL:
            reach, scale = 4.0 * row[10], row[10]
        elif kind == KIND_MESA:
            a, w = row[10], row[11]
            reach, scale = a + w, min(a, w) if w > 0 else a
        elif kind == KIND_BLOCK:
            hx, hy, w = row[10], row[11], row[13]
            reach = math.hypot(hx, hy) + w
            scale = min(hx, hy, w) if w > 0 else min(hx, hy)
        elif kind == KIND_CRATER:
            a, wr = row[10], row[12]
            reach, scale = a + wr, min(a, wr)
        elif kind == KIND_RIDGE:
            out.append(_ridge_band(row, R, per_feature))
            continue
        else:
            continue
        angle = min(1.05 * reach / R, math.pi)
        area = 2.0 * math.pi * (1.0 - math.cos(angle)) * R * R
        n = int(min(per_feature, max(64, math.ceil(area / (scale / 6.0) ** 2))))
        out.append(cap_directions(c, angle, n))
    return np.concatenate(out, axis=0)


def _ridge_band(row: FloatArray, R: float, limit: int) -> FloatArray:
    c0, c1, b = row[3:6], row[6:9], row[10]
    n = _normalize(np.cross(c0, c1))
    arc = math.atan2(float(np.linalg.norm(np.cross(c0, c1))), float(c0 @ c1))
    reach = 1.05 * b / R
    step = b / 6.0 / R
    across = np.linspace(-reach, reach, max(2, math.ceil(2 * reach / step) + 1))
    along_n = max(2, min(limit // max(1, across.size), math.ceil((arc + 2 * reach) / step)))
    along = np.linspace(-reach, arc + reach, along_n)
    t = _normalize(np.cross(n, c0))  # in-plane direction from c0 towards c1
    base = np.outer(np.cos(along), c0) + np.outer(np.sin(along), t)  # points on the great circle
    s = across[None, :, None]
    pts = np.cos(s) * base[:, None, :] + np.sin(s) * n[None, None, :]
    return pts.reshape(-1, 3)


# --------------------------------------------------------------------------- projection


def _surface(field: Field, R: float, dirs: FloatArray) -> tuple[FloatArray, FloatArray]:
    h = np.asarray(field.height(dirs), dtype=np.float64)
    return h, (R + h)[:, None] * dirs


def project_to_surface(
    field: Field,
    radius_m: float,
    points: FloatArray,
    start_dirs: FloatArray | None = None,
    *,
    iterations: int = 16,
    xtol_m: float = 1e-6,
) -> tuple[FloatArray, FloatArray]:
    """Closest surface point to each point by Gauss-Newton on the direction.

    Minimises ``|S(u) - p|`` over unit ``u``. With ``rho = R + H(u)`` and ``g = grad H(u)``
    (tangent), a tangent step ``d`` moves the surface point by ``rho d + (g . d) u`` to first
    order; the least-squares step solves ``(rho^2 I + g g^T) d = -rho r_t - g r_n`` (``r`` the
    residual ``S(u) - p``, split into tangent part ``r_t`` and normal part ``r_n``), inverted in
    closed form by Sherman-Morrison. Steps that do not reduce the distance are halved (up to 5
    times); a point stops when its step moves the ground point less than ``xtol_m`` (the
    distance is then within about ``xtol_m`` of the local minimum), when no halving helps, or
    after ``iterations`` steps.

    Returns (distance (N,), direction of the surface point (N, 3)). Each distance is to an
    actual surface point, so it is >= the true distance to the smooth part of the surface.
    """
    dist, u, _ = _gauss_newton(field, radius_m, points, start_dirs, iterations, xtol_m)
    return dist, u


def _gauss_newton(
    field: Field,
    radius_m: float,
    points: FloatArray,
    start_dirs: FloatArray | None,
    iterations: int = 16,
    xtol_m: float = 1e-6,
) -> tuple[FloatArray, FloatArray, NDArray[np.bool_]]:
    """:func:`project_to_surface`, plus whether each point settled at a stationary point.

    A point is unsettled when a step longer than ``10 xtol_m`` failed every halving (typical at a
    crease of the ground, where the step computed on one side crosses onto the other) or when
    the iterations ran out.
    """
    R = float(radius_m)
    p = np.asarray(points, dtype=np.float64)
    u = _normalize(p.copy() if start_dirs is None else np.asarray(start_dirs, dtype=np.float64))
    h, s = _surface(field, R, u)
    dist = np.linalg.norm(s - p, axis=1)
    settled = np.zeros(p.shape[0], dtype=bool)
    active = np.arange(p.shape[0])
    for _ in range(iterations):
        if active.size == 0:
            break
        ua, pa, ha = u[active], p[active], h[active]
        g = np.asarray(field.gradient(ua), dtype=np.float64)
        g = g - np.sum(g * ua, axis=1, keepdims=True) * ua
        rho = R + ha
        r = rho[:, None] * ua - pa
        rn = np.sum(r * ua, axis=1)
        rt = r - rn[:, None] * ua
        b = -rho[:, None] * rt - g * rn[:, None]
        rho2 = rho * rho
        g2 = np.sum(g * g, axis=1)
        gb = np.sum(g * b, axis=1)
        step = b / rho2[:, None] - g * (gb / (rho2 * (rho2 + g2)))[:, None]
        size = rho * np.linalg.norm(step, axis=1)
        done = size < xtol_m
        settled[active[done]] = True
        improved = np.zeros(active.size, dtype=bool)
        todo = np.flatnonzero(~done)
        scale = 1.0
        for _halving in range(6):
            if todo.size == 0:
                break
            un = _normalize(ua[todo] + scale * step[todo])
            hn, sn = _surface(field, R, un)
            dn = np.linalg.norm(sn - pa[todo], axis=1)
            better = dn < dist[active[todo]]
            idx = active[todo[better]]
            u[idx], h[idx], dist[idx] = un[better], hn[better], dn[better]
            improved[todo[better]] = True
            todo = todo[~better]
            scale *= 0.5
        # no halving helped: a stationary point up to rounding if the step was tiny
        settled[active[todo]] = size[todo] < 10.0 * xtol_m
        active = active[improved]
    return dist, u, settled


def polish(
    field: Field,
    radius_m: float,
    points: FloatArray,
    upper: FloatArray,
    *,
    grid: int = 9,
    keep: int = 4,
    xtol_m: float = 1e-5,
) -> FloatArray:
    """Distance to the surface by hierarchical grid search, for where projection stalls.

    The closest surface point to ``p`` lies within ``upper`` of it, so its direction lies in
    the cap of angular radius ``asin(upper / |p|)`` around ``p/|p|``. That cap is covered by a
    ``grid x grid`` gnomonic grid; the ``keep`` best nodes are refined by grids of the previous
    spacing, and so on until the spacing is below ``xtol_m`` on the ground. It needs no
    smoothness (creases, steps); it can still miss a minimum narrower than a coarse cell in
    which no node was among the best. Returns ``min(upper, found distance)``.
    """
    R = float(radius_m)
    p = np.asarray(points, dtype=np.float64)
    best = np.array(upper, dtype=np.float64, copy=True)
    n = p.shape[0]
    if n == 0:
        return best
    pn = np.linalg.norm(p, axis=1)
    pu = p / pn[:, None]
    helper = np.where(np.abs(pu[:, 1:2]) < 0.9, [[0.0, 1.0, 0.0]], [[0.0, 0.0, 1.0]])
    e1 = _normalize(np.cross(helper, pu))
    e2 = np.cross(pu, e1)
    g1 = np.linspace(-1.0, 1.0, grid)
    gx, gy = (a.ravel() for a in np.meshgrid(g1, g1))
    m = gx.size
    half = np.tan(np.arcsin(np.clip(best / pn, 0.0, 1.0)))  # (n,) in tangent-plane units
    cx = np.zeros((n, 1))
    cy = np.zeros((n, 1))
    while True:
        k = cx.shape[1]
        x = (cx[:, :, None] + half[:, None, None] * gx[None, None, :]).reshape(n, k * m)
        y = (cy[:, :, None] + half[:, None, None] * gy[None, None, :]).reshape(n, k * m)
        dirs = _normalize(
            pu[:, None, :] + x[:, :, None] * e1[:, None, :] + y[:, :, None] * e2[:, None, :]
        ).reshape(-1, 3)
        _, s = _surface(field, R, dirs)
        d = np.linalg.norm(s.reshape(n, k * m, 3) - p[:, None, :], axis=2)
        best = np.minimum(best, d.min(axis=1))
        kk = min(keep, k * m)
        top = np.argpartition(d, kk - 1, axis=1)[:, :kk]
        cx = np.take_along_axis(x, top, axis=1)
        cy = np.take_along_axis(y, top, axis=1)
        half = half * 2.0 / (grid - 1)
        if np.all(half * pn < xtol_m):
            break
    return best


# --------------------------------------------------------------------------- walls


@dataclass
class StepWalls:
    """Radial wall segments of the width-0 walls of mesa and block features.

    For a point, the wall candidate is the rim point nearest to it in the feature's own
    coordinates (mesa: the rim circle in the meridian plane through the point; block: the
    nearest point of the rounded rectangle in the local coordinates of docs/terrain.md). The
    segment at that rim direction ``u_r`` runs between the heights of ``H`` just inside and just
    outside the rim (``field`` evaluated 1 micrometre either side), so any blend mode and any
    overlapping feature are taken as the field has them. Where another rim crosses this one the
    span changes along the rim, so rim points up to the distance found away along it are taken
    too, each with its own span. The result is a distance to a true wall point, so never below
    the true distance to the walls.
    """

    field: Field
    radius_m: float
    features: FloatArray  # (k, 16) rows of mesa/block features with wall 0

    eta_m: float = 1e-6

    # -- rim geometry, per feature ------------------------------------------------------
    def _block_axes(self, row: FloatArray) -> tuple[FloatArray, FloatArray, FloatArray]:
        c = row[3:6]
        ref = np.array([0.0, 1.0, 0.0]) if abs(c[1]) <= 1.0 - 1e-9 else np.array([0.0, 0.0, 1.0])
        north = _normalize(ref - (ref @ c) * c)
        east = np.cross(north, c)
        psi = row[14]
        x_axis = math.cos(psi) * east + math.sin(psi) * north
        y_axis = -math.sin(psi) * east + math.cos(psi) * north
        return c, x_axis, y_axis

    def _rim(self, row: FloatArray, dirs: FloatArray) -> tuple[FloatArray, FloatArray]:
        """Nearest rim direction and the outward rim normal (tangent unit vector) there."""
        R = self.radius_m
        c = row[3:6]
        if int(row[0]) == KIND_MESA:
            alpha = row[10] / R
            t = dirs - (dirs @ c)[:, None] * c
            tn = np.linalg.norm(t, axis=1)
            e1, _ = _frame(c)
            t = np.where(tn[:, None] > 1e-15, t / np.maximum(tn, 1e-300)[:, None], e1)
            rim = math.cos(alpha) * c + math.sin(alpha) * t
            normal = -math.sin(alpha) * c + math.cos(alpha) * t
            return rim, normal
        c, xa, ya = self._block_axes(row)
        dc = dirs @ c
        x = R * np.arctan2(dirs @ xa, dc)
        y = R * np.arctan2(dirs @ ya, dc)
        qx, qy, nx, ny = _rounded_rect_closest(x, y, row[10], row[11], row[12])
        return self._block_dir(c, xa, ya, qx, qy, nx, ny)

    def _block_dir(
        self,
        c: FloatArray,
        xa: FloatArray,
        ya: FloatArray,
        qx: FloatArray,
        qy: FloatArray,
        nx: FloatArray,
        ny: FloatArray,
    ) -> tuple[FloatArray, FloatArray]:
        R = self.radius_m
        rim = _normalize(c[None, :] + np.tan(qx / R)[:, None] * xa + np.tan(qy / R)[:, None] * ya)
        # outward normal: direction of the local displacement (nx, ny), made tangent at the rim
        e = self.eta_m
        ahead = _normalize(
            c[None, :]
            + np.tan((qx + e * nx) / R)[:, None] * xa
            + np.tan((qy + e * ny) / R)[:, None] * ya
        )
        normal = ahead - rim
        normal -= np.sum(normal * rim, axis=1, keepdims=True) * rim
        return rim, _normalize(normal)

    def _span(self, rim: FloatArray, normal: FloatArray) -> tuple[FloatArray, FloatArray]:
        """Radii of the lower and upper end of the wall segment at each rim direction."""
        ang = self.eta_m / self.radius_m
        inside = _normalize(rim - ang * normal)
        outside = _normalize(rim + ang * normal)
        h_in = np.asarray(self.field.height(inside), dtype=np.float64)
        h_out = np.asarray(self.field.height(outside), dtype=np.float64)
        return self.radius_m + np.minimum(h_in, h_out), self.radius_m + np.maximum(h_in, h_out)

    # -- the protocol -----------------------------------------------------------------
    def distance(self, points: FloatArray, upper: FloatArray) -> FloatArray:
        best = np.array(upper, dtype=np.float64, copy=True)
        pn = np.linalg.norm(points, axis=1)
        dirs = points / pn[:, None]
        for row in self.features:
            rim, normal = self._rim(row, dirs)
            along = np.sum(points * rim, axis=1)
            line = np.linalg.norm(points - along[:, None] * rim, axis=1)
            sel = np.flatnonzero(line < best)  # the radial line is a lower bound of the segment
            if sel.size == 0:
                continue
            lo, hi = self._span(rim[sel], normal[sel])
            t = np.clip(along[sel], lo, hi)
            d = np.linalg.norm(points[sel] - t[:, None] * rim[sel], axis=1)
            best[sel] = np.minimum(best[sel], d)
            # where another feature's rim crosses this one, the segment's span changes along the
            # rim: rim points up to the distance so far away along it, each with its own span,
            # in rounds that narrow with the distance found
            tang = np.cross(rim[sel], normal[sel])
            for _ in range(3):
                before = best[sel].copy()
                for k in (*range(-8, 0), *range(1, 9)):
                    shift = (before * (k / 8.0) / self.radius_m)[:, None]
                    rim2, normal2 = self._rim(row, _normalize(rim[sel] + shift * tang))
                    lo2, hi2 = self._span(rim2, normal2)
                    t2 = np.clip(np.sum(points[sel] * rim2, axis=1), lo2, hi2)
                    d2 = np.linalg.norm(points[sel] - t2[:, None] * rim2, axis=1)
                    best[sel] = np.minimum(best[sel], d2)
                if not np.any(best[sel] < 0.5 * before):
                    break
        return best

    def sample(self, spacing_m: float) -> FloatArray:
        out: list[FloatArray] = [np.empty((0, 3))]
        R = self.radius_m
        for row in self.features:
            if int(row[0]) == KIND_MESA:
                alpha = row[10] / R
                n = max(8, math.ceil(2 * math.pi * R * math.sin(alpha) / spacing_m))
                phi = np.linspace(0.0, 2 * math.pi, n, endpoint=False)
                c = row[3:6]
                e1, e2 = _frame(c)
                t = np.outer(np.cos(phi), e1) + np.outer(np.sin(phi), e2)
                rim = math.cos(alpha) * c + math.sin(alpha) * t
                normal = -math.sin(alpha) * c + math.cos(alpha) * t
            else:
                c, xa, ya = self._block_axes(row)
                qx, qy, nx, ny = _rounded_rect_perimeter(row[10], row[11], row[12], spacing_m)
                rim, normal = self._block_dir(c, xa, ya, qx, qy, nx, ny)
            lo, hi = self._span(rim, normal)
            k = max(2, math.ceil(float(np.max(hi - lo, initial=0.0)) / spacing_m) + 1)
            f = np.linspace(0.0, 1.0, k)
            radii = lo[:, None] + (hi - lo)[:, None] * f[None, :]
            out.append((radii[:, :, None] * rim[:, None, :]).reshape(-1, 3))
        return np.concatenate(out, axis=0)


def _rounded_rect_closest(
    x: FloatArray, y: FloatArray, hx: float, hy: float, r: float
) -> tuple[FloatArray, FloatArray, FloatArray, FloatArray]:
    """Nearest boundary point of the rounded rectangle (|x|<=hx, |y|<=hy, corner radius r)
    and the outward unit normal there, in the plane."""
    sx, sy = np.where(x < 0, -1.0, 1.0), np.where(y < 0, -1.0, 1.0)
    ax, ay = np.abs(x), np.abs(y)
    ex, ey = hx - r, hy - r
    cx, cy = np.minimum(ax, ex), np.minimum(ay, ey)
    outside = (ax > ex) | (ay > ey)
    dx, dy = ax - cx, ay - cy
    dn = np.hypot(dx, dy)
    safe = np.where(dn > 0, dn, 1.0)
    # outside the inner rectangle: radial from the clamped point (a corner circle or an edge)
    ox = np.where(dn > 0, dx / safe, np.where(ax > ex, 1.0, 0.0))
    oy = np.where(dn > 0, dy / safe, np.where(ax > ex, 0.0, 1.0))
    px, py = cx + r * ox, cy + r * oy
    # inside the inner rectangle: the nearer straight edge
    to_x, to_y = hx - ax, hy - ay
    use_x = to_x <= to_y
    ix, iy = np.where(use_x, hx, ax), np.where(use_x, ay, hy)
    inx, iny = np.where(use_x, 1.0, 0.0), np.where(use_x, 0.0, 1.0)
    qx = np.where(outside, px, ix)
    qy = np.where(outside, py, iy)
    nx = np.where(outside, ox, inx)
    ny = np.where(outside, oy, iny)
    return sx * qx, sy * qy, sx * nx, sy * ny


def _rounded_rect_perimeter(
    hx: float, hy: float, r: float, spacing: float
) -> tuple[FloatArray, FloatArray, FloatArray, FloatArray]:
    """Points about ``spacing`` apart along the rounded rectangle, with outward normals."""
    ex, ey = hx - r, hy - r
    xs: list[FloatArray] = []
    ys: list[FloatArray] = []
    nxs: list[FloatArray] = []
    nys: list[FloatArray] = []

    def edge(x0: float, y0: float, x1: float, y1: float, nx: float, ny: float) -> None:
        k = max(2, math.ceil(math.hypot(x1 - x0, y1 - y0) / spacing) + 1)
        t = np.linspace(0.0, 1.0, k)
        xs.append(x0 + (x1 - x0) * t)
        ys.append(y0 + (y1 - y0) * t)
        nxs.append(np.full(k, nx))
        nys.append(np.full(k, ny))

    def arc(cx: float, cy: float, a0: float) -> None:
        if r <= 0:
            return
        k = max(2, math.ceil(0.5 * math.pi * r / spacing) + 1)
        a = np.linspace(a0, a0 + 0.5 * math.pi, k)
        xs.append(cx + r * np.cos(a))
        ys.append(cy + r * np.sin(a))
        nxs.append(np.cos(a))
        nys.append(np.sin(a))

    edge(hx, -ey, hx, ey, 1.0, 0.0)
    arc(ex, ey, 0.0)
    edge(ex, hy, -ex, hy, 0.0, 1.0)
    arc(-ex, ey, 0.5 * math.pi)
    edge(-hx, ey, -hx, -ey, -1.0, 0.0)
    arc(-ex, -ey, math.pi)
    edge(-ex, -hy, ex, -hy, 0.0, -1.0)
    arc(ex, -ey, 1.5 * math.pi)
    return np.concatenate(xs), np.concatenate(ys), np.concatenate(nxs), np.concatenate(nys)


def step_walls(core_features: FloatArray, field: Field, radius_m: float) -> StepWalls | None:
    """The vertical walls of a world (mesa and block rows with wall width 0), or None."""
    rows = np.asarray(core_features, dtype=np.float64).reshape(-1, 16)
    is_mesa = (rows[:, 0] == KIND_MESA) & (rows[:, 11] == 0.0)
    is_block = (rows[:, 0] == KIND_BLOCK) & (rows[:, 13] == 0.0)
    sel = rows[is_mesa | is_block]
    if sel.shape[0] == 0:
        return None
    return StepWalls(field=field, radius_m=float(radius_m), features=sel)


# --------------------------------------------------------------------------- mesh distance


def closest_point_on_triangles(
    p: FloatArray, a: FloatArray, b: FloatArray, c: FloatArray
) -> FloatArray:
    """Closest point to ``p[i]`` on triangle ``(a[i], b[i], c[i])``, all (N, 3).

    The Voronoi-region method of Ericson, "Real-Time Collision Detection" (2005), sec. 5.1.5.
    """
    ab, ac, ap = b - a, c - a, p - a
    d1, d2 = np.einsum("ij,ij->i", ab, ap), np.einsum("ij,ij->i", ac, ap)
    bp = p - b
    d3, d4 = np.einsum("ij,ij->i", ab, bp), np.einsum("ij,ij->i", ac, bp)
    cp = p - c
    d5, d6 = np.einsum("ij,ij->i", ab, cp), np.einsum("ij,ij->i", ac, cp)
    vc = d1 * d4 - d3 * d2
    vb = d5 * d2 - d1 * d6
    va = d3 * d6 - d5 * d4

    def ratio(num: FloatArray, den: FloatArray) -> FloatArray:
        return num / np.where(den != 0.0, den, 1.0)

    in_a = (d1 <= 0) & (d2 <= 0)
    in_b = (d3 >= 0) & (d4 <= d3)
    in_ab = (vc <= 0) & (d1 >= 0) & (d3 <= 0)
    in_c = (d6 >= 0) & (d5 <= d6)
    in_ac = (vb <= 0) & (d2 >= 0) & (d6 <= 0)
    in_bc = (va <= 0) & ((d4 - d3) >= 0) & ((d5 - d6) >= 0)
    den = va + vb + vc
    v = ratio(vb, den)
    w = ratio(vc, den)
    face = a + ab * v[:, None] + ac * w[:, None]
    on_ab = a + ab * ratio(d1, d1 - d3)[:, None]
    on_ac = a + ac * ratio(d2, d2 - d6)[:, None]
    on_bc = b + (c - b) * ratio(d4 - d3, (d4 - d3) + (d5 - d6))[:, None]
    conds = [in_a, in_b, in_ab, in_c, in_ac, in_bc]
    choices = [a, b, on_ab, c, on_ac, on_bc]
    out = face
    for cond, choice in zip(reversed(conds), reversed(choices), strict=True):
        out = np.where(cond[:, None], choice, out)
    return out


def _flatten(lists: Sequence[Any]) -> tuple[IntArray, IntArray]:
    lens = np.fromiter(map(len, lists), dtype=np.int64, count=len(lists))
    flat = np.fromiter(itertools.chain.from_iterable(lists), dtype=np.int64, count=int(lens.sum()))
    return np.repeat(np.arange(len(lists), dtype=np.int64), lens), flat


def _improve(exact: Any, qi: IntArray, ti: IntArray, best: FloatArray, best_pt: FloatArray) -> None:
    """Evaluate pairs (query qi, triangle ti) exactly and keep each query's nearest."""
    d, cp = exact(qi, ti)
    order = np.lexsort((d, qi))
    qi, d, cp = qi[order], d[order], cp[order]
    head = np.ones(qi.size, dtype=bool)
    head[1:] = qi[1:] != qi[:-1]
    qi, d, cp = qi[head], d[head], cp[head]
    win = d < best[qi]
    best[qi[win]] = d[win]
    best_pt[qi[win]] = cp[win]


def distance_to_mesh(
    vertices: FloatArray, triangles: NDArray[np.integer[Any]], points: FloatArray
) -> tuple[FloatArray, FloatArray]:
    """Exact distance from each point to the mesh and the closest mesh point.

    Candidates come from scipy ``cKDTree`` trees over triangle centroids, one tree per class of
    bounding radius (classes a factor sqrt(2) apart). A triangle lies in the disc of radius
    ``r`` (its bounding radius) around its centroid ``m`` in its plane, so it is no closer to
    ``q`` than ``sqrt(h^2 + max(0, s - r)^2)`` (``h``: distance of ``q`` to the plane, ``s``:
    in-plane distance to ``m``), and no closer than ``|q - m| - r``. Every triangle that could
    beat the best distance found so far is reached (k nearest centroids per class, a ball query
    where those do not certify), and tested exactly, so the result is the true minimum.
    """
    v = np.asarray(vertices, dtype=np.float64)
    t = np.asarray(triangles, dtype=np.int64)
    q = np.asarray(points, dtype=np.float64)
    a, b, c = v[t[:, 0]], v[t[:, 1]], v[t[:, 2]]
    centroid = (a + b + c) / 3.0
    rad = np.sqrt(
        np.maximum.reduce(
            [np.sum((x - centroid) ** 2, axis=1) for x in (a, b, c)],
        )
    )
    normal = np.cross(b - a, c - a)
    nn = np.linalg.norm(normal, axis=1)
    normal = np.where(nn[:, None] > 0, normal / np.where(nn > 0, nn, 1.0)[:, None], 0.0)

    def exact(qi: IntArray, ti: IntArray) -> tuple[FloatArray, FloatArray]:
        cp = closest_point_on_triangles(q[qi], a[ti], b[ti], c[ti])
        return np.linalg.norm(q[qi] - cp, axis=1), cp

    def lower(qi: IntArray, ti: IntArray) -> FloatArray:
        w = q[qi] - centroid[ti]
        h = np.abs(np.einsum("ij,ij->i", w, normal[ti]))
        s2 = np.maximum(0.0, np.einsum("ij,ij->i", w, w) - h * h)
        gap = np.maximum(0.0, np.sqrt(s2) - rad[ti])
        return np.sqrt(h * h + gap * gap)

    # start: the triangle with the nearest centroid
    best, best_pt = exact(
        np.arange(q.shape[0]),
        np.asarray(cKDTree(centroid).query(q, k=1, workers=-1)[1], dtype=np.int64),
    )

    positive = rad[rad > 0]
    rmin = float(positive.min()) if positive.size else 1.0
    # classes of bounding radius sqrt(2) apart: within a class, the 8 nearest centroids cover a
    # disc wider than the class's largest radius, so the k-nearest query usually certifies
    cls = np.floor(2.0 * np.log2(np.maximum(rad, rmin) / rmin)).astype(np.int64)
    # queries grouped by their current best, so each group gets a short search bound
    group_edges = np.concatenate([[0.0], np.geomspace(1e-3, 1e3, 7), [np.inf]])
    for k in np.unique(cls):
        members = np.flatnonzero(cls == k)
        rmax = float(rad[members].max())
        tree = cKDTree(centroid[members])
        nk = min(8, members.size)
        for lo, hi in itertools.pairwise(group_edges):
            grp = np.flatnonzero((best >= lo) & (best < hi))
            if grp.size == 0:
                continue
            ub = rmax + (hi if np.isfinite(hi) else float(best[grp].max()))
            dk, ik = tree.query(q[grp], k=nk, workers=-1, distance_upper_bound=ub * (1 + 1e-9))
            dk = np.asarray(dk).reshape(grp.size, nk)
            ik = np.asarray(ik).reshape(grp.size, nk)
            found = np.isfinite(dk)
            r_, c_ = np.nonzero(found & (dk - rmax < best[grp][:, None]))
            if r_.size:
                qi, ti = grp[r_], members[ik[r_, c_]]
                keep = lower(qi, ti) < best[qi]
                if keep.any():
                    _improve(exact, qi[keep], ti[keep], best, best_pt)
            # not certified: a k-th neighbour exists and an unseen triangle might still be closer
            open_ = grp[found[:, -1] & (dk[:, -1] - rmax < best[grp])]
            for chunk in np.array_split(open_, max(1, open_.size // 200_000)):
                if chunk.size == 0:
                    continue
                lists = tree.query_ball_point(
                    q[chunk], best[chunk] + rmax, workers=-1, return_sorted=False
                )
                rows, local = _flatten(lists)
                qi, ti = chunk[rows], members[local]
                keep = lower(qi, ti) < best[qi]
                if keep.any():
                    _improve(exact, qi[keep], ti[keep], best, best_pt)
    return best, best_pt


# --------------------------------------------------------------------------- mesh samples


def _grid_nodes(n: int) -> IntArray:
    """(M, 3) integer barycentric nodes (i, j, k), i + j + k = n."""
    return np.array([(i, j, n - i - j) for i in range(n + 1) for j in range(n + 1 - i)])


def _mesh_samples(v: FloatArray, t: IntArray, n: int) -> tuple[FloatArray, IntArray]:
    """Sample points of the barycentric grid of step 1/n on every triangle, shared points once.

    Returns the points (P, 3) and, per triangle, the indices of its grid nodes (T, M).
    """
    nv = v.shape[0]
    nodes = _grid_nodes(n)
    ends = np.stack([t[:, [0, 1]], t[:, [1, 2]], t[:, [2, 0]]], axis=1)  # (T, 3, 2)
    lo, hi = ends.min(axis=2), ends.max(axis=2)
    keys = lo * nv + hi
    ukeys, inv = np.unique(keys.ravel(), return_inverse=True)
    inv = inv.reshape(-1, 3)
    e_lo, e_hi = ukeys // nv, ukeys % nv
    pts: list[FloatArray] = [v]
    if n > 1:
        f = np.arange(1, n, dtype=np.float64) / n
        edge_pts = v[e_lo][:, None, :] + f[None, :, None] * (v[e_hi] - v[e_lo])[:, None, :]
        pts.append(edge_pts.reshape(-1, 3))
    n_edge = ukeys.size * (n - 1)
    interior = [(i, j, k) for i, j, k in nodes if i > 0 and j > 0 and k > 0]
    nt = t.shape[0]
    if interior:
        w = np.array(interior, dtype=np.float64) / n  # (I, 3)
        tri = v[t]  # (T, 3, 3)
        pts.append(np.einsum("ik,tkd->tid", w, tri).reshape(-1, 3))
    index = np.empty((nt, nodes.shape[0]), dtype=np.int64)
    slot = {tuple(x): s for s, x in enumerate(interior)}
    for col, (i, j, k) in enumerate(nodes):
        bary = (i, j, k)
        nonzero = [m for m in range(3) if bary[m] > 0]
        if len(nonzero) == 1:
            index[:, col] = t[:, nonzero[0]]
        elif len(nonzero) == 2:
            m0, m1 = nonzero
            # edge slots: 0 = (v0, v1), 1 = (v1, v2), 2 = (v2, v0)
            slot_e = {(0, 1): 0, (1, 2): 1, (0, 2): 2}[(m0, m1)]
            first = t[:, (0, 1, 2)[slot_e]]  # start vertex of that edge in triangle order
            start_weight = bary[(0, 1, 2)[slot_e]]
            # position from the start vertex: the weight of the other end
            pos_from_start = n - start_weight
            forward = first == e_lo[inv[:, slot_e]]
            pos = np.where(forward, pos_from_start, n - pos_from_start)
            index[:, col] = nv + inv[:, slot_e] * (n - 1) + (pos - 1)
        else:
            index[:, col] = nv + n_edge + np.arange(nt) * len(interior) + slot[bary]
    return np.concatenate(pts, axis=0), index


def _grid_points(tri: FloatArray, n: int) -> FloatArray:
    w = _grid_nodes(n).astype(np.float64) / n
    return np.einsum("ik,tkd->tid", w, tri).reshape(-1, 3)


# --------------------------------------------------------------------------- measure


def _projected(
    field: Field,
    R: float,
    p: FloatArray,
    walls: Walls | None,
    surface_points: FloatArray | None,
    surface_dirs: FloatArray | None,
    surface_tree: cKDTree | None,
) -> tuple[FloatArray, NDArray[np.bool_]]:
    """Projection (two starts) and walls: (distance, settled)."""
    dist, _, settled = _gauss_newton(field, R, p, None)
    if surface_points is not None and surface_dirs is not None and len(surface_points):
        tree = surface_tree if surface_tree is not None else cKDTree(surface_points)
        dnn, inn = tree.query(p, k=1, workers=-1)
        redo = np.flatnonzero(dnn < dist * (1.0 - 1e-9))
        if redo.size:
            d2, _, ok2 = _gauss_newton(field, R, p[redo], surface_dirs[inn[redo]])
            win = d2 < dist[redo]
            dist[redo[win]] = d2[win]
            settled[redo[win]] = ok2[win]
    if walls is not None:
        dist = walls.distance(p, dist)
    return dist, settled


def distance_to_surface(
    field: Field,
    radius_m: float,
    points: FloatArray,
    *,
    walls: Walls | None = None,
    surface_points: FloatArray | None = None,
    surface_dirs: FloatArray | None = None,
    surface_tree: cKDTree | None = None,
    search: bool = True,
) -> FloatArray:
    """Distance from each point to the true surface (see the module docstring).

    Gauss-Newton projection from the radial direction; with ``surface_points`` /
    ``surface_dirs`` (a dense surface sample and its directions), a point whose nearest sample is
    closer than that result is projected again from the sample's direction; then the walls;
    then :func:`polish` on every point (``search``), or only where the projection did not settle.
    A settled projection is a local minimum only: below a convex crease both faces have one.
    """
    R = float(radius_m)
    p = np.asarray(points, dtype=np.float64)
    dist, settled = _projected(field, R, p, walls, surface_points, surface_dirs, surface_tree)
    rough = np.arange(p.shape[0]) if search else np.flatnonzero(~settled)
    if rough.size:
        dist[rough] = polish(field, R, p[rough], dist[rough])
    return dist


def _largest_first(values: FloatArray, refine: Any, batch: int = 4096) -> FloatArray:
    """Lower upper bounds, largest first, until the maximum is final.

    ``values`` are upper bounds; ``refine(indices)`` returns values no larger. Indices are
    refined in decreasing order of their bound, in doubling batches, until the next bound does
    not exceed the largest refined value: nothing left can exceed it.
    """
    order = np.argsort(-values, kind="stable")
    done_max = -math.inf
    start = 0
    while start < order.size and values[order[start]] > done_max:
        sel = order[start : start + batch]
        values[sel] = np.minimum(values[sel], refine(sel))
        done_max = max(done_max, float(values[sel].max()))
        start += batch
        batch *= 2
    return values


def _mesh_point_distances(
    field: Field,
    R: float,
    pts: FloatArray,
    walls: Walls | None,
    surf: FloatArray,
    dirs: FloatArray,
    tree: cKDTree,
) -> FloatArray:
    """Per-point distances whose maximum equals that of :func:`distance_to_surface`.

    Every point first gets the cheap upper bound ``| |p| - R - H(p/|p|) |`` (its distance to
    the surface point straight below or above it). Projection and walls are then applied largest
    bound first until the maximum is final (:func:`_largest_first`), and :func:`polish` (a
    search of the whole cap that can hold a closer surface point) likewise. Points never
    reached keep an upper bound.
    """
    u = _normalize(pts.copy())
    h = np.asarray(field.height(u), dtype=np.float64)
    d = np.abs(np.linalg.norm(pts, axis=1) - R - h)
    settled = np.zeros(pts.shape[0], dtype=bool)
    reached = np.zeros(pts.shape[0], dtype=bool)

    def project(sel: IntArray) -> FloatArray:
        dd, ok = _projected(field, R, pts[sel], walls, surf, dirs, tree)
        settled[sel] = ok
        reached[sel] = True
        return dd

    d = _largest_first(d, project)

    def full(sel: IntArray) -> FloatArray:
        out = d[sel].copy()
        fresh = ~reached[sel]
        if fresh.any():
            out[fresh] = np.minimum(out[fresh], project(sel[fresh]))
        # every point that can still set the maximum is searched: a settled projection is
        # only a local minimum (inside a convex crease both faces have one)
        return polish(field, R, pts[sel], out)

    return _largest_first(d, full, batch=64)


def measure(
    field: Field,
    radius_m: float,
    vertices: FloatArray,
    triangles: NDArray[np.integer[Any]],
    *,
    samples_per_triangle: int = 10,
    surface_samples: int = 200_000,
    extra_directions: FloatArray | None = None,
    walls: Walls | None = None,
    refine_worst: int = 256,
    refine_grid: int = 24,
) -> dict[str, Any]:
    """Two-sided deviation of the mesh from the true surface, in metres.

    ``samples_per_triangle`` picks the barycentric grid: the smallest step ``1/n`` whose
    ``(n+1)(n+2)/2`` nodes per triangle reach the number (10 -> n = 3, 15 -> n = 4).
    ``surface_samples`` uniform (Fibonacci) directions plus ``extra_directions`` (e.g.
    :func:`feature_directions`) make the surface sample; ``walls`` (e.g. :func:`step_walls`)
    adds the vertical walls to the surface. See the module docstring for exactly what is
    measured.

    vertices : (V, 3) float64 metres; triangles : (T, 3) integer indices.

    Returns a dict with ``mesh_to_surface``, ``surface_to_mesh``, ``max`` (metres), the points
    where the two maxima occur (``mesh_to_surface_at``: mesh point, ``surface_to_mesh_at``:
    surface point), and the sample counts.
    """
    R = float(radius_m)
    v = np.ascontiguousarray(vertices, dtype=np.float64)
    t = np.ascontiguousarray(triangles, dtype=np.int64)
    if v.ndim != 2 or v.shape[1] != 3 or t.ndim != 2 or t.shape[1] != 3:
        raise ValueError("vertices must be (V, 3) and triangles (T, 3)")
    n = 1
    while (n + 1) * (n + 2) // 2 < samples_per_triangle:
        n += 1

    # the surface sample
    dirs = fibonacci_directions(int(surface_samples))
    if extra_directions is not None and len(extra_directions):
        dirs = np.concatenate([dirs, _normalize(np.asarray(extra_directions, float))], axis=0)
    _, surf = _surface(field, R, dirs)
    tree = cKDTree(surf)
    spacing = R * math.sqrt(4.0 * math.pi / max(1, int(surface_samples)))
    # walls are small: sample them four times denser than the uniform sample
    wall_pts = walls.sample(spacing / 4.0) if walls is not None else np.empty((0, 3))

    # mesh -> surface
    pts, index = _mesh_samples(v, t, n)
    d = _mesh_point_distances(field, R, pts, walls, surf, dirs, tree)
    per_tri = d[index].max(axis=1)
    at = int(np.argmax(d))
    m2s, m2s_at = float(d[at]), pts[at]
    n_mesh = pts.shape[0]
    k = min(int(refine_worst), t.shape[0])
    if k > 0 and refine_grid > n:
        worst = np.argpartition(per_tri, -k)[-k:]
        fine = _grid_points(v[t[worst]], int(refine_grid))
        df = _mesh_point_distances(field, R, fine, walls, surf, dirs, tree)
        n_mesh += fine.shape[0]
        j = int(np.argmax(df))
        if df[j] > m2s:
            m2s, m2s_at = float(df[j]), fine[j]

    # surface -> mesh
    spts = np.concatenate([surf, wall_pts], axis=0)
    ds, _ = distance_to_mesh(v, t, spts)
    j = int(np.argmax(ds))
    s2m, s2m_at = float(ds[j]), spts[j]
    return {
        "mesh_to_surface": m2s,
        "surface_to_mesh": s2m,
        "max": max(m2s, s2m),
        "mesh_to_surface_at": m2s_at.tolist(),
        "surface_to_mesh_at": s2m_at.tolist(),
        "mesh_samples": int(n_mesh),
        "surface_samples": int(spts.shape[0]),
        "wall_samples": int(wall_pts.shape[0]),
    }
