"""Checks of tests/independent_error.py against facts from outside the project.

The surfaces here are real surfaces written from their formulas (a sphere, an off-centre sphere,
the width-0 mesa and block of docs/terrain.md), so every expected value is known in closed form.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import trimesh
from independent_error import (
    KIND_BLOCK,
    KIND_MESA,
    FloatArray,
    _grid_points,
    _mesh_samples,
    cap_directions,
    closest_point_on_triangles,
    distance_to_mesh,
    distance_to_surface,
    feature_directions,
    fibonacci_directions,
    measure,
    project_to_surface,
    step_walls,
)


# --------------------------------------------------------------------------- surfaces
class FeaturelessSphere:
    """H = 0: the ground is the sphere of radius R."""

    def height(self, dirs: FloatArray) -> FloatArray:
        return np.zeros(dirs.shape[0])

    def gradient(self, dirs: FloatArray) -> FloatArray:
        return np.zeros_like(dirs)


class OffCentreSphere:
    """Sphere of radius rho centred at c (|c| < rho), seen from the origin as a height field.

    The ray t u (t > 0) meets it at t = c.u + sqrt((c.u)^2 - |c|^2 + rho^2) (ray-sphere
    intersection), so H(u) = t(u) - R; grad H = tangential part of dt/du.
    """

    def __init__(self, radius_m: float, centre: FloatArray, rho: float) -> None:
        self.R, self.c, self.rho = radius_m, np.asarray(centre, dtype=float), rho

    def _root(self, dirs: FloatArray) -> tuple[FloatArray, FloatArray]:
        cu = dirs @ self.c
        return cu, np.sqrt(cu * cu - self.c @ self.c + self.rho**2)

    def height(self, dirs: FloatArray) -> FloatArray:
        cu, root = self._root(dirs)
        return cu + root - self.R

    def gradient(self, dirs: FloatArray) -> FloatArray:
        cu, root = self._root(dirs)
        dt = self.c[None, :] * (1.0 + cu / root)[:, None]
        return dt - np.sum(dt * dirs, axis=1, keepdims=True) * dirs


def _angle(u: FloatArray, c: FloatArray) -> FloatArray:
    # docs/terrain.md: theta(a, b) = atan2(|a x b|, a . b)
    return np.arctan2(np.linalg.norm(np.cross(u, c), axis=1), u @ c)


def _unit(lat_deg: float, lon_deg: float) -> FloatArray:
    # docs/terrain.md: u(lat, lon) = (cos lat sin lon, sin lat, cos lat cos lon)
    la, lo = math.radians(lat_deg), math.radians(lon_deg)
    return np.array([math.cos(la) * math.sin(lo), math.sin(la), math.cos(la) * math.cos(lo)])


class MesaStep:
    """A single width-0 mesa on H = 0 (docs/terrain.md "mesa", blend add): H = h for d <= a."""

    def __init__(self, radius_m: float, centre: FloatArray, a: float, h: float) -> None:
        self.R, self.c, self.a, self.h = radius_m, centre, a, h

    def row(self) -> FloatArray:
        r = np.zeros(16)
        r[0], r[3:6], r[9], r[10], r[11] = KIND_MESA, self.c, self.h, self.a, 0.0
        return r

    def height(self, dirs: FloatArray) -> FloatArray:
        return np.where(self.R * _angle(dirs, self.c) <= self.a, self.h, 0.0)

    def gradient(self, dirs: FloatArray) -> FloatArray:
        return np.zeros_like(dirs)  # steps have zero gradient on either side (docs)


class BlockStep:
    """A single width-0 block on H = 0, written from docs/terrain.md "block"."""

    def __init__(
        self,
        radius_m: float,
        centre: FloatArray,
        hx: float,
        hy: float,
        r: float,
        psi: float,
        h: float,
    ) -> None:
        self.R, self.c, self.hx, self.hy, self.r, self.psi, self.h = (
            radius_m,
            centre,
            hx,
            hy,
            r,
            psi,
            h,
        )
        y_hat = np.array([0.0, 1.0, 0.0])
        n = y_hat - (y_hat @ centre) * centre
        n /= np.linalg.norm(n)
        e = np.cross(n, centre)
        self.X = math.cos(psi) * e + math.sin(psi) * n
        self.Y = -math.sin(psi) * e + math.cos(psi) * n

    def row(self) -> FloatArray:
        r = np.zeros(16)
        r[0], r[3:6] = KIND_BLOCK, self.c
        r[9], r[10], r[11], r[12], r[13], r[14] = self.h, self.hx, self.hy, self.r, 0.0, self.psi
        return r

    def local(self, dirs: FloatArray) -> tuple[FloatArray, FloatArray]:
        uc = dirs @ self.c
        return self.R * np.arctan2(dirs @ self.X, uc), self.R * np.arctan2(dirs @ self.Y, uc)

    def from_local(self, x: FloatArray, y: FloatArray) -> FloatArray:
        u = self.c + np.tan(x / self.R)[:, None] * self.X + np.tan(y / self.R)[:, None] * self.Y
        return u / np.linalg.norm(u, axis=1, keepdims=True)

    def sdf(self, dirs: FloatArray) -> FloatArray:
        x, y = self.local(dirs)
        qx = np.abs(x) - (self.hx - self.r)
        qy = np.abs(y) - (self.hy - self.r)
        outside = np.hypot(np.maximum(qx, 0), np.maximum(qy, 0))
        return outside + np.minimum(np.maximum(qx, qy), 0) - self.r

    def height(self, dirs: FloatArray) -> FloatArray:
        return np.where(self.sdf(dirs) <= 0, self.h, 0.0)

    def gradient(self, dirs: FloatArray) -> FloatArray:
        return np.zeros_like(dirs)


def _plane_gap(vertices: FloatArray, faces: np.ndarray, centre: FloatArray, rho: float) -> float:
    """Largest distance from a triangle inscribed in a sphere to that sphere.

    For a triangle whose vertices lie on a sphere, the foot of the perpendicular from the centre
    to its plane is the triangle's circumcentre (the vertices are equidistant from the centre, so
    their projections are equidistant from the foot); for an acute triangle it lies inside, and
    the point of the triangle nearest the centre, hence farthest from the sphere, is there:
    gap = rho - (distance from the centre to the plane).
    """
    tri = vertices[faces] - centre
    n = np.cross(tri[:, 1] - tri[:, 0], tri[:, 2] - tri[:, 0])
    n /= np.linalg.norm(n, axis=1, keepdims=True)
    return float(np.max(rho - np.abs(np.sum(n * tri[:, 0], axis=1))))


def _all_acute(vertices: FloatArray, faces: np.ndarray) -> bool:
    tri = vertices[faces]
    for i in range(3):
        a, b, c = tri[:, i], tri[:, (i + 1) % 3], tri[:, (i + 2) % 3]
        if np.any(np.sum((b - a) * (c - a), axis=1) <= 0):
            return False
    return True


# --------------------------------------------------------------------------- mesh distance
def test_closest_point_on_triangles_matches_trimesh() -> None:
    # reference library: trimesh.triangles.closest_point (pointwise, one triangle per point)
    rng = np.random.default_rng(1)
    n = 5000
    tri = rng.normal(size=(n, 3, 3))
    tri[: n // 10, 2] = tri[: n // 10, 0] + 1e-3 * rng.normal(size=(n // 10, 3))  # thin ones
    p = 2.0 * rng.normal(size=(n, 3))
    ours = closest_point_on_triangles(p, tri[:, 0], tri[:, 1], tri[:, 2])
    ref = trimesh.triangles.closest_point(tri, p)
    d_ours = np.linalg.norm(p - ours, axis=1)
    d_ref = np.linalg.norm(p - ref, axis=1)
    np.testing.assert_allclose(d_ours, d_ref, atol=1e-9)


def test_distance_to_mesh_is_exact_on_a_soup_of_mixed_sizes() -> None:
    # brute force over every (point, triangle) pair with trimesh.triangles.closest_point
    rng = np.random.default_rng(2)
    nt = 400
    centre = rng.uniform(-50, 50, size=(nt, 1, 3))
    size = np.exp(rng.uniform(math.log(0.01), math.log(30.0), size=(nt, 1, 1)))
    tri = centre + size * rng.normal(size=(nt, 3, 3))
    vertices = tri.reshape(-1, 3)
    faces = np.arange(3 * nt).reshape(-1, 3)
    q = rng.uniform(-60, 60, size=(300, 3))
    d, cp = distance_to_mesh(vertices, faces, q)
    pairs_q = np.repeat(np.arange(q.shape[0]), nt)
    pairs_t = np.tile(np.arange(nt), q.shape[0])
    ref = trimesh.triangles.closest_point(tri[pairs_t], q[pairs_q])
    d_ref = np.linalg.norm(q[pairs_q] - ref, axis=1).reshape(q.shape[0], nt).min(axis=1)
    np.testing.assert_allclose(d, d_ref, atol=1e-9)
    np.testing.assert_allclose(np.linalg.norm(q - cp, axis=1), d, atol=1e-9)


# --------------------------------------------------------------------------- sampling
def test_mesh_samples_are_the_barycentric_grid_of_every_triangle() -> None:
    # each triangle's sample points must be exactly its barycentric grid nodes (shared ones once)
    mesh = trimesh.creation.icosphere(subdivisions=1, radius=10.0)
    faces = mesh.faces[np.random.default_rng(3).permutation(len(mesh.faces))]
    for n in (1, 2, 3, 5):
        pts, index = _mesh_samples(np.asarray(mesh.vertices), faces.astype(np.int64), n)
        per_tri = _grid_points(np.asarray(mesh.vertices)[faces], n).reshape(len(faces), -1, 3)
        np.testing.assert_allclose(pts[index], per_tri, atol=1e-12)
        # shared points once: V + E (n - 1) + F (n - 1)(n - 2) / 2, with E = 3F / 2 (closed mesh)
        nv, nf = len(mesh.vertices), len(faces)
        assert pts.shape[0] == nv + (3 * nf // 2) * (n - 1) + nf * (n - 1) * (n - 2) // 2


def test_fibonacci_and_cap_directions_are_near_uniform() -> None:
    # uniform directions: each octant holds 1/8 of them; the mean vector vanishes
    d = fibonacci_directions(20_000)
    np.testing.assert_allclose(np.linalg.norm(d, axis=1), 1.0, atol=1e-12)
    octant = (d[:, 0] > 0) * 4 + (d[:, 1] > 0) * 2 + (d[:, 2] > 0)
    counts = np.bincount(octant, minlength=8)
    assert np.all(np.abs(counts - 2500) < 60)
    assert np.linalg.norm(d.mean(axis=0)) < 1e-3
    # a cap of half-angle 0.3 rad: all inside, and the area fraction within 0.2 rad matches
    # (1 - cos 0.2) / (1 - cos 0.3) (area of a spherical cap, 2 pi (1 - cos a))
    c = _unit(20.0, -40.0)
    cap = cap_directions(c, 0.3, 10_000)
    ang = _angle(cap, c)
    assert ang.max() <= 0.3 + 1e-12
    frac = np.mean(ang < 0.2)
    assert abs(frac - (1 - math.cos(0.2)) / (1 - math.cos(0.3))) < 0.01


def test_feature_directions_cover_a_hill_footprint() -> None:
    R, sigma = 1000.0, 25.0
    row = np.zeros(16)
    row[0], row[3:6], row[9], row[10] = 0, _unit(10.0, 30.0), 12.0, sigma
    d = feature_directions(row[None, :], R)
    ang = _angle(d, row[3:6])
    # footprint d < 4 sigma (docs/terrain.md "hill"), covered to its edge
    assert R * ang.max() <= 1.05 * 4 * sigma + 1e-9
    assert R * ang.max() >= 4 * sigma
    # spacing about sigma / 6: cap area / count
    spacing = math.sqrt(2 * math.pi * (1 - math.cos(ang.max())) * R * R / d.shape[0])
    assert spacing <= sigma / 6 * 1.01


def test_feature_directions_cover_a_ridge_band() -> None:
    R, b = 1000.0, 12.0
    c0, c1 = _unit(-5.0, 160.0), _unit(10.0, 175.0)
    row = np.zeros(16)
    row[0], row[3:6], row[6:9], row[9], row[10] = 4, c0, c1, 6.0, b
    d = feature_directions(row[None, :], R)

    def delta(u: FloatArray) -> FloatArray:
        # docs/terrain.md "ridge": distance to the arc c0 -> c1
        n = np.cross(c0, c1)
        n /= np.linalg.norm(n)
        q = u - np.outer(u @ n, n)
        on_arc = (np.cross(c0, q) @ n >= 0) & (np.cross(q, c1) @ n >= 0)
        ends = np.minimum(_angle(u, c0), _angle(u, c1))
        return R * np.where(on_arc, np.arcsin(np.minimum(1.0, np.abs(u @ n))), ends)

    # every sample is near the footprint delta < b: a band 1.05 b wide, run 1.05 b past the
    # ends, so its corners are at most sqrt(2) 1.05 b from the arc...
    assert np.all(delta(d) <= math.sqrt(2) * 1.05 * b + 1e-9)
    # ...and the footprint is covered: footprint points have a sample within b / 6
    rng = np.random.default_rng(6)
    probe = d[rng.choice(d.shape[0], 500)] + rng.normal(scale=0.3 * b / R, size=(500, 3))
    probe /= np.linalg.norm(probe, axis=1, keepdims=True)
    probe = probe[delta(probe) < b]
    gap = R * np.min(np.arccos(np.clip(probe @ d.T, -1, 1)), axis=1)
    assert gap.max() <= b / 6


# --------------------------------------------------------------------------- projection
def test_projection_finds_the_distance_to_an_off_centre_sphere() -> None:
    # distance from p to a sphere (centre c, radius rho) is | |p - c| - rho | (elementary)
    R, rho = 1000.0, 1000.0
    c = np.array([120.0, -260.0, 80.0])
    field = OffCentreSphere(R, c, rho)
    rng = np.random.default_rng(4)
    u = rng.normal(size=(4000, 3))
    u /= np.linalg.norm(u, axis=1, keepdims=True)
    on = (R + field.height(u))[:, None] * u
    p = on + rng.uniform(-30.0, 30.0, size=(u.shape[0], 3))
    exact = np.abs(np.linalg.norm(p - c, axis=1) - rho)
    d, _ = project_to_surface(field, R, p)
    np.testing.assert_allclose(d, exact, atol=1e-7)
    # the radial offset | |p| - R - H(p^) | is not the distance here (slopes up to 17 degrees)
    pu = p / np.linalg.norm(p, axis=1, keepdims=True)
    radial = np.abs(np.linalg.norm(p, axis=1) - R - field.height(pu))
    assert np.max(radial - exact) > 0.5


class Lens:
    """The intersection of the ball |p| <= R and an off-centre ball B (both hold the origin).

    As a height field it is H = min(0, H_B) (docs/terrain.md blend ``min``): a convex crease
    runs where the two spheres meet, between flat ground and a 45-degree slope.
    """

    def __init__(self, radius_m: float) -> None:
        self.R = radius_m
        self.cb = np.array([-radius_m, 0.0, 0.0])
        self.rb = math.sqrt(2.0) * radius_m
        self.b = OffCentreSphere(radius_m, self.cb, self.rb)

    def height(self, dirs: FloatArray) -> FloatArray:
        return np.minimum(0.0, self.b.height(dirs))

    def gradient(self, dirs: FloatArray) -> FloatArray:
        # the gradient of min follows the smaller argument (docs/terrain.md "Gradient")
        return np.where((self.b.height(dirs) < 0.0)[:, None], self.b.gradient(dirs), 0.0)

    def exact_distance(self, p: FloatArray) -> FloatArray:
        """Distance from points inside the lens to its boundary, by elementary geometry.

        The boundary is (sphere A inside ball B) + (sphere B inside ball A). On a sphere the
        distance to p grows with the angle from p's foot point, so each part's nearest point
        is the foot if the foot lies on that part, else on the circle where the spheres meet.
        """
        R, cb, rb = self.R, self.cb, self.rb
        pn = np.linalg.norm(p, axis=1)
        foot_a = R * p / pn[:, None]
        wb = p - cb
        wbn = np.linalg.norm(wb, axis=1)
        foot_b = cb + rb * wb / wbn[:, None]
        da = np.where(np.linalg.norm(foot_a - cb, axis=1) <= rb, R - pn, np.inf)
        db = np.where(np.linalg.norm(foot_b, axis=1) <= R, rb - wbn, np.inf)
        # circle of the two spheres: plane x = 0 here (|p| = R and |p - cb| = rb give x = 0),
        # centre at the origin, radius R
        radial = np.hypot(p[:, 1], p[:, 2])
        dc = np.hypot(p[:, 0], radial - R)
        return np.minimum(np.minimum(da, db), dc)


def test_distance_below_a_convex_crease_finds_the_nearer_face() -> None:
    R = 1000.0
    lens = Lens(R)
    rng = np.random.default_rng(5)
    n = 200
    # under the crease, on the flat side (x < 0), 0.3 .. 0.6 m deep: the radial direction
    # points at the flat face, but the sloped face is nearer for most of these points
    x = rng.uniform(-0.25, -0.02, n)
    y = rng.uniform(-50.0, 50.0, n)
    depth = rng.uniform(0.3, 0.6, n)
    u = np.stack([x / R, y / R, np.ones(n)], axis=1)
    u /= np.linalg.norm(u, axis=1, keepdims=True)
    p = (R - depth)[:, None] * u
    exact = lens.exact_distance(p)
    d = distance_to_surface(lens, R, p)
    np.testing.assert_allclose(d, exact, atol=1e-5)
    # a local projection alone stops on the flat face: the search is what finds the slope
    d_local, _ = project_to_surface(lens, R, p)
    assert np.max(d_local - exact) > 0.05


def test_mesa_wall_is_part_of_the_surface() -> None:
    R, a, h = 1000.0, 40.0, 12.0
    c = _unit(30.0, 10.0)
    field = MesaStep(R, c, a, h)
    walls = step_walls(field.row()[None, :], field, R)
    assert walls is not None
    # points beside the wall at mid-height, just outside the rim, in various meridians
    e1 = np.cross([0.0, 1.0, 0.0], c)
    e1 /= np.linalg.norm(e1)
    e2 = np.cross(c, e1)
    phi = np.linspace(0, 2 * math.pi, 50, endpoint=False)
    t = np.outer(np.cos(phi), e1) + np.outer(np.sin(phi), e2)
    beta = a / R + 0.3 / R  # 0.3 m beyond the rim
    u = math.cos(beta) * c + math.sin(beta) * t
    rim = math.cos(a / R) * c + math.sin(a / R) * t
    p = (R + 0.4 * h) * u
    # distance to the radial segment {r rim : R <= r <= R + h} (point-to-line, foot inside)
    along = np.sum(p * rim, axis=1)
    assert np.all((along > R) & (along < R + h))
    exact = np.linalg.norm(p - along[:, None] * rim, axis=1)
    d = distance_to_surface(field, R, p, walls=walls)
    np.testing.assert_allclose(d, exact, rtol=1e-9, atol=1e-9)
    # without the wall the nearest surface is the ground 0.4 h below
    d_no = distance_to_surface(field, R, p)
    assert np.all(d_no > 0.39 * h)
    # wall samples: on the rim (angle a / R from the centre), spanning R .. R + h
    s = walls.sample(0.5)
    r = np.linalg.norm(s, axis=1)
    np.testing.assert_allclose(R * _angle(s / r[:, None], c), a, atol=1e-9)
    assert r.min() == pytest.approx(R) and r.max() == pytest.approx(R + h)


def test_block_wall_distance_beside_an_edge_and_a_rounded_corner() -> None:
    R, h = 1000.0, 8.0
    hx, hy, r, psi = 30.0, 20.0, 5.0, math.radians(25.0)
    field = BlockStep(R, _unit(-15.0, 60.0), hx, hy, r, psi, h)
    walls = step_walls(field.row()[None, :], field, R)
    assert walls is not None
    off = 0.5  # metres outside the rounded rectangle, in local coordinates
    k = math.cos(math.pi / 4)
    x = np.array([hx + off, -(hx + off), 3.0, hx - r + (r + off) * k, -(hx - r) - (r + off) * k])
    y = np.array([2.0, -5.0, hy + off, hy - r + (r + off) * k, -(hy - r) - (r + off) * k])
    u = field.from_local(x, y)
    assert np.all(field.sdf(u) > 0)  # outside the block: ground at R there
    p = (R + 0.5 * h) * u
    d = distance_to_surface(field, R, p, walls=walls)
    # local coordinates are R * angle, so at radius R + h/2 the offset scales by (R + h/2) / R;
    # their distortion over 30 m at R = 1000 m is of order (30/1000)^2 (gnomonic-type map)
    np.testing.assert_allclose(d, off * (R + 0.5 * h) / R, rtol=2e-3)
    # wall samples lie on the rim (s = 0 by the docs' signed distance) and span R .. R + h
    s = walls.sample(0.5)
    rad = np.linalg.norm(s, axis=1)
    dirs = s / rad[:, None]
    x_s, y_s = field.local(dirs)
    qx, qy = np.abs(x_s) - (hx - r), np.abs(y_s) - (hy - r)
    sd = np.hypot(np.maximum(qx, 0), np.maximum(qy, 0)) + np.minimum(np.maximum(qx, qy), 0) - r
    np.testing.assert_allclose(sd, 0.0, atol=1e-6)
    assert rad.min() == pytest.approx(R) and rad.max() == pytest.approx(R + h)


# --------------------------------------------------------------------------- measure
@pytest.mark.parametrize("level", [2, 3])
def test_icosphere_error_is_the_circumscribed_gap(level: int) -> None:
    R = 1000.0
    mesh = trimesh.creation.icosphere(subdivisions=level, radius=R)
    v, f = np.asarray(mesh.vertices), np.asarray(mesh.faces)
    assert _all_acute(v, f)
    gap = _plane_gap(v, f, np.zeros(3), R)
    res = measure(FeaturelessSphere(), R, v, f, surface_samples=50_000)
    # sample points lie on the triangles, whose distance to the sphere is at most the gap
    assert res["mesh_to_surface"] <= gap + 1e-9
    assert res["mesh_to_surface"] == pytest.approx(gap, rel=2e-3)
    # the surface point above the circumcentre is the gap away from the mesh; sampled near it
    assert res["surface_to_mesh"] <= gap + 1e-9
    assert res["surface_to_mesh"] == pytest.approx(gap, rel=2e-3)
    assert res["max"] == max(res["mesh_to_surface"], res["surface_to_mesh"])


def test_error_of_an_inscribed_off_centre_sphere_mesh() -> None:
    # the same fact for an off-centre sphere, whose ground is sloped as seen from the origin
    R, rho = 1000.0, 1000.0
    c = np.array([150.0, 200.0, -100.0])
    mesh = trimesh.creation.icosphere(subdivisions=3, radius=rho)
    v = np.asarray(mesh.vertices) + c
    f = np.asarray(mesh.faces)
    gap = _plane_gap(v, f, c, rho)
    res = measure(OffCentreSphere(R, c, rho), R, v, f, surface_samples=50_000)
    assert res["mesh_to_surface"] <= gap + 1e-9
    assert res["mesh_to_surface"] == pytest.approx(gap, rel=2e-3)
    assert res["surface_to_mesh"] == pytest.approx(gap, rel=2e-3)


@pytest.mark.parametrize("delta", [0.5, -0.5])
def test_shifted_mesh_measures_the_shift(delta: float) -> None:
    # every vertex moved radially by delta: the vertices are |delta| from the sphere
    R = 1000.0
    mesh = trimesh.creation.icosphere(subdivisions=5, radius=R)
    v, f = np.asarray(mesh.vertices) * (R + delta) / R, np.asarray(mesh.faces)
    gap = _plane_gap(v, f, np.zeros(3), R + delta)  # triangle-to-shifted-sphere gap, 0.2 m
    assert gap < abs(delta)
    res = measure(FeaturelessSphere(), R, v, f, surface_samples=100_000)
    if delta > 0:
        # farthest mesh points: the vertices, delta out; surface points within delta of the mesh
        # and no closer than delta - gap (the mesh lies in the shell R + delta - gap .. R + delta)
        assert res["mesh_to_surface"] == pytest.approx(delta, abs=1e-9)
        assert delta - gap - 1e-9 <= res["surface_to_mesh"] <= delta + 1e-9
    else:
        # inward: the circumcentres are |delta| + gap inside, and so is the surface above them
        assert res["mesh_to_surface"] == pytest.approx(-delta + gap, rel=1e-3)
        assert res["surface_to_mesh"] == pytest.approx(-delta + gap, rel=1e-2)
    assert res["max"] == max(res["mesh_to_surface"], res["surface_to_mesh"])
