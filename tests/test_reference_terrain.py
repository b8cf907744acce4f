"""Checks of the plain-numpy reference terrain (tests/reference_terrain.py) against outside facts:
definitions of the shapes in docs/terrain.md evaluated by hand, published test vectors of
SplitMix64 and of Perlin's reference noise, properties of gradient noise, and central differences.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pytest
from reference_terrain import (
    E4,
    PerlinNoise,
    ReferenceTerrain,
    angle,
    difference_mismatch,
    direction,
    feature_row,
    permutation,
    random_directions,
    reference_from_spec,
    sample_directions,
    smax,
    smin,
    splitmix64,
    tangent_directions,
    tangent_frame,
)

R = 1200.0

# Ken Perlin's permutation table from his improved-noise reference implementation (Perlin 2002,
# https://mrl.nyu.edu/~perlin/noise/), used here only as a test vector for the noise code.
PERLIN_2002_PERMUTATION = [
    151, 160, 137, 91, 90, 15, 131, 13, 201, 95, 96, 53, 194, 233, 7, 225, 140, 36, 103, 30, 69,
    142, 8, 99, 37, 240, 21, 10, 23, 190, 6, 148, 247, 120, 234, 75, 0, 26, 197, 62, 94, 252, 219,
    203, 117, 35, 11, 32, 57, 177, 33, 88, 237, 149, 56, 87, 174, 20, 125, 136, 171, 168, 68, 175,
    74, 165, 71, 134, 139, 48, 27, 166, 77, 146, 158, 231, 83, 111, 229, 122, 60, 211, 133, 230,
    220, 105, 92, 41, 55, 46, 245, 40, 244, 102, 143, 54, 65, 25, 63, 161, 1, 216, 80, 73, 209, 76,
    132, 187, 208, 89, 18, 169, 200, 196, 135, 130, 116, 188, 159, 86, 164, 100, 109, 198, 173,
    186, 3, 64, 52, 217, 226, 250, 124, 123, 5, 202, 38, 147, 118, 126, 255, 82, 85, 212, 207, 206,
    59, 227, 47, 16, 58, 17, 182, 189, 28, 42, 223, 183, 170, 213, 119, 248, 152, 2, 44, 154, 163,
    70, 221, 153, 101, 155, 167, 43, 172, 9, 129, 22, 39, 253, 19, 98, 108, 110, 79, 113, 224, 232,
    178, 185, 112, 104, 218, 246, 97, 228, 251, 34, 242, 193, 238, 210, 144, 12, 191, 179, 162,
    241, 81, 51, 145, 235, 249, 14, 239, 107, 49, 192, 214, 31, 181, 199, 106, 157, 184, 84, 204,
    176, 115, 121, 50, 45, 127, 4, 150, 254, 138, 236, 205, 93, 222, 114, 67, 29, 24, 72, 243, 141,
    128, 195, 78, 66, 215, 61, 156, 180,
]  # fmt: skip


def single(feature: dict[str, Any]) -> ReferenceTerrain:
    return reference_from_spec({"radius_m": R, "features": [feature]})


def rotate_towards(c: np.ndarray, t: np.ndarray, ang: float | np.ndarray) -> np.ndarray:
    """Directions at geodesic angle `ang` from unit c along unit tangent t; (N, 3)."""
    ang = np.atleast_1d(np.asarray(ang, dtype=np.float64))
    return np.cos(ang)[:, None] * c + np.sin(ang)[:, None] * t


# ---------------------------------------------------------------------------------------------
# frame and helpers
# ---------------------------------------------------------------------------------------------


def test_direction_frame_is_y_up_right_handed() -> None:
    # docs/terrain.md: (0°, 0°) is +Z, (0°, 90°) is +X, (90°, ·) is +Y (the glTF frame)
    np.testing.assert_allclose(direction(0, 0), [0, 0, 1], atol=1e-15)
    np.testing.assert_allclose(direction(0, 90), [1, 0, 0], atol=1e-15)
    np.testing.assert_allclose(direction(90, 37), [0, 1, 0], atol=1e-15)
    # right-handed: X × Y = Z
    np.testing.assert_allclose(np.cross(direction(0, 90), direction(90, 0)), [0, 0, 1], atol=1e-15)


def test_tangent_frame_is_orthonormal_and_faces_out() -> None:
    # (E, N, c) orthonormal and E × N = c, so ψ counter-clockwise from east seen from outside
    for c in [direction(10, 20), direction(-89, 5), direction(90, 0), direction(-90, 0)]:
        e, n = tangent_frame(c)
        basis = np.array([e, n, c])
        np.testing.assert_allclose(basis @ basis.T, np.eye(3), atol=1e-12)
        np.testing.assert_allclose(np.cross(e, n), c, atol=1e-12)
    # at (0°, 0°) north is +Y and east is +X (towards longitude 90°)
    e, n = tangent_frame(direction(0, 0))
    np.testing.assert_allclose(e, [1, 0, 0], atol=1e-15)
    np.testing.assert_allclose(n, [0, 1, 0], atol=1e-15)


def test_angle_is_stable_for_tiny_and_near_antipodal_angles() -> None:
    # atan2(|a × b|, a · b) keeps full relative precision where acos(a · b) loses it
    c = direction(0, 0)
    t = np.array([1.0, 0.0, 0.0])
    for ang in [1e-12, 1e-7, 1.0, np.pi - 1e-7]:
        u = rotate_towards(c, t, ang)
        assert angle(u, c)[0] == pytest.approx(ang, rel=1e-9)


def test_smooth_min_matches_polynomial_smooth_minimum() -> None:
    # polynomial smooth minimum (common practice): equals min(a, b) once |a − b| ≥ k, and
    # a − k/4 where a = b (h = 1/2: a/2 + a/2 − k/4)
    k = 4.0
    a = np.array([0.0, 0.0, 10.0, 3.0])
    b = np.array([5.0, -5.0, 3.0, 3.0])
    g0 = np.zeros((4, 3))
    value, _ = smin(a, g0, b, g0, k)
    np.testing.assert_allclose(value, [0.0, -5.0, 3.0, 3.0 - k / 4])
    value, _ = smax(a, g0, b, g0, k)
    np.testing.assert_allclose(value, [5.0, 0.0, 10.0, 3.0 + k / 4])


# ---------------------------------------------------------------------------------------------
# SplitMix64, permutation and Perlin noise
# ---------------------------------------------------------------------------------------------


def test_splitmix64_reference_outputs() -> None:
    # first outputs of SplitMix64 from state 0, as published with Vigna's splitmix64.c
    rng = splitmix64(0)
    assert [next(rng) for _ in range(4)] == [
        0xE220A8397B1DCDAF,
        0x6E789E6AA1B965F4,
        0x06C45D188009454F,
        0xF88BB8A8724C81EC,
    ]


def test_splitmix64_wraps_around_64_bits() -> None:
    # the largest seed must wrap (state + golden gamma overflows) and stay within 64 bits
    rng = splitmix64(2**32 - 1)
    values = [next(rng) for _ in range(100)]
    assert all(0 <= v < 2**64 for v in values)
    assert len(set(values)) == 100


@pytest.mark.parametrize("seed", [0, 1, 12345, 2**32 - 1])
def test_permutation_is_a_shuffle_of_0_to_255(seed: int) -> None:
    # Fisher–Yates yields a permutation (Knuth, TAOCP vol. 2, Algorithm P)
    perm = permutation(seed)
    assert sorted(perm.tolist()) == list(range(256))
    assert perm.tolist() != list(range(256))
    assert permutation(seed).tolist() == perm.tolist()


def test_permutation_differs_between_seeds() -> None:
    assert permutation(0).tolist() != permutation(1).tolist()


def test_perlin_reference_values() -> None:
    # Perlin's reference implementation with his own table gives noise(3.14, 42, 7) =
    # 0.13691995878400012 (Rosetta Code task "Perlin noise") and noise(-4.2, 10, 6) =
    # 0.14208000000000043 (value from ports of the reference implementation)
    noise = PerlinNoise(np.array(PERLIN_2002_PERMUTATION))
    value = noise(np.array([[3.14, 42.0, 7.0], [-4.2, 10.0, 6.0]]))
    np.testing.assert_allclose(value, [0.13691995878400012, 0.14208000000000043], atol=1e-15)


@pytest.mark.parametrize("seed", [0, 99])
def test_perlin_is_zero_at_lattice_points(seed: int) -> None:
    # gradient noise is 0 at every integer lattice point, and its gradient there is the corner's
    # pseudo-random gradient: one of the 12 cube-edge vectors (Perlin 2002, "Improving Noise")
    rng = np.random.default_rng(seed)
    pts = rng.integers(-600, 600, size=(200, 3)).astype(np.float64)
    value, grad = PerlinNoise.from_seed(seed).value_and_gradient(pts)
    np.testing.assert_array_equal(value, 0.0)
    assert np.all(np.isin(grad, [-1.0, 0.0, 1.0]))
    assert np.all(np.count_nonzero(grad, axis=1) == 2)


def test_perlin_is_periodic_with_period_256() -> None:
    # the lattice is hashed modulo 256, so the noise repeats every 256 units on each axis
    rng = np.random.default_rng(3)
    pts = rng.uniform(-300, 300, size=(100, 3))
    noise = PerlinNoise.from_seed(7)
    shifted = pts + np.array([256.0, -512.0, 0.0])
    np.testing.assert_allclose(noise(shifted), noise(pts), atol=1e-12)


def test_perlin_gradient_matches_central_differences() -> None:
    # central differences along each axis, error O(h²)
    rng = np.random.default_rng(5)
    pts = rng.uniform(-20, 20, size=(300, 3))
    noise = PerlinNoise.from_seed(11)
    _, grad = noise.value_and_gradient(pts)
    h = 1e-5
    for axis in range(3):
        step = np.zeros(3)
        step[axis] = h
        fd = (noise(pts + step) - noise(pts - step)) / (2 * h)
        np.testing.assert_allclose(grad[:, axis], fd, atol=1e-7)


# ---------------------------------------------------------------------------------------------
# feature kinds by hand
# ---------------------------------------------------------------------------------------------


def test_hill_height_at_sigma_is_the_truncated_gaussian() -> None:
    # definition: G(σ; σ) = (exp(−1/2) − e₄) / (1 − e₄), G(0) = 1, G = 0 from d = 4σ on
    amplitude, sigma = 30.0, 40.0
    c = direction(10, 20)
    terrain = single(
        {"kind": "hill", "lat_deg": 10, "lon_deg": 20, "amplitude_m": amplitude, "sigma_m": sigma}
    )
    e, _ = tangent_frame(c)
    dist = np.array([0.0, sigma, 4 * sigma - 1e-6, 4 * sigma + 1e-6])
    got = terrain.height(rotate_towards(c, e, dist / R))
    expected = amplitude * (np.exp(-0.5) - E4) / (1 - E4)
    assert got[0] == pytest.approx(amplitude, rel=1e-14)
    assert got[1] == pytest.approx(expected, rel=1e-12)
    # continuous at 4σ: the slope there is 4 A e₄ / (σ (1 − e₄)) ≈ 1e-3, so 1 µm inside ≈ 1e-9
    assert 0.0 < got[2] < 2e-9
    assert got[3] == 0.0
    assert E4 == pytest.approx(np.exp(-(4.0**2) / 2))


def test_valley_is_a_negative_hill() -> None:
    c = direction(-30, 100)
    spec = {"kind": "hill", "lat_deg": -30, "lon_deg": 100, "amplitude_m": 12.0, "sigma_m": 60.0}
    u = np.vstack([c, random_directions(np.random.default_rng(1), 50)])
    up = single(spec).height(u)
    down = single(dict(spec, amplitude_m=-12.0)).height(u)
    np.testing.assert_allclose(down, -up, atol=0)


@pytest.mark.parametrize("wall", [0.0, 20.0])
def test_mesa_top_wall_and_outside(wall: float) -> None:
    # inside d < a the top is h; beyond a + w it is 0; half-way down the wall F(1/2) = 1/2
    height, a = 25.0, 100.0
    c = direction(-10, 25)
    mesa = {
        "kind": "mesa",
        "lat_deg": -10,
        "lon_deg": 25,
        "height_m": height,
        "radius_m": a,
        "wall_width_m": wall,
    }
    terrain = single(mesa)
    e, n = tangent_frame(c)
    t = (e + n) / np.sqrt(2)
    dist = np.array([0.0, 0.5 * a, a - 1e-6, a + wall / 2, a + wall + 1e-6, 3 * a])
    got = terrain.height(rotate_towards(c, t, dist / R))
    expected = [height, height, height, height / 2 if wall else 0.0, 0.0, 0.0]
    np.testing.assert_allclose(got, expected, rtol=1e-9, atol=1e-9)
    assert terrain.wall_features() == ([0] if wall == 0.0 else [])


@pytest.mark.parametrize("heading", [0.0, 30.0, -135.0])
def test_block_along_its_axis_and_round_corner(heading: float) -> None:
    # along local X (y = 0) the signed distance is |x| − hx; at a corner it is the distance to
    # the corner circle minus r (signed distance of a rounded rectangle, common practice)
    hx, hy, r, w, height = 120.0, 70.0, 20.0, 30.0, 15.0
    c = direction(5, -20)
    block = {
        "kind": "block",
        "lat_deg": 5,
        "lon_deg": -20,
        "height_m": height,
        "half_x_m": hx,
        "half_y_m": hy,
        "corner_radius_m": r,
        "wall_width_m": w,
        "bearing_deg": 90.0 - heading,
    }
    terrain = single(block)
    e, n = tangent_frame(c)
    psi = np.radians(heading)
    ax = np.cos(psi) * e + np.sin(psi) * n
    ay = -np.sin(psi) * e + np.cos(psi) * n

    def at_local(x: float, y: float) -> np.ndarray:
        # x = R atan2(u·X, u·c) is inverted by u ∝ c + tan(x/R) X + tan(y/R) Y
        v = c + np.tan(x / R) * ax + np.tan(y / R) * ay
        return (v / np.linalg.norm(v))[None, :]

    def smoothstep_fall(t: float) -> float:
        return 1 - 3 * t**2 + 2 * t**3

    assert terrain.height(at_local(0.0, 0.0))[0] == pytest.approx(height)
    assert terrain.height(at_local(-hx - 0.4 * w, 0.0))[0] == pytest.approx(
        height * smoothstep_fall(0.4), rel=1e-9
    )
    assert terrain.height(at_local(0.0, hy + 0.7 * w))[0] == pytest.approx(
        height * smoothstep_fall(0.7), rel=1e-9
    )
    # corner: 0.5 w beyond the corner circle along the diagonal
    rho = r + 0.5 * w
    x, y = hx - r + rho / np.sqrt(2), -(hy - r + rho / np.sqrt(2))
    assert terrain.height(at_local(x, y))[0] == pytest.approx(height / 2, rel=1e-9)
    assert terrain.height(at_local(hx + w + 1.0, hy + w + 1.0))[0] == 0.0


def test_block_with_vertical_wall_is_a_step() -> None:
    c = direction(0, 0)
    block = {
        "kind": "block",
        "lat_deg": 0,
        "lon_deg": 0,
        "height_m": 9.0,
        "half_x_m": 50.0,
        "half_y_m": 30.0,
        "corner_radius_m": 0.0,
        "wall_width_m": 0.0,
        "bearing_deg": 90.0,
    }
    terrain = single(block)
    e, _ = tangent_frame(c)
    got = terrain.height(rotate_towards(c, e, np.array([50.0 - 1e-6, 50.0 + 1e-6]) / R))
    np.testing.assert_array_equal(got, [9.0, 0.0])
    assert terrain.wall_features() == [0]
    # the step is reported, so comparisons can keep away from it
    # (x = 10, y = 0 is 20 m from the long side y = 30 would be wrong: s = max(−40, −30))
    ev = terrain.evaluate(rotate_towards(c, e, np.array([50.0 - 1e-3, 10.0]) / R))
    assert ev.step_distance[0] == pytest.approx(1e-3 / R, rel=1e-3)
    assert ev.step_distance[1] == pytest.approx(30.0 / R, rel=1e-3)


def test_crater_bowl_and_rim_are_continuous() -> None:
    # centre at −D; the bowl −D + (D + hr)(d/a)² reaches hr at d = a, where the rim's falloff
    # starts at F(0) = 1: the value is continuous across the rim crest; hr/2 half-way down
    depth, a, hr, wr = 20.0, 150.0, 6.0, 60.0
    c = direction(30, 0)
    crater = {
        "kind": "crater",
        "lat_deg": 30,
        "lon_deg": 0,
        "depth_m": depth,
        "radius_m": a,
        "rim_height_m": hr,
        "rim_width_m": wr,
    }
    terrain = single(crater)
    e, _ = tangent_frame(c)
    eps = 1e-7
    dist = np.array([0.0, a / 2, a - eps, a + eps, a + wr / 2, a + wr + eps])
    got = terrain.height(rotate_towards(c, e, dist / R))
    expected = [-depth, -depth + (depth + hr) / 4, hr, hr, hr / 2, 0.0]
    np.testing.assert_allclose(got, expected, atol=1e-6)


@pytest.mark.parametrize("profile", ["round", "sharp"])
def test_ridge_distance_on_and_off_the_arc(profile: str) -> None:
    # a point at angle α off the great circle, between the ends, is δ = R α from the arc; a
    # point on the circle β beyond an end is δ = R β from it
    height, b = 25.0, 80.0
    c0, c1 = direction(-30, -30), direction(-20, 40)
    ridge = {
        "kind": "ridge",
        "lat0_deg": -30,
        "lon0_deg": -30,
        "lat1_deg": -20,
        "lon1_deg": 40,
        "height_m": height,
        "half_width_m": b,
        "profile": profile,
    }
    terrain = single(ridge)
    pole = np.cross(c0, c1)
    pole /= np.linalg.norm(pole)
    mid = (c0 + c1) / np.linalg.norm(c0 + c1)

    def kernel(s: np.ndarray) -> np.ndarray:
        k = (1 - s**2) ** 2 if profile == "round" else 1 - s
        return np.where(s < 1, k, 0.0)

    alpha = np.array([0.0, 10.0, -30.0, 79.0, 81.0]) / R
    got = terrain.height(rotate_towards(mid, pole, alpha))
    np.testing.assert_allclose(got, height * kernel(np.abs(alpha) * R / b), rtol=1e-9, atol=1e-12)
    # beyond c1 along the great circle: tangent there pointing away from c0
    ahead = np.cross(pole, c1)
    beta = np.array([5.0, 40.0, 90.0]) / R
    got = terrain.height(rotate_towards(c1, ahead, beta))
    np.testing.assert_allclose(got, height * kernel(beta * R / b), rtol=1e-9, atol=1e-12)


def test_noise_feature_is_the_octave_sum() -> None:
    # p = A Σ g^k P(2^k f R u + k (19.19, 47.11, 73.37)), written out for three octaves
    amplitude, freq, gain, seed = 7.0, 0.003, 0.6, 4242
    terrain = single(
        {
            "kind": "noise",
            "amplitude_m": amplitude,
            "frequency_per_m": freq,
            "octaves": 3,
            "gain": gain,
            "seed": seed,
        }
    )
    u = random_directions(np.random.default_rng(8), 100)
    noise = PerlinNoise(permutation(seed))
    offset = np.array([19.19, 47.11, 73.37])
    expected = amplitude * sum(gain**k * noise(2**k * freq * R * u + k * offset) for k in range(3))
    np.testing.assert_allclose(terrain.height(u), expected, atol=1e-12)


# ---------------------------------------------------------------------------------------------
# blends and the whole field
# ---------------------------------------------------------------------------------------------


def test_blend_modes_inside_a_flat_footprint() -> None:
    # with m = 1 inside a mesa over a hill: add → H + p, max/min → max/min(H, p), set → p
    hill = {"kind": "hill", "lat_deg": 0, "lon_deg": 0, "amplitude_m": 30.0, "sigma_m": 200.0}
    mesa = {
        "kind": "mesa",
        "lat_deg": 0,
        "lon_deg": 0,
        "height_m": 20.0,
        "radius_m": 300.0,
        "wall_width_m": 0.0,
    }
    c = direction(0, 0)
    e, _ = tangent_frame(c)
    u = rotate_towards(c, e, np.linspace(0.0, 290.0, 30) / R)
    base = single(hill).height(u)
    for blend, expected in [
        ("add", base + 20.0),
        ("max", np.maximum(base, 20.0)),
        ("min", np.minimum(base, 20.0)),
        ("set", np.full_like(base, 20.0)),
    ]:
        world = {"radius_m": R, "features": [hill, dict(mesa, blend=blend)]}
        np.testing.assert_allclose(reference_from_spec(world).height(u), expected, atol=1e-12)


def mixed_world() -> dict[str, Any]:
    """Every kind and every blend mode, overlapping."""
    return {
        "radius_m": R,
        "features": [
            {
                "kind": "noise",
                "amplitude_m": 6.0,
                "frequency_per_m": 0.003,
                "octaves": 4,
                "gain": 0.5,
                "seed": 7,
            },
            {"kind": "hill", "lat_deg": 10, "lon_deg": 20, "amplitude_m": 30.0, "sigma_m": 150.0},
            {
                "kind": "mesa",
                "blend": "max",
                "lat_deg": -10,
                "lon_deg": 25,
                "height_m": 20.0,
                "radius_m": 100.0,
                "wall_width_m": 40.0,
            },
            {
                "kind": "block",
                "blend": "smooth_max",
                "blend_width_m": 5.0,
                "lat_deg": 5,
                "lon_deg": -20,
                "height_m": 15.0,
                "half_x_m": 120.0,
                "half_y_m": 70.0,
                "corner_radius_m": 20.0,
                "wall_width_m": 30.0,
                "bearing_deg": 60.0,
            },
            {
                "kind": "crater",
                "blend": "set",
                "lat_deg": 12,
                "lon_deg": 2,
                "depth_m": 20.0,
                "radius_m": 150.0,
                "rim_height_m": 6.0,
                "rim_width_m": 60.0,
            },
            {
                "kind": "ridge",
                "blend": "smooth_min",
                "blend_width_m": 8.0,
                "lat0_deg": -30,
                "lon0_deg": -30,
                "lat1_deg": -5,
                "lon1_deg": 40,
                "height_m": 25.0,
                "half_width_m": 80.0,
                "profile": "round",
            },
            {
                "kind": "ridge",
                "blend": "min",
                "lat0_deg": -40,
                "lon0_deg": -30,
                "lat1_deg": 40,
                "lon1_deg": -10,
                "height_m": -25.0,
                "half_width_m": 80.0,
                "profile": "sharp",
            },
            {
                "kind": "mesa",
                "blend": "add",
                "lat_deg": 20,
                "lon_deg": -20,
                "height_m": 8.0,
                "radius_m": 60.0,
                "wall_width_m": 0.0,
            },
        ],
    }


def test_gradient_is_tangent() -> None:
    terrain = reference_from_spec(mixed_world())
    u = sample_directions(terrain, np.random.default_rng(2), 2000)
    grad = terrain.gradient(u)
    scale = np.linalg.norm(grad, axis=1).max()
    assert np.abs(np.einsum("ij,ij->i", grad, u)).max() < 1e-12 * scale


def test_gradient_matches_central_differences() -> None:
    # central differences on the sphere (tangent-plane steps, error O(h²)), away from steps and
    # creases by more than the stencil's reach
    terrain = reference_from_spec(mixed_world())
    rng = np.random.default_rng(3)
    u = sample_directions(terrain, rng, 3000)
    h = 1e-5
    ev = terrain.evaluate(u)
    keep = (ev.step_distance > 10 * h) & (ev.crease_distance > 10 * h)
    assert keep.mean() > 0.9  # the check still covers almost every direction
    u, grad = u[keep], ev.gradient[keep]
    assert np.abs(grad).max() > 100.0  # the field is far from flat there
    for _ in range(2):
        t = tangent_directions(rng, u)
        bad = difference_mismatch(terrain.height, grad, u, t, h, floor=1e-6)
        assert not bad.any(), u[bad][:5]


@pytest.mark.parametrize(
    "kind",
    [
        {"kind": "hill", "lat_deg": 0, "lon_deg": 0, "amplitude_m": 5.0, "sigma_m": 50.0},
        {
            "kind": "crater",
            "lat_deg": 0,
            "lon_deg": 0,
            "depth_m": 20.0,
            "radius_m": 150.0,
            "rim_height_m": 6.0,
            "rim_width_m": 60.0,
        },
    ],
)
def test_gradient_is_finite_and_zero_at_a_round_centre(kind: dict[str, Any]) -> None:
    # a hill top and a crater floor are smooth extrema: zero gradient exactly at the centre,
    # and finite (no 0/0 of ∇θ) right next to it
    terrain = single(kind)
    c = direction(0, 0)
    e, _ = tangent_frame(c)
    u = rotate_towards(c, e, np.array([0.0, 1e-12, 1e-9]))
    grad = terrain.gradient(u)
    assert np.all(np.isfinite(grad))
    np.testing.assert_array_equal(grad[0], 0.0)
    assert np.abs(grad[1:]).max() < 1e-3


def test_surface_points_are_at_r_plus_h() -> None:
    terrain = reference_from_spec(mixed_world())
    u = random_directions(np.random.default_rng(4), 500)
    pts = terrain.surface(u)
    np.testing.assert_allclose(np.linalg.norm(pts, axis=1), R + terrain.height(u), rtol=1e-14)
    np.testing.assert_allclose(pts / np.linalg.norm(pts, axis=1, keepdims=True), u, atol=1e-14)


def test_bad_direction_arrays_are_rejected() -> None:
    terrain = reference_from_spec(mixed_world())
    with pytest.raises(ValueError, match=r"\(N, 3\)"):
        terrain.height(np.zeros((5, 2)))
    with pytest.raises(ValueError, match="nonzero"):
        terrain.height(np.zeros((2, 3)))


def test_feature_rows_follow_the_core_layout() -> None:
    # notes/interface.md: kind, blend, k, c, c1, then the kind's parameters
    row = feature_row(
        {
            "kind": "block",
            "blend": "smooth_min",
            "blend_width_m": 3.0,
            "lat_deg": 10,
            "lon_deg": 20,
            "height_m": 1.0,
            "half_x_m": 2.0,
            "half_y_m": 3.0,
            "corner_radius_m": 0.5,
            "wall_width_m": 4.0,
            "bearing_deg": 0.0,
        }
    )
    np.testing.assert_allclose(row[:3], [2, 5, 3.0])
    np.testing.assert_allclose(row[3:6], direction(10, 20))
    np.testing.assert_allclose(row[6:], [0, 0, 0, 1.0, 2.0, 3.0, 0.5, 4.0, np.pi / 2, 0.0])
