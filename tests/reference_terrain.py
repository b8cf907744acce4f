"""Plain-numpy reference evaluator of the terrain, written only from docs/terrain.md.

It is deliberately independent of the C++ core: every function below mirrors one section of
docs/terrain.md ("Frame and directions", "The surface", one section per feature kind, "Gradient"),
favouring clarity over speed. Tests compare `globemill.field(spec)` against it.

Gradients are analytic: the gradient of `H(x / |x|)` with respect to `x` at a unit `x = u`, so
they are tangent to the unit sphere and measured in metres of height per radian of direction.
Each feature is evaluated as a profile value `p`, a weight `m` and their gradients, then folded
into the running height with its blend mode, exactly as the doc's update table says.

Besides height and gradient, the reference reports how far (in radians, first-order estimate
`|g| / |grad g|` of a switching quantity `g`) a direction is from places where the field is not
smooth: steps (walls of width 0, where H jumps) and creases (max/min ties and the kinks of the
formulas, where H is continuous but its gradient jumps). Two correct implementations may take
different branches within rounding error of those places, so comparisons skip them.

Array shapes: `dirs : (N, 3) float64` unit vectors; `height -> (N,)`; `gradient -> (N, 3)`.
"""

from __future__ import annotations

from collections.abc import Callable, Iterator, Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import NDArray

Array = NDArray[np.float64]

# ---------------------------------------------------------------------------------------------
# Core feature array layout (notes/interface.md "Core feature array")
# ---------------------------------------------------------------------------------------------

KIND_CODES: dict[str, int] = {"hill": 0, "mesa": 1, "block": 2, "crater": 3, "ridge": 4, "noise": 5}
BLEND_CODES: dict[str, int] = {
    "add": 0,
    "max": 1,
    "min": 2,
    "set": 3,
    "smooth_max": 4,
    "smooth_min": 5,
}
KIND_NAMES = {code: name for name, code in KIND_CODES.items()}
BLEND_NAMES = {code: name for name, code in BLEND_CODES.items()}

COL_KIND, COL_BLEND, COL_K = 0, 1, 2
COL_C = slice(3, 6)
COL_C1 = slice(6, 9)
N_COLS = 16

# e4 of the truncated Gaussian (docs/terrain.md "Two helper shapes")
E4 = float(np.exp(-8.0))
# offset of octave k is k times this vector (docs/terrain.md "noise")
OCTAVE_OFFSET = np.array([19.19, 47.11, 73.37])

_MASK64 = (1 << 64) - 1


# ---------------------------------------------------------------------------------------------
# Frame and directions
# ---------------------------------------------------------------------------------------------


def direction(lat_deg: float, lon_deg: float) -> Array:
    """u(φ, λ) = (cos φ sin λ, sin φ, cos φ cos λ); (3,) float64."""
    phi, lam = np.radians(lat_deg), np.radians(lon_deg)
    return np.array([np.cos(phi) * np.sin(lam), np.sin(phi), np.cos(phi) * np.cos(lam)])


def angle(u: Array, c: Array) -> Array:
    """θ(u, c) = atan2(|u × c|, u · c) for u : (N, 3) and c : (3,); (N,) radians."""
    return np.arctan2(np.linalg.norm(np.cross(u, c), axis=1), u @ c)


def tangent_frame(c: Array) -> tuple[Array, Array]:
    """(E, N) at unit c: N = normalize(Ŷ − (Ŷ·c) c) (Ẑ near the poles), E = N × c."""
    ref = np.array([0.0, 0.0, 1.0]) if abs(c[1]) > 1.0 - 1e-9 else np.array([0.0, 1.0, 0.0])
    n = ref - (ref @ c) * c
    n = n / np.linalg.norm(n)
    e = np.cross(n, c)
    return e, n


def _dot(a: Array, b: Array) -> Array:
    """Row-wise dot product of (N, 3) arrays (or (N, 3) with (3,))."""
    return np.einsum("ij,ij->i", a, np.broadcast_to(b, a.shape))


def _tangent(u: Array, v: Array) -> Array:
    """Component of v tangent to the unit sphere at u: v − (v·u) u."""
    return v - _dot(v, u)[:, None] * u


def _geodesic(u: Array, c: Array, radius: float) -> tuple[Array, Array, Array]:
    """Distance d = R θ(u, c) with ∇d and d ∇d (= ∇(d²/2), finite at the centre); (N,), (N, 3)."""
    sin_t = np.linalg.norm(np.cross(u, c), axis=1)
    theta = np.arctan2(sin_t, u @ c)
    towards_c = _tangent(u, np.broadcast_to(c, u.shape))  # c − (u·c) u, |.| = sin θ
    safe = np.where(sin_t > 0.0, sin_t, 1.0)
    # ∇θ = −(c − (u·c) u) / sin θ; zero where undefined (centre, antipode)
    grad_d = np.where((sin_t > 0.0)[:, None], -radius * towards_c / safe[:, None], 0.0)
    theta_over_sin = np.where(sin_t > 0.0, theta / safe, 1.0)
    d_grad_d = -(radius**2) * theta_over_sin[:, None] * towards_c
    return radius * theta, grad_d, d_grad_d


# ---------------------------------------------------------------------------------------------
# The surface: helper shapes and blends
# ---------------------------------------------------------------------------------------------


def truncated_gaussian(d: Array, sigma: float) -> tuple[Array, Array]:
    """G(d; σ) and dG/d(d²/2) (so that ∇G = that · d∇d); (N,), (N,)."""
    inside = d < 4.0 * sigma
    g = np.exp(-(d**2) / (2.0 * sigma**2))
    value = np.where(inside, (g - E4) / (1.0 - E4), 0.0)
    slope = np.where(inside, -g / (sigma**2 * (1.0 - E4)), 0.0)
    return value, slope


def falloff(t: Array) -> tuple[Array, Array]:
    """F(t) = 1 − 3t² + 2t³ on [0, 1], 1 below, 0 above, and F'(t); (N,), (N,)."""
    tc = np.clip(t, 0.0, 1.0)
    value = 1.0 - 3.0 * tc**2 + 2.0 * tc**3
    slope = np.where((t > 0.0) & (t < 1.0), -6.0 * tc + 6.0 * tc**2, 0.0)
    return value, slope


def wall(s: Array, a: float, w: float, grad_s: Array) -> tuple[Array, Array]:
    """Weight of a wall of width w at s = a: F((s − a) / w), or the step 1 if s ≤ a else 0."""
    if w == 0.0:
        return np.where(s <= a, 1.0, 0.0), np.zeros_like(grad_s)
    value, slope = falloff((s - a) / w)
    return value, (slope / w)[:, None] * grad_s


def smin(a: Array, ga: Array, b: Array, gb: Array, k: float) -> tuple[Array, Array]:
    """Polynomial smooth minimum smin_k(a, b) and its gradient (common practice)."""
    h = np.clip(0.5 + 0.5 * (b - a) / k, 0.0, 1.0)
    dh = np.where((h > 0.0) & (h < 1.0), 0.5 / k, 0.0)[:, None] * (gb - ga)
    value = b * (1.0 - h) + a * h - k * h * (1.0 - h)
    grad = gb * (1.0 - h)[:, None] + ga * h[:, None] + ((a - b) - k * (1.0 - 2.0 * h))[:, None] * dh
    return value, grad


def smax(a: Array, ga: Array, b: Array, gb: Array, k: float) -> tuple[Array, Array]:
    """smax_k(a, b) = −smin_k(−a, −b) and its gradient."""
    value, grad = smin(-a, -ga, -b, -gb, k)
    return -value, -grad


@dataclass
class Contribution:
    """One feature evaluated at N directions (profile p, weight m, gradients, crease margins)."""

    p: Array  # (N,) metres
    grad_p: Array  # (N, 3) metres per radian
    m: Array  # (N,) in [0, 1]
    grad_m: Array  # (N, 3) per radian
    step: Array  # (N,) radians to the nearest step of m (inf if none)
    crease: Array  # (N,) radians to the nearest gradient kink of p·m (inf if none)


def blend(mode: int, k: float, h: Array, gh: Array, c: Contribution) -> tuple[Array, Array, Array]:
    """Apply one feature: H ← H + m · (B − H) per the doc's table; returns (H, ∇H, tie margin).

    ∇(H + m (B − H)) = ∇H + (B − H) ∇m + m (∇B − ∇H); ∇ max/min follows the winner, ties keep H.
    The tie margin is the distance (radians) to where a max/min changes winner, inside the
    footprint (inf elsewhere and for the other modes).
    """
    p, gp, m, gm = c.p, c.grad_p, c.m, c.grad_m
    tie = np.full(h.shape, np.inf)
    if mode == BLEND_CODES["add"]:
        return h + m * p, gh + p[:, None] * gm + m[:, None] * gp, tie
    if mode in (BLEND_CODES["max"], BLEND_CODES["min"]):
        wins = p > h if mode == BLEND_CODES["max"] else p < h
        b = np.where(wins, p, h)
        gb = np.where(wins[:, None], gp, gh)
        slope = np.linalg.norm(gp - gh, axis=1)
        with np.errstate(divide="ignore", invalid="ignore"):
            gap = np.where(slope > 0.0, np.abs(p - h) / slope, np.where(p == h, 0.0, np.inf))
        tie = np.where(m > 0.0, gap, np.inf)
    elif mode == BLEND_CODES["set"]:
        b, gb = p, gp
    elif mode == BLEND_CODES["smooth_max"]:
        b, gb = smax(h, gh, p, gp, k)
    elif mode == BLEND_CODES["smooth_min"]:
        b, gb = smin(h, gh, p, gp, k)
    else:
        raise ValueError(f"unknown blend code {mode}")
    new_h = h + m * (b - h)
    new_g = gh + (b - h)[:, None] * gm + m[:, None] * (gb - gh)
    return new_h, new_g, tie


# ---------------------------------------------------------------------------------------------
# Feature kinds (one function per section of docs/terrain.md)
# ---------------------------------------------------------------------------------------------


def _none(n: int) -> Array:
    return np.full(n, np.inf)


def hill(u: Array, row: Array, radius: float) -> Contribution:
    """Gaussian hill or valley: p = A, m = G(R θ(u, c); σ)."""
    c, amplitude, sigma = row[COL_C], row[9], row[10]
    d, _, d_grad_d = _geodesic(u, c, radius)
    g, slope = truncated_gaussian(d, sigma)
    n = len(u)
    # G has a (small) crease where it reaches 0 at d = 4σ
    crease = np.abs(d - 4.0 * sigma) / radius
    return Contribution(
        np.full(n, amplitude), np.zeros((n, 3)), g, slope[:, None] * d_grad_d, _none(n), crease
    )


def mesa(u: Array, row: Array, radius: float) -> Contribution:
    """Flat-topped disc: p = h, m = F((d − a) / w), a step at d = a when w = 0."""
    c, height, a, w = row[COL_C], row[9], row[10], row[11]
    d, grad_d, _ = _geodesic(u, c, radius)
    m, gm = wall(d, a, w, grad_d)
    n = len(u)
    step = np.abs(d - a) / radius if w == 0.0 else _none(n)
    return Contribution(np.full(n, height), np.zeros((n, 3)), m, gm, step, _none(n))


def block_local(u: Array, row: Array, radius: float) -> tuple[Array, Array, Array, Array]:
    """Local coordinates x, y (metres) of the block and their gradients; (N,), (N,), (N, 3)×2."""
    c, heading = row[COL_C], row[14]
    e, n = tangent_frame(c)
    ax = np.cos(heading) * e + np.sin(heading) * n
    ay = -np.sin(heading) * e + np.cos(heading) * n
    uc = u @ c

    def coord(axis: Array) -> tuple[Array, Array]:
        ua = u @ axis
        # ∇ atan2(u·A, u·c) = ((u·c) A − (u·A) c) / ((u·A)² + (u·c)²), tangent at u already
        num = uc[:, None] * axis - ua[:, None] * c
        # u·A = u·c = 0 only 90° from the centre, far outside any valid block: any finite value
        den = ua**2 + uc**2
        den = np.where(den > 0.0, den, 1.0)
        return radius * np.arctan2(ua, uc), radius * num / den[:, None]

    x, gx = coord(ax)
    y, gy = coord(ay)
    return x, y, gx, gy


def block_sdf(u: Array, row: Array, radius: float) -> tuple[Array, Array]:
    """Signed distance s (metres) to the block's rounded rectangle and ∇s; (N,), (N, 3)."""
    hx, hy, r = row[10], row[11], row[12]
    x, y, gx, gy = block_local(u, row, radius)
    qx, qy = np.abs(x) - (hx - r), np.abs(y) - (hy - r)
    # d|x|/dx; at x = 0 (a crease of s inside the block only) take +1
    gqx = np.where(x >= 0.0, 1.0, -1.0)[:, None] * gx
    gqy = np.where(y >= 0.0, 1.0, -1.0)[:, None] * gy
    px, py = np.maximum(qx, 0.0), np.maximum(qy, 0.0)
    outer = np.hypot(px, py)
    s = outer + np.minimum(np.maximum(qx, qy), 0.0) - r
    safe = np.where(outer > 0.0, outer, 1.0)
    grad_outer = (px[:, None] * gqx + py[:, None] * gqy) / safe[:, None]
    grad_inner = np.where((qx >= qy)[:, None], gqx, gqy)
    grad_s = np.where((outer > 0.0)[:, None], grad_outer, grad_inner)
    return s, grad_s


def block(u: Array, row: Array, radius: float) -> Contribution:
    """Oriented rounded rectangle: p = h, m = F(s / w), a step at s = 0 when w = 0."""
    height, w = row[9], row[13]
    s, grad_s = block_sdf(u, row, radius)
    m, gm = wall(s, 0.0, w, grad_s)
    n = len(u)
    if w == 0.0:
        slope = np.maximum(np.linalg.norm(grad_s, axis=1), 1e-300)
        step = np.abs(s) / slope
    else:
        step = _none(n)
    return Contribution(np.full(n, height), np.zeros((n, 3)), m, gm, step, _none(n))


def crater(u: Array, row: Array, radius: float) -> Contribution:
    """Bowl −D + (D + hr)(d/a)² inside d ≤ a (m = 1), rim hr · F((d − a)/wr) outside."""
    c, depth, a, rim_h, rim_w = row[COL_C], row[9], row[10], row[11], row[12]
    d, grad_d, d_grad_d = _geodesic(u, c, radius)
    inside = d <= a
    p = np.where(inside, -depth + (depth + rim_h) * (d / a) ** 2, rim_h)
    gp = np.where(inside[:, None], (2.0 * (depth + rim_h) / a**2) * d_grad_d, 0.0)
    f, f_slope = falloff((d - a) / rim_w)
    beyond = d >= a + rim_w
    m = np.where(inside, 1.0, np.where(beyond, 0.0, f))
    gm = np.where((~inside & ~beyond)[:, None], (f_slope / rim_w)[:, None] * grad_d, 0.0)
    p = np.where(beyond, 0.0, p)
    # the bowl meets the rim's flat top at d = a with a change of slope
    crease = np.abs(d - a) / radius
    return Contribution(p, gp, m, gm, _none(len(u)), crease)


def ridge_distance(u: Array, row: Array, radius: float) -> tuple[Array, Array, Array]:
    """δ (metres) from u to the arc c₀→c₁, ∇δ, and the crease margin of the min() (radians)."""
    c0, c1 = row[COL_C], row[COL_C1]
    pole = np.cross(c0, c1)
    pole = pole / np.linalg.norm(pole)
    un = u @ pole
    q = u - un[:, None] * pole
    on_arc = (np.cross(c0, q) @ pole >= 0.0) & (np.cross(q, c1) @ pole >= 0.0)
    # on the arc: δ = R asin(min(1, |u·n|)), ∇δ = R sign(u·n) (n − (u·n) u) / sqrt(1 − (u·n)²)
    s_abs = np.minimum(1.0, np.abs(un))
    delta_arc = radius * np.arcsin(s_abs)
    cos_off = np.sqrt(np.maximum(1.0 - un**2, 0.0))
    away = _tangent(u, np.broadcast_to(pole, u.shape))
    safe = np.where(cos_off > 0.0, cos_off, 1.0)
    grad_arc = (radius * np.sign(un) / safe)[:, None] * away
    # off the arc: δ = R min(θ(u, c₀), θ(u, c₁))
    d0, g0, _ = _geodesic(u, c0, radius)
    d1, g1, _ = _geodesic(u, c1, radius)
    nearer0 = d0 <= d1
    delta_end = np.where(nearer0, d0, d1)
    grad_end = np.where(nearer0[:, None], g0, g1)
    delta = np.where(on_arc, delta_arc, delta_end)
    grad = np.where(on_arc[:, None], grad_arc, grad_end)
    # |∇(θ₀ − θ₁)| ≤ 2, so |θ₀ − θ₁| / 2 bounds the distance to the tie from below
    tie = np.where(on_arc, np.inf, np.abs(d0 - d1) / (2.0 * radius))
    return delta, grad, tie


def ridge(u: Array, row: Array, radius: float) -> Contribution:
    """Great-circle arc: p = h, m = K(δ / b) with K round (1 − s²)² or sharp 1 − s."""
    height, b, sharp = row[9], row[10], row[11] == 1.0
    delta, grad_delta, tie = ridge_distance(u, row, radius)
    s = delta / b
    inside = s < 1.0
    if sharp:
        k, k_slope = 1.0 - s, np.full(s.shape, -1.0)
    else:
        k, k_slope = (1.0 - s**2) ** 2, -4.0 * s * (1.0 - s**2)
    m = np.where(inside, k, 0.0)
    gm = np.where(inside[:, None], (k_slope / b)[:, None] * grad_delta, 0.0)
    n = len(u)
    crease = np.where(delta < b, tie, np.inf)
    if sharp:
        # the sharp profile creases along the crest (δ = 0) and at its foot (δ = b)
        crease = np.minimum(crease, np.minimum(delta, np.abs(delta - b)) / radius)
    return Contribution(np.full(n, height), np.zeros((n, 3)), m, gm, _none(n), crease)


# --- noise -----------------------------------------------------------------------------------


def splitmix64(seed: int) -> Iterator[int]:
    """SplitMix64 (Steele, Lea & Flood 2014) started at state = seed; 64-bit wrap-around."""
    state = seed & _MASK64
    while True:
        state = (state + 0x9E3779B97F4A7C15) & _MASK64
        z = state
        z = ((z ^ (z >> 30)) * 0xBF58476D1CE4E5B9) & _MASK64
        z = ((z ^ (z >> 27)) * 0x94D049BB133111EB) & _MASK64
        yield z ^ (z >> 31)


def permutation(seed: int) -> NDArray[np.int64]:
    """perm = [0..255] shuffled by Fisher–Yates with j = next() mod (i + 1), i = 255 … 1."""
    perm = list(range(256))
    rng = splitmix64(seed)
    for i in range(255, 0, -1):
        j = next(rng) % (i + 1)
        perm[i], perm[j] = perm[j], perm[i]
    return np.array(perm, dtype=np.int64)


def perlin_grad(h: NDArray[np.int64], x: Array, y: Array, z: Array) -> Array:
    """Perlin's grad(): h &= 15; a = x if h < 8 else y; b = y if h < 4 else (x if h in {12, 14}
    else z); ±a ± b with −a when h & 1 and −b when h & 2."""
    h = h & 15
    a = np.where(h < 8, x, y)
    b = np.where(h < 4, y, np.where((h == 12) | (h == 14), x, z))
    return np.where(h & 1, -a, a) + np.where(h & 2, -b, b)


def fade(t: Array) -> tuple[Array, Array]:
    """f(t) = 6t⁵ − 15t⁴ + 10t³ and f'(t) = 30t⁴ − 60t³ + 30t²."""
    return t * t * t * (t * (t * 6.0 - 15.0) + 10.0), 30.0 * t * t * (t * (t - 2.0) + 1.0)


def _lerp(t: Array, a: Array, b: Array) -> Array:
    """Perlin's lerp(t, a, b) = a + t (b − a)."""
    return a + t * (b - a)


class PerlinNoise:
    """Perlin's improved gradient noise (Perlin 2002) over a 256-entry permutation."""

    def __init__(self, perm: NDArray[np.int64]) -> None:
        perm = np.asarray(perm, dtype=np.int64)
        if sorted(perm.tolist()) != list(range(256)):
            raise ValueError("perm must be a permutation of 0..255")
        self.table = np.concatenate([perm, perm])  # P[i] = perm[i mod 256], i in [0, 512)

    @classmethod
    def from_seed(cls, seed: int) -> PerlinNoise:
        return cls(permutation(seed))

    def value_and_gradient(self, pts: Array) -> tuple[Array, Array]:
        """P and ∇P at points (N, 3); (N,), (N, 3)."""
        pts = np.asarray(pts, dtype=np.float64)
        floor = np.floor(pts)
        cell = np.mod(floor.astype(np.int64), 256)  # X = ⌊x⌋ mod 256
        frac = pts - floor  # x − ⌊x⌋
        w, dw = fade(frac)
        table = self.table
        n = len(pts)
        basis = np.eye(3)
        corner_value: dict[tuple[int, int, int], Array] = {}
        grad = np.zeros((n, 3))
        for i in (0, 1):
            for j in (0, 1):
                for k in (0, 1):
                    corner = np.array([i, j, k])
                    h = table[table[table[cell[:, 0] + i] + cell[:, 1] + j] + cell[:, 2] + k]
                    rel = frac - corner
                    g = perlin_grad(h, rel[:, 0], rel[:, 1], rel[:, 2])
                    corner_value[i, j, k] = g
                    # grad() is linear in (x, y, z): its gradient vector from the unit axes
                    gvec = np.stack(
                        [perlin_grad(h, *np.broadcast_to(e[:, None], (3, n))) for e in basis],
                        axis=1,
                    )
                    # ∂/∂x of the trilinear weight Π (f(t) towards 1, 1 − f(t) towards 0)
                    wts = np.where(corner == 1, w, 1.0 - w)
                    dwts = np.where(corner == 1, dw, -dw)
                    dweight = np.stack(
                        [
                            dwts[:, 0] * wts[:, 1] * wts[:, 2],
                            wts[:, 0] * dwts[:, 1] * wts[:, 2],
                            wts[:, 0] * wts[:, 1] * dwts[:, 2],
                        ],
                        axis=1,
                    )
                    weight = wts[:, 0] * wts[:, 1] * wts[:, 2]
                    grad += dweight * g[:, None] + weight[:, None] * gvec
        # the value by the reference implementation's nested lerps (same sum, same rounding)
        fu, fv, fw = w[:, 0], w[:, 1], w[:, 2]
        c = corner_value
        value = _lerp(
            fw,
            _lerp(fv, _lerp(fu, c[0, 0, 0], c[1, 0, 0]), _lerp(fu, c[0, 1, 0], c[1, 1, 0])),
            _lerp(fv, _lerp(fu, c[0, 0, 1], c[1, 0, 1]), _lerp(fu, c[0, 1, 1], c[1, 1, 1])),
        )
        return value, grad

    def __call__(self, pts: Array) -> Array:
        return self.value_and_gradient(pts)[0]


def noise(u: Array, row: Array, radius: float) -> Contribution:
    """p = A Σ g^k P(2^k f R u + k (19.19, 47.11, 73.37)), m = 1 everywhere."""
    amplitude, freq, octaves, gain, seed = row[9], row[10], int(row[11]), row[12], int(row[13])
    perlin = PerlinNoise.from_seed(seed)
    n = len(u)
    p = np.zeros(n)
    gp = np.zeros((n, 3))
    for k in range(octaves):
        scale = 2.0**k * freq * radius
        value, grad = perlin.value_and_gradient(scale * u + k * OCTAVE_OFFSET)
        p += amplitude * gain**k * value
        gp += (amplitude * gain**k * scale) * grad
    # x_k depends on x / |x|: the chain rule through the normalisation keeps the tangent part
    return Contribution(p, _tangent(u, gp), np.ones(n), np.zeros((n, 3)), _none(n), _none(n))


KINDS = {0: hill, 1: mesa, 2: block, 3: crater, 4: ridge, 5: noise}


# ---------------------------------------------------------------------------------------------
# The whole field
# ---------------------------------------------------------------------------------------------


@dataclass
class Evaluation:
    """Height, gradient and smoothness margins at N directions."""

    height: Array  # (N,) metres above R
    gradient: Array  # (N, 3) metres per radian, tangent
    step_distance: Array  # (N,) radians to the nearest step (wall of width 0)
    crease_distance: Array  # (N,) radians to the nearest max/min tie or kink


def unit_directions(dirs: Array) -> Array:
    """Check dirs is (N, 3) with nonzero finite rows; return them normalised."""
    dirs = np.asarray(dirs, dtype=np.float64)
    if dirs.ndim != 2 or dirs.shape[1] != 3:
        raise ValueError(f"directions must have shape (N, 3), got {dirs.shape}")
    norm = np.linalg.norm(dirs, axis=1)
    if not np.all(np.isfinite(norm) & (norm > 0.0)):
        raise ValueError("directions must be finite and nonzero")
    return dirs / norm[:, None]


class ReferenceTerrain:
    """H(u) of docs/terrain.md from a radius and a core feature array (n, 16)."""

    def __init__(self, radius_m: float, features: NDArray[np.float64]) -> None:
        features = np.asarray(features, dtype=np.float64).reshape(-1, N_COLS)
        self.radius_m = float(radius_m)
        self.features = features

    def evaluate(self, dirs: Array) -> Evaluation:
        u = unit_directions(dirs)
        n = len(u)
        h = np.zeros(n)
        gh = np.zeros((n, 3))
        step = np.full(n, np.inf)
        crease = np.full(n, np.inf)
        for row in self.features:
            contribution = KINDS[int(row[COL_KIND])](u, row, self.radius_m)
            h, gh, tie = blend(int(row[COL_BLEND]), float(row[COL_K]), h, gh, contribution)
            step = np.minimum(step, contribution.step)
            crease = np.minimum(crease, np.minimum(tie, contribution.crease))
        return Evaluation(h, gh, step, crease)

    def height(self, dirs: Array) -> Array:
        """H(u) in metres above R; (N,)."""
        return self.evaluate(dirs).height

    def gradient(self, dirs: Array) -> Array:
        """∇H(u), tangent, metres per radian; (N, 3)."""
        return self.evaluate(dirs).gradient

    def surface(self, dirs: Array) -> Array:
        """Ground points S(u) = (R + H(u)) u; (N, 3)."""
        u = unit_directions(dirs)
        return (self.radius_m + self.height(u))[:, None] * u

    def wall_features(self) -> list[int]:
        """Indices of the features with a step (mesa or block with wall_width_m == 0)."""
        out = []
        for i, row in enumerate(self.features):
            kind = int(row[COL_KIND])
            if (kind == KIND_CODES["mesa"] and row[11] == 0.0) or (
                kind == KIND_CODES["block"] and row[13] == 0.0
            ):
                out.append(i)
        return out

    def smooth_mask(self, dirs: Array, margin: float = 1e-6) -> NDArray[np.bool_]:
        """True where no step, tie or kink lies within `margin` radians: both H and ∇H are
        unambiguous there."""
        ev = self.evaluate(dirs)
        return (ev.step_distance > margin) & (ev.crease_distance > margin)

    def step_mask(self, dirs: Array, margin: float = 1e-6) -> NDArray[np.bool_]:
        """True where no step lies within `margin` radians: H itself is unambiguous there."""
        return self.evaluate(dirs).step_distance > margin


# ---------------------------------------------------------------------------------------------
# Spec dicts → core feature rows (notes/interface.md), independent of globemill's spec layer
# ---------------------------------------------------------------------------------------------


def feature_row(feature: Mapping[str, Any]) -> Array:
    """One spec feature dict (as in a TOML [[features]] table) → its (16,) core row."""
    f = dict(feature)
    row = np.zeros(N_COLS)
    kind = f["kind"]
    row[COL_KIND] = KIND_CODES[kind]
    row[COL_BLEND] = BLEND_CODES[f.get("blend", "add")]
    row[COL_K] = f.get("blend_width_m", 0.0) if f.get("blend", "add").startswith("smooth") else 0.0
    if kind not in ("ridge", "noise"):
        row[COL_C] = direction(f["lat_deg"], f["lon_deg"])
    if kind == "hill":
        row[9:11] = f["amplitude_m"], f["sigma_m"]
    elif kind == "mesa":
        row[9:12] = f["height_m"], f["radius_m"], f["wall_width_m"]
    elif kind == "block":
        row[9:14] = (
            f["height_m"],
            f["half_x_m"],
            f["half_y_m"],
            f["corner_radius_m"],
            f["wall_width_m"],
        )
        # bearing clockwise from north; the heading psi of docs/terrain.md is 90 - bearing
        row[14] = np.radians(90.0 - f["bearing_deg"])
    elif kind == "crater":
        row[9:13] = f["depth_m"], f["radius_m"], f["rim_height_m"], f["rim_width_m"]
    elif kind == "ridge":
        row[COL_C] = direction(f["lat0_deg"], f["lon0_deg"])
        row[COL_C1] = direction(f["lat1_deg"], f["lon1_deg"])
        row[9:12] = f["height_m"], f["half_width_m"], 1.0 if f.get("profile") == "sharp" else 0.0
    elif kind == "noise":
        row[9:11] = f["amplitude_m"], f["frequency_per_m"]
        row[11:14] = f.get("octaves", 4), f.get("gain", 0.5), f.get("seed", 0)
    else:
        raise ValueError(f"unknown kind {kind!r}")
    return row


def reference_from_spec(spec: Mapping[str, Any]) -> ReferenceTerrain:
    """ReferenceTerrain of a spec dict (the structure of a TOML/JSON world spec)."""
    rows = [feature_row(f) for f in spec.get("features", [])]
    features = np.array(rows) if rows else np.zeros((0, N_COLS))
    return ReferenceTerrain(float(spec["radius_m"]), features)


# ---------------------------------------------------------------------------------------------
# Sampling helpers for the tests
# ---------------------------------------------------------------------------------------------


def random_directions(rng: np.random.Generator, n: int) -> Array:
    """n directions uniform on the sphere (normalised Gaussian vectors); (n, 3)."""
    v = rng.normal(size=(n, 3))
    return v / np.linalg.norm(v, axis=1, keepdims=True)


def directions_near(rng: np.random.Generator, centre: Array, max_angle: float, n: int) -> Array:
    """n directions uniform in angle up to max_angle (radians) around a unit centre; (n, 3)."""
    e, north = tangent_frame(centre)
    ang = rng.uniform(0.0, max_angle, n)
    az = rng.uniform(0.0, 2.0 * np.pi, n)
    t = np.cos(az)[:, None] * e + np.sin(az)[:, None] * north
    return np.cos(ang)[:, None] * centre + np.sin(ang)[:, None] * t


def feature_reach(row: Array, radius: float) -> float:
    """Angular radius (radians) of a feature's footprint around its centre (π for noise)."""
    kind = int(row[COL_KIND])
    if kind == KIND_CODES["hill"]:
        reach = 4.0 * row[10]
    elif kind == KIND_CODES["mesa"]:
        reach = row[10] + row[11]
    elif kind == KIND_CODES["block"]:
        reach = float(np.hypot(row[10], row[11])) + row[13]
    elif kind == KIND_CODES["crater"]:
        reach = row[10] + row[12]
    elif kind == KIND_CODES["ridge"]:
        reach = row[10]
    else:
        return float(np.pi)
    return float(min(reach / radius, np.pi))


def sample_directions(terrain: ReferenceTerrain, rng: np.random.Generator, n: int) -> Array:
    """Directions that exercise every feature: a third uniform, the rest near each feature
    (within 1.3 × its reach; along the arc for a ridge); (≈n, 3)."""
    rows = terrain.features
    parts = [random_directions(rng, max(n // 3, 1))]
    per = max((n - n // 3) // max(len(rows), 1), 1)
    for row in rows:
        reach = 1.3 * feature_reach(row, terrain.radius_m)
        if int(row[COL_KIND]) == KIND_CODES["ridge"]:
            c0, c1 = row[COL_C], row[COL_C1]
            arc = np.arctan2(np.linalg.norm(np.cross(c0, c1)), c0 @ c1)
            t = rng.uniform(-0.2, 1.2, per)[:, None] * arc
            # slerp along the great circle, a little beyond both ends
            along = (np.sin(arc - t) * c0 + np.sin(t) * c1) / np.sin(arc)
            along /= np.linalg.norm(along, axis=1, keepdims=True)
            pole = np.cross(c0, c1) / np.linalg.norm(np.cross(c0, c1))
            off = rng.uniform(-reach, reach, per)[:, None]
            parts.append(np.cos(off) * along + np.sin(off) * pole)
        elif int(row[COL_KIND]) == KIND_CODES["noise"]:
            parts.append(random_directions(rng, per))
        else:
            parts.append(directions_near(rng, row[COL_C], reach, per))
    return np.concatenate(parts)


def tangent_directions(rng: np.random.Generator, u: Array) -> Array:
    """One random unit tangent vector at each unit u; (N, 3)."""
    t = _tangent(u, rng.normal(size=u.shape))
    return t / np.linalg.norm(t, axis=1, keepdims=True)


def central_difference(height: Callable[[Array], Array], u: Array, t: Array, h: float) -> Array:
    """(H(u_+) − H(u_−)) / 2h with u_± = normalize(u ± h t), steps in the tangent plane; (N,).

    Central differences: the derivative of H along t with error O(h²) (normalising keeps the
    stencil symmetric, so the error stays second order)."""
    plus = u + h * t
    minus = u - h * t
    plus /= np.linalg.norm(plus, axis=1, keepdims=True)
    minus /= np.linalg.norm(minus, axis=1, keepdims=True)
    return (height(plus) - height(minus)) / (2.0 * h)


def difference_mismatch(
    height: Callable[[Array], Array], grad: Array, u: Array, t: Array, h: float, floor: float
) -> NDArray[np.bool_]:
    """True where the gradient along t disagrees with central differences; (N,).

    Central differences have error C h² + O(h⁴), so by Richardson's argument the error of the
    half-step estimate is about |fd(h) − fd(h/2)| / 3; twice that difference (6× margin, which
    also covers the O(h) error of a stencil straddling a curvature jump such as the ends of F)
    plus an absolute floor for rounding is the allowed disagreement. Creases (gradient jumps)
    must be kept further than h from u by the caller.
    """
    along = _dot(grad, t)
    fd_h = central_difference(height, u, t, h)
    fd_half = central_difference(height, u, t, 0.5 * h)
    return np.abs(along - fd_half) > 2.0 * np.abs(fd_h - fd_half) + floor
