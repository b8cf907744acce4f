"""Peer methods for the meshing benchmark, in plain numpy (no globemill code).

- :func:`uniform_icosphere` — method (a): the icosahedron split 1-to-4 ``level`` times, every
  vertex moved to the ground ``S(u) = (R + H(u)) u``.
- :func:`textbook_refine` — method (c): the textbook adaptive mesher. Start from the icosahedron
  on the ground; test the midpoint of every edge (the distance between the chord midpoint ``m``
  and the ground point above it, ``| |m| - R - H(m/|m|) |``); split every triangle with an
  offending edge 1-to-4 ("red"); repeat until no edge offends. Neighbours of split triangles are
  kept at most one level apart (a coarser neighbour of a triangle about to be split is split
  first), and the T-junctions left at the end are closed by 2- and 3-way ("green") splits —
  red-green refinement after Bank, Sherman & Weiser (1983), with the green triangles made only
  once, at the end, so they are never split again.

Guard: an edge shorter than ``min_edge_m`` along the ground (``R * angle``) is not split. Without
it the midpoint test never ends at a vertical wall: an edge across a wall of height ``h`` keeps a
midpoint offset of about ``h / 2`` however short it gets. Default: the tolerance itself.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Protocol

import numpy as np
from numpy.typing import NDArray
from scipy.spatial import ConvexHull

FloatArray = NDArray[np.float64]
IntArray = NDArray[np.int64]


class Field(Protocol):
    def height(self, dirs: FloatArray) -> FloatArray: ...


def icosahedron() -> tuple[FloatArray, IntArray]:
    """Unit icosahedron: 12 vertices (cyclic permutations of (0, +-1, +-phi), normalised) and 20
    triangles, counter-clockwise seen from outside (faces from scipy's convex hull)."""
    phi = (1.0 + 5.0**0.5) / 2.0
    v = []
    for s1 in (-1.0, 1.0):
        for s2 in (-1.0, 1.0):
            v += [(0.0, s1, s2 * phi), (s1, s2 * phi, 0.0), (s2 * phi, 0.0, s1)]
    verts = np.array(v) / np.linalg.norm(v[0])
    faces = ConvexHull(verts).simplices.astype(np.int64)
    return verts, _orient_outward(verts, faces)


def _orient_outward(v: FloatArray, f: IntArray) -> IntArray:
    a, b, c = v[f[:, 0]], v[f[:, 1]], v[f[:, 2]]
    flip = np.einsum("ij,ij->i", np.cross(b - a, c - a), a + b + c) < 0
    f = f.copy()
    f[flip] = f[flip][:, [0, 2, 1]]
    return f


def _edge_keys(tri: IntArray) -> IntArray:
    """(T, 3) keys of the edges (v0 v1), (v1 v2), (v2 v0), endpoint order canonical."""
    a = tri
    b = np.roll(tri, -1, axis=1)
    lo, hi = np.minimum(a, b), np.maximum(a, b)
    return (lo << 32) | hi


def _ground(field: Field, radius_m: float, dirs: FloatArray) -> FloatArray:
    return (radius_m + np.asarray(field.height(dirs), dtype=np.float64))[:, None] * dirs


def _split_all(dirs: FloatArray, tri: IntArray) -> tuple[FloatArray, IntArray]:
    """Split every triangle 1-to-4 at the edge midpoints, projected to the unit sphere."""
    keys = _edge_keys(tri)
    ukeys, inv = np.unique(keys.ravel(), return_inverse=True)
    lo, hi = ukeys >> 32, ukeys & 0xFFFFFFFF
    mid = dirs[lo] + dirs[hi]
    mid /= np.linalg.norm(mid, axis=1, keepdims=True)
    m = dirs.shape[0] + inv.reshape(-1, 3)
    a, b, c = tri[:, 0], tri[:, 1], tri[:, 2]
    m0, m1, m2 = m[:, 0], m[:, 1], m[:, 2]
    new = np.concatenate(
        [np.stack(x, axis=1) for x in ((a, m0, m2), (m0, b, m1), (m2, m1, c), (m0, m1, m2))]
    )
    return np.concatenate([dirs, mid]), new


def uniform_icosphere(field: Field, radius_m: float, level: int) -> tuple[FloatArray, IntArray]:
    """Method (a): ``20 * 4**level`` triangles, vertices on the ground.

    Returns vertices (V, 3) float64 and triangles (T, 3) int64, counter-clockwise from outside.
    """
    dirs, tri = icosahedron()
    for _ in range(level):
        dirs, tri = _split_all(dirs, tri)
    return _ground(field, float(radius_m), dirs), tri


@dataclass
class _EdgeTable:
    """Every edge ever tested, sorted by key: midpoint ground point, its offset, its vertex."""

    keys: IntArray = field(default_factory=lambda: np.empty(0, np.int64))
    point: FloatArray = field(default_factory=lambda: np.empty((0, 3)))
    offset: FloatArray = field(default_factory=lambda: np.empty(0))
    vertex: IntArray = field(default_factory=lambda: np.empty(0, np.int64))

    def find(self, keys: IntArray) -> tuple[IntArray, NDArray[np.bool_]]:
        if self.keys.size == 0:
            return np.zeros(keys.size, np.int64), np.zeros(keys.size, dtype=bool)
        pos = np.minimum(np.searchsorted(self.keys, keys), self.keys.size - 1)
        return pos, self.keys[pos] == keys

    def add(self, keys: IntArray, point: FloatArray, offset: FloatArray) -> None:
        k = np.concatenate([self.keys, keys])
        order = np.argsort(k, kind="stable")
        self.keys = k[order]
        self.point = np.concatenate([self.point, point])[order]
        self.offset = np.concatenate([self.offset, offset])[order]
        self.vertex = np.concatenate([self.vertex, np.full(keys.size, -1, np.int64)])[order]


def textbook_refine(
    field: Field,
    radius_m: float,
    tolerance_m: float,
    *,
    start_level: int = 0,
    min_edge_m: float | None = None,
    max_triangles: int = 20_000_000,
) -> tuple[FloatArray, IntArray, dict[str, Any]]:
    """Method (c): midpoint-tested red-green refinement (see the module docstring).

    Returns vertices (V, 3) float64 on the ground, triangles (T, 3) int64 counter-clockwise
    from outside (closed, no T-junctions), and a dict of counts (rounds, tested edges).
    """
    R = float(radius_m)
    tol = float(tolerance_m)
    min_angle = (tol if min_edge_m is None else float(min_edge_m)) / R
    dirs, tri = icosahedron()
    for _ in range(start_level):
        dirs, tri = _split_all(dirs, tri)
    pos = _ground(field, R, dirs)
    parent = np.full((dirs.shape[0], 2), -1, dtype=np.int64)  # edge a vertex was made on
    table = _EdgeTable()
    rounds = 0
    while True:
        rounds += 1
        keys = _edge_keys(tri)
        ukeys, inv = np.unique(keys.ravel(), return_inverse=True)
        inv = inv.reshape(-1, 3)
        _, found = table.find(ukeys)
        new = ukeys[~found]
        if new.size:
            lo, hi = new >> 32, new & 0xFFFFFFFF
            chord_mid = 0.5 * (pos[lo] + pos[hi])
            m_dir = chord_mid / np.linalg.norm(chord_mid, axis=1, keepdims=True)
            ground = _ground(field, R, m_dir)
            off = np.abs(np.linalg.norm(chord_mid, axis=1) - np.linalg.norm(ground, axis=1))
            ang = np.arctan2(
                np.linalg.norm(np.cross(dirs[lo], dirs[hi]), axis=1),
                np.einsum("ij,ij->i", dirs[lo], dirs[hi]),
            )
            off = np.where(ang < min_angle, 0.0, off)  # the wall guard: never split
            table.add(new, ground, off)
        where, _ = table.find(ukeys)
        offends = table.offset[where] > tol
        marked = offends[inv].any(axis=1)
        if not marked.any():
            break
        marked = _close_one_irregular(tri, marked, ukeys, inv, parent)
        if tri.shape[0] + 3 * int(marked.sum()) > max_triangles:
            raise RuntimeError(f"textbook refinement exceeds {max_triangles} triangles")
        # midpoint vertices of the edges of marked triangles
        mk = keys[marked]
        need, _ = table.find(np.unique(mk.ravel()))
        fresh = need[table.vertex[need] < 0]
        base = pos.shape[0]
        table.vertex[fresh] = base + np.arange(fresh.size)
        pos = np.concatenate([pos, table.point[fresh]])
        dirs = np.concatenate(
            [dirs, table.point[fresh] / np.linalg.norm(table.point[fresh], axis=1, keepdims=True)]
        )
        fk = table.keys[fresh]
        parent = np.concatenate([parent, np.stack([fk >> 32, fk & 0xFFFFFFFF], axis=1)])
        w, _ = table.find(mk.ravel())
        m = table.vertex[w].reshape(-1, 3)
        t = tri[marked]
        a, b, c = t[:, 0], t[:, 1], t[:, 2]
        m0, m1, m2 = m[:, 0], m[:, 1], m[:, 2]
        children = np.concatenate(
            [np.stack(x, axis=1) for x in ((a, m0, m2), (m0, b, m1), (m2, m1, c), (m0, m1, m2))]
        )
        tri = np.concatenate([tri[~marked], children])
    out = _green_closure(tri, table, pos)
    info = {"rounds": rounds, "tested_edges": int(table.keys.size)}
    return pos, out, info


def _close_one_irregular(
    tri: IntArray,
    marked: NDArray[np.bool_],
    ukeys: IntArray,
    inv: IntArray,
    parent: IntArray,
) -> NDArray[np.bool_]:
    """Add to ``marked`` every coarser neighbour that must be split first.

    An edge (x, y) of a marked triangle that is half of a coarser edge (p, q) (x the midpoint
    of (p, q), y one of p, q) which is still an edge of the mesh belongs to a neighbour one level
    coarser; splitting the marked triangle would put two hanging vertices on that neighbour's
    edge, so the neighbour is split too. Repeated until nothing changes.
    """
    # owner triangles of each unique edge (at most two)
    flat_t = np.repeat(np.arange(tri.shape[0]), 3)
    order = np.argsort(inv.ravel(), kind="stable")
    sorted_e = inv.ravel()[order]
    first = np.searchsorted(sorted_e, np.arange(ukeys.size))
    count = np.searchsorted(sorted_e, np.arange(ukeys.size), side="right") - first
    own0 = flat_t[order][first]
    own1 = np.where(count > 1, flat_t[order][np.minimum(first + 1, order.size - 1)], own0)
    marked = marked.copy()
    frontier = np.flatnonzero(marked)
    while frontier.size:
        t = tri[frontier]
        x = t.ravel()
        y = np.roll(t, -1, axis=1).ravel()
        coarse: list[IntArray] = []
        for mid, end in ((x, y), (y, x)):
            pa, pb = parent[mid, 0], parent[mid, 1]
            half = (pa >= 0) & ((end == pa) | (end == pb))
            lo, hi = np.minimum(pa[half], pb[half]), np.maximum(pa[half], pb[half])
            coarse.append((lo << 32) | hi)
        ck = np.concatenate(coarse)
        pos = np.searchsorted(ukeys, ck)
        pos = np.minimum(pos, ukeys.size - 1)
        hit = pos[ukeys[pos] == ck]
        owners = np.unique(np.concatenate([own0[hit], own1[hit]]))
        frontier = owners[~marked[owners]]
        marked[frontier] = True
    return marked


def _green_closure(tri: IntArray, table: _EdgeTable, pos: FloatArray) -> IntArray:
    """Close the hanging vertices: 1 split edge -> 2 triangles, 2 -> 3, 3 -> 4."""
    keys = _edge_keys(tri)
    w, found = table.find(keys.ravel())
    mid = np.where(found, table.vertex[w], -1).reshape(-1, 3)
    split = mid >= 0
    # 1-irregular: the halves of a split edge are not split themselves
    for j in range(3):
        s = np.flatnonzero(split[:, j])
        a, b, m = tri[s, j], tri[s, (j + 1) % 3], mid[s, j]
        for u, v in ((a, m), (m, b)):
            hw, hf = table.find((np.minimum(u, v) << 32) | np.maximum(u, v))
            if np.any(hf & (table.vertex[hw] >= 0)):
                raise RuntimeError("internal: an edge carries two hanging vertices")
    n = split.sum(axis=1)
    out = [tri[n == 0]]

    def rotate(sel: IntArray, r: IntArray) -> tuple[IntArray, ...]:
        idx = (r[:, None] + np.arange(3)[None, :]) % 3
        t = np.take_along_axis(tri[sel], idx, axis=1)
        m = np.take_along_axis(mid[sel], idx, axis=1)
        return t[:, 0], t[:, 1], t[:, 2], m[:, 0], m[:, 1], m[:, 2]

    one = np.flatnonzero(n == 1)
    if one.size:
        a, b, c, m0, _, _ = rotate(one, np.argmax(split[one], axis=1))
        out += [np.stack([a, m0, c], axis=1), np.stack([m0, b, c], axis=1)]
    two = np.flatnonzero(n == 2)
    if two.size:
        unsplit = np.argmin(split[two], axis=1)
        a, b, c, m0, m1, _ = rotate(two, (unsplit + 1) % 3)  # unsplit edge is now (c, a)
        out.append(np.stack([m0, b, m1], axis=1))
        # the quad (a, m0, m1, c): cut along the shorter diagonal
        short = np.linalg.norm(pos[a] - pos[m1], axis=1) <= np.linalg.norm(pos[m0] - pos[c], axis=1)
        q1 = np.where(short[:, None], np.stack([a, m0, m1], 1), np.stack([a, m0, c], 1))
        q2 = np.where(short[:, None], np.stack([a, m1, c], 1), np.stack([m0, m1, c], 1))
        out += [q1, q2]
    three = np.flatnonzero(n == 3)
    if three.size:
        a, b, c, m0, m1, m2 = rotate(three, np.zeros(three.size, np.int64))
        out += [np.stack(x, axis=1) for x in ((a, m0, m2), (m0, b, m1), (m2, m1, c), (m0, m1, m2))]
    return np.concatenate(out)
