"""`globemill check`: read baked files back and measure every guarantee, independently of the
mesher's own bookkeeping.

What is measured (each a row of the report):

- baked from this spec: the report and both .glb files carry the content hash of the spec they
  were baked from (`provenance.spec_hash`); each must be the given spec's. A bake of another spec
  is reported as such and nothing else is measured; files without a hash (older bakes) fail.
- deviation: two-sided distance between each level (and the colliders) and the true surface
  on a barycentric grid of every triangle (`_core.measure`: local projection, vertical walls
  included; surface -> mesh against the sample's own triangle). Triangles it puts over the
  limit are measured again here: mesh -> surface by a safeguarded projection and a dense
  search of the cap that can hold the nearest ground point (`ground_distance`), on a finer
  grid refined around the worst point (`mesh_to_ground`); surface -> mesh from the ground point
  above each sample to the nearest triangle of the whole mesh. A triangle fails only when that
  search confirms it. The limit is the tolerance the files state (mesh extras and report; the
  smaller when they disagree; the report's collision tolerance for colliders). The report's
  max_error_m of each level and of the colliders is measured the same way, largest first, and
  fails when the check measures more than it by REPORT_SAMPLING_SLACK plus the float32
  allowance.
- watertight: each level, welded across chunks by exact float32 position, is a closed, manifold,
  consistently oriented surface of genus 0: every undirected edge is used by exactly two
  triangles in opposite directions (no hole, no T-junction, no flip), one connected piece, no
  zero-area triangle, and V - E + F = 2 (Euler's polyhedron formula).
- seams: for every chunk at level k and edge i, the stitched variant for that edge meets the
  neighbour's level k + 1 mesh edge for edge, in one chain from corner to corner; and for every
  edge mask, the variant beside its neighbours (masked ones at k + 1, the others at k) leaves no
  open, doubled or flipped edge along the chunk's border. Bakes with skirts instead: every
  border edge of every chunk and level carries a skirt.
- morph: every vertex's morph position (position + morph target) lies on the same chunk's next
  coarser level.
- report: the report agrees with the files (levels, tolerances, counts).

The file's float32 positions are the mesh that is measured. The bake guaranteed its tolerance
(and measured its max_error_m) on float64 positions; rounding each coordinate to the nearest
float32 moves a vertex, and so every point of its triangles (convex combinations), by at most
sqrt(3)/2 ulp of the largest coordinate. The distance from a point to the ground, and the
distance from a ground point to the mesh, change by no more than the points move (a distance to a
set is 1-Lipschitz), so the file's mesh is within the bake's figures plus sqrt(3)/2 ulp. The
allowance is `ALLOWANCE_ULPS` = 4 ulps: that bound, doubled for a comparison of two rounded
things (morph positions against a rounded coarser level, welded seams), with a margin for the
check's own float64 arithmetic (about 1e-16 relative, far below an ulp of float32).

The .glb is parsed here (no dependency) following the glTF 2.0 specification (Khronos),
"GLB File Format Specification": a 12-byte header (magic "glTF", version 2, total length), then
chunks of (length, type, data), the JSON chunk first and the BIN chunk second.
"""

from __future__ import annotations

import json
import math
import struct
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import numpy.typing as npt

from .provenance import SPEC_HASH_KEY, VERSION_KEY, short_hash, spec_hash
from .spec import WorldSpec, load_spec

I64 = npt.NDArray[np.int64]
F64 = npt.NDArray[np.float64]
F32 = npt.NDArray[np.float32]

# exact projection on a barycentric grid of this order on every triangle (one more than the
# mesher's own verification, so the check samples points the mesher never looked at)
MEASURE_ORDER = 4
# float32 rounding allowance, in ulps of the largest coordinate magnitude (see module docstring)
ALLOWANCE_ULPS = 4
# a morph position must lie this close to the next coarser level (plus the float32 allowance)
MORPH_TOLERANCE_M = 1e-4
# the report's max_error_m is the largest error over the bake's own samples of each triangle (at
# least the grid of MEASURE_ORDER; more where it raises the order for noise), not a bound between
# them: the check, sampling other points, may find a little more on a correct bake. A claim fails
# when the check's figure at the grid of MEASURE_ORDER exceeds it by more than this fraction plus
# the float32 allowance. Chosen from measurement: on the demo world the largest such excess of a
# correct bake is 0.5 % (a triangle across a vertical wall, where the error changes fastest).
REPORT_SAMPLING_SLACK = 0.05
# failures listed per check (the count is always complete)
MAX_LISTED = 12

# glTF 2.0 specification: chunk types and accessor component types
_CHUNK_JSON = 0x4E4F534A
_CHUNK_BIN = 0x004E4942
_COMPONENT = {5120: "i1", 5121: "u1", 5122: "<i2", 5123: "<u2", 5125: "<u4", 5126: "<f4"}
_WIDTH = {"SCALAR": 1, "VEC2": 2, "VEC3": 3, "VEC4": 4}
_TRIANGLES = 4


class CheckInputError(ValueError):
    """The files cannot be read or do not have the layout a bake writes (exit code 2)."""


# ---- the .glb reader ---------------------------------------------------------------------------


@dataclass
class Glb:
    """A parsed binary glTF: the JSON document and the BIN chunk."""

    doc: dict[str, Any]
    bin: bytes
    name: str = "glb"

    def accessor(self, index: int) -> npt.NDArray[Any]:
        """Accessor `index` as a (count, width) array (a copy, native byte order)."""
        try:
            acc = self.doc["accessors"][index]
            if "sparse" in acc:
                raise CheckInputError(
                    f"{self.name}: accessor {index}: sparse accessors unsupported"
                )
            dtype = np.dtype(_COMPONENT[acc["componentType"]])
            width = _WIDTH[acc["type"]]
            count = int(acc["count"])
            view = self.doc["bufferViews"][acc["bufferView"]]
        except (KeyError, IndexError, TypeError) as exc:
            raise CheckInputError(f"{self.name}: accessor {index} is malformed ({exc!r})") from None
        if view.get("buffer", 0) != 0:
            raise CheckInputError(f"{self.name}: accessor {index}: only the GLB buffer is read")
        elem = dtype.itemsize * width
        stride = int(view.get("byteStride") or elem)
        view_start = int(view.get("byteOffset", 0))
        view_end = view_start + int(view["byteLength"])
        start = view_start + int(acc.get("byteOffset", 0))
        end = start + stride * (count - 1) + elem if count else start
        if end > view_end or view_end > len(self.bin) or stride < elem:
            raise CheckInputError(
                f"{self.name}: accessor {index} reaches past its buffer view or the BIN chunk"
            )
        if count == 0:
            return np.zeros((0, width), dtype.newbyteorder("="))
        arr = np.ndarray(
            (count, width),
            dtype=dtype,
            buffer=self.bin,
            offset=start,
            strides=(stride, dtype.itemsize),
        )
        return arr.astype(dtype.newbyteorder("="))


def parse_glb(data: bytes, name: str = "glb") -> Glb:
    """Split a .glb into its JSON document and BIN chunk (glTF 2.0 specification, GLB format)."""
    if len(data) < 12:
        raise CheckInputError(f"{name}: shorter than the 12-byte GLB header")
    magic, version, length = struct.unpack_from("<4sII", data)
    if magic != b"glTF":
        raise CheckInputError(f"{name}: not a binary glTF file (magic {magic!r})")
    if version != 2:
        raise CheckInputError(f"{name}: glTF version {version}, expected 2")
    if length != len(data):
        raise CheckInputError(f"{name}: header says {length} bytes, file has {len(data)}")
    chunks: list[tuple[int, bytes]] = []
    off = 12
    while off < length:
        if off + 8 > length:
            raise CheckInputError(f"{name}: truncated chunk header at byte {off}")
        clen, ctype = struct.unpack_from("<II", data, off)
        if off + 8 + clen > length:
            raise CheckInputError(f"{name}: chunk at byte {off} runs past the end of the file")
        chunks.append((ctype, data[off + 8 : off + 8 + clen]))
        off += 8 + clen
    if not chunks or chunks[0][0] != _CHUNK_JSON:
        raise CheckInputError(f"{name}: the first chunk must be JSON")
    try:
        doc = json.loads(chunks[0][1].decode("utf-8"))
    except (UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise CheckInputError(f"{name}: JSON chunk is not valid JSON ({exc})") from None
    if not isinstance(doc, dict):
        raise CheckInputError(f"{name}: JSON chunk is not an object")
    # the BIN chunk, when present, is the second one; other chunk types are skipped
    body = chunks[1][1] if len(chunks) > 1 and chunks[1][0] == _CHUNK_BIN else b""
    return Glb(doc, body, name)


def read_glb(path: Path) -> Glb:
    return parse_glb(Path(path).read_bytes(), Path(path).name)


def _primitive(glb: Glb, mesh_index: int) -> tuple[F32, I64, dict[str, Any]]:
    """The single triangle primitive of a mesh: positions (n, 3) float32, triangles (t, 3)."""
    try:
        mesh = glb.doc["meshes"][mesh_index]
        (prim,) = mesh["primitives"]
        pos_index = prim["attributes"]["POSITION"]
        idx_index = prim["indices"]
    except (KeyError, IndexError, TypeError, ValueError):
        raise CheckInputError(
            f"{glb.name}: mesh {mesh_index} is not one indexed triangle primitive"
        ) from None
    if prim.get("mode", _TRIANGLES) != _TRIANGLES:
        raise CheckInputError(f"{glb.name}: mesh {mesh_index}: primitive mode is not triangles")
    pos = glb.accessor(pos_index)
    if pos.ndim != 2 or pos.shape[1] != 3 or pos.dtype not in (np.float32, np.int16):
        raise CheckInputError(
            f"{glb.name}: mesh {mesh_index}: POSITION is not float32 or int16 "
            "(KHR_mesh_quantization) VEC3"
        )
    tris = _triangles(glb, idx_index, len(pos), f"mesh {mesh_index}")
    return pos, tris, prim


def _triangles(glb: Glb, index: int, nverts: int, what: str) -> I64:
    idx = glb.accessor(index)
    if idx.shape[1] != 1 or idx.dtype.kind != "u":
        raise CheckInputError(f"{glb.name}: {what}: indices are not an unsigned SCALAR accessor")
    flat = idx.reshape(-1).astype(np.int64)
    if len(flat) % 3:
        raise CheckInputError(f"{glb.name}: {what}: index count {len(flat)} is not a multiple of 3")
    if len(flat) and int(flat.max()) >= nverts:
        raise CheckInputError(f"{glb.name}: {what}: an index is beyond its {nverts} vertices")
    return flat.reshape(-1, 3)


# ---- what a bake wrote ---------------------------------------------------------------------------


@dataclass
class ChunkLevel:
    """One chunk at one level as stored.

    positions : (n, 3) float32; triangles : (t, 3) int64 local (the full primitive)
    morph : (n, 3) float64 position + morph target, or None when the mesh has no target
    seams : {mask: (s, 3) int64} stitched border triangles; the variant for mask m is the first
        `interior` triangles plus seams[m] (no entry: no border to replace)
    gid : (n,) int64 ids of the positions after welding every mesh of the file (set by read_world)
    skirt : (k, 3) int64 skirt triangles taken out of `triangles` (bakes with skirts only)
    step_m : grid step of the stored positions when quantized (int16), 0 for float32
    """

    chunk: int
    level: int
    tolerance_m: float
    positions: F32
    triangles: I64
    interior: int
    seams: dict[int, I64]
    morph: F64 | None
    neighbors: tuple[int, ...]
    gid: I64 = field(default_factory=lambda: np.zeros(0, np.int64))
    skirt: I64 = field(default_factory=lambda: np.zeros((0, 3), np.int64))
    step_m: float = 0.0

    def variant(self, mask: int) -> I64:
        """Local triangles drawn when the neighbours across the edges in `mask` are coarser."""
        border = self.seams.get(mask, np.zeros((0, 3), np.int64))
        return np.concatenate([self.triangles[: self.interior], border])


@dataclass
class World:
    """chunks[c][k]: chunk c at level k; welded : (W, 3) float32 every distinct position;
    quant_step_m : the largest grid step of quantized (int16) positions, 0 for float32 files."""

    chunks: list[list[ChunkLevel]]
    welded: F32
    quant_step_m: float = 0.0

    @property
    def levels(self) -> int:
        return len(self.chunks[0]) if self.chunks else 0


def weld(positions: F32) -> tuple[F32, I64]:
    """Weld by exact float32 bits (the export's contract: shared vertices are bit-identical).

    positions : (n, 3) float32 -> (distinct (w, 3) float32, inverse (n,) int64)
    """
    bits = np.ascontiguousarray(positions, dtype=np.float32).view(np.uint32)
    uniq, inv = np.unique(bits, axis=0, return_inverse=True)
    return uniq.view(np.float32), inv.reshape(-1).astype(np.int64)


def read_world(glb: Glb) -> World:
    """Every chunk and level of a bake's .glb, following the scene's root nodes and their
    MSFT_lod chains (finest first)."""
    doc = glb.doc
    try:
        roots = doc["scenes"][doc.get("scene", 0)]["nodes"]
        nodes = doc["nodes"]
    except (KeyError, IndexError, TypeError):
        raise CheckInputError(f"{glb.name}: no scene with nodes") from None
    chunks: list[list[ChunkLevel]] = []
    for root in roots:
        try:
            lod = nodes[root].get("extensions", {}).get("MSFT_lod", {})
            chain = [root] + [int(i) for i in lod.get("ids", [])]
            meshes = [int(nodes[i]["mesh"]) for i in chain]
            places = [_placement(nodes[i]) for i in chain]
        except (KeyError, IndexError, TypeError, ValueError, AttributeError):
            raise CheckInputError(
                f"{glb.name}: root node {root} or its MSFT_lod nodes lack a mesh"
            ) from None
        chunks.append(
            [_chunk_level(glb, m, k, places[k]) for k, m in enumerate(meshes)]
        )
    if not chunks:
        raise CheckInputError(f"{glb.name}: the scene has no chunks")
    for c, levels in enumerate(chunks):
        if levels[0].chunk != c:
            raise CheckInputError(f"{glb.name}: root node {c} holds chunk {levels[0].chunk}")
        if len(levels) != len(chunks[0]):
            raise CheckInputError(
                f"{glb.name}: chunk {c} has {len(levels)} levels, chunk 0 has {len(chunks[0])}"
            )
        for n in levels[0].neighbors:
            if not 0 <= n < len(chunks):
                raise CheckInputError(f"{glb.name}: chunk {c} names a missing neighbour {n}")
    every = [cl for levels in chunks for cl in levels]
    welded, inv = weld(np.concatenate([cl.positions for cl in every]))
    start = 0
    for cl in every:
        cl.gid = inv[start : start + len(cl.positions)]
        start += len(cl.positions)
    return World(chunks, welded, max(cl.step_m for cl in every))


def _placement(node: dict[str, Any]) -> tuple[F64, F64]:
    """A node's scale and translation (a quantized bake puts its int16 positions in place with
    them, docs/gltf.md Layouts; a float32 bake has neither)."""
    scale = np.asarray(node.get("scale", [1.0, 1.0, 1.0]), dtype=np.float64).reshape(3)
    shift = np.asarray(node.get("translation", [0.0, 0.0, 0.0]), dtype=np.float64).reshape(3)
    return scale, shift


def _chunk_level(
    glb: Glb, mesh_index: int, expected_level: int, place: tuple[F64, F64]
) -> ChunkLevel:
    raw, tris, prim = _primitive(glb, mesh_index)
    scale, shift = place
    quantized = raw.dtype != np.float32
    pos = (raw * scale + shift).astype(np.float32) if quantized else raw
    mesh = glb.doc["meshes"][mesh_index]
    ex = mesh.get("extras", {})
    what = f"mesh {mesh.get('name', mesh_index)}"
    try:
        chunk, level = int(ex["chunk"]), int(ex["level"])
        tol = float(ex["tolerance_m"])
        interior = int(ex["interior_triangles"])
        neighbors = tuple(int(n) for n in ex["neighbors"])
        seam_ids = {int(m): int(a) for m, a in ex.get("seams", {}).items()}
    except (KeyError, TypeError, ValueError):
        raise CheckInputError(
            f"{glb.name}: {what}: extras need chunk, level, tolerance_m, interior_triangles, "
            "neighbors (and seams as {mask: accessor})"
        ) from None
    if level != expected_level:
        raise CheckInputError(
            f"{glb.name}: {what}: level {level} at place {expected_level} of its MSFT_lod chain"
        )
    if not 0 <= interior <= len(tris):
        raise CheckInputError(
            f"{glb.name}: {what}: interior_triangles {interior} of {len(tris)} triangles"
        )
    seams = {m: _triangles(glb, a, len(pos), f"{what} seam {m}") for m, a in seam_ids.items()}
    morph = None
    targets = prim.get("targets") or []
    if targets:
        d = glb.accessor(targets[0]["POSITION"])
        if d.shape != pos.shape or d.dtype != np.float32:
            raise CheckInputError(f"{glb.name}: {what}: morph target does not match POSITION")
        # the target stores displacements (glTF morph targets), in the node's units: the morph
        # position is their sum, put in place like the positions
        morph = (raw.astype(np.float64) + d.astype(np.float64)) * scale + shift
    step = float(np.max(np.abs(scale))) if quantized else 0.0
    return ChunkLevel(chunk, level, tol, pos, tris, interior, seams, morph, neighbors, step_m=step)


def read_colliders(glb: Glb) -> tuple[list[int], list[F32], list[I64]]:
    """Chunk ids, positions (n, 3) float32 and triangles (t, 3) of every collider node."""
    chunks, positions, triangles = [], [], []
    try:
        roots = glb.doc["scenes"][glb.doc.get("scene", 0)]["nodes"]
    except (KeyError, IndexError, TypeError):
        raise CheckInputError(f"{glb.name}: no scene with nodes") from None
    for i in roots:
        node = glb.doc["nodes"][i]
        pos, tris, _ = _primitive(glb, int(node["mesh"]))
        chunks.append(int(node.get("extras", {}).get("chunk", i)))
        positions.append(pos)
        triangles.append(tris)
    return chunks, positions, triangles


# ---- pure geometry and topology on arrays -------------------------------------------------------


def float32_allowance(positions: F32, ulps: int = ALLOWANCE_ULPS) -> float:
    """`ulps` units in the last place of float32 at the largest coordinate magnitude (m)."""
    if positions.size == 0:
        return 0.0
    big = np.float32(np.abs(positions).max())
    return float(ulps * np.spacing(big))


def _edge_keys(tris: I64) -> tuple[I64, I64, npt.NDArray[np.bool_]]:
    """Directed edges (3t, 2), undirected keys (3t,) and whether each runs low -> high."""
    e = np.concatenate([tris[:, [0, 1]], tris[:, [1, 2]], tris[:, [2, 0]]])
    lo, hi = np.minimum(e[:, 0], e[:, 1]), np.maximum(e[:, 0], e[:, 1])
    return e, (lo << 32) | hi, e[:, 0] < e[:, 1]


def boundary_edges(tris: I64) -> I64:
    """Directed edges (b, 2) used by exactly one triangle, as that triangle runs them."""
    if len(tris) == 0:
        return np.zeros((0, 2), np.int64)
    e, key, _ = _edge_keys(tris)
    _, inv, counts = np.unique(key, return_inverse=True, return_counts=True)
    return e[counts[inv] == 1]


def components(n: int, edges: I64) -> int:
    """Connected components of the graph with `n` vertices and (m, 2) `edges` (union by
    minimum label with pointer jumping)."""
    label = np.arange(n, dtype=np.int64)
    if len(edges) == 0:
        return n
    a, b = edges[:, 0], edges[:, 1]
    while True:
        la, lb = label[a], label[b]
        if np.array_equal(la, lb):
            break
        m = np.minimum(la, lb)
        np.minimum.at(label, la, m)
        np.minimum.at(label, lb, m)
        while True:
            nxt = label[label]
            if np.array_equal(nxt, label):
                break
            label = nxt
    return int(len(np.unique(label)))


@dataclass
class Topology:
    vertices: int
    edges: int
    faces: int
    open_edges: I64  # (o, 2) vertex pairs of edges used once
    open_triangles: I64  # (o,) the triangle using each open edge
    overused_edges: I64  # (u, 2) used by three or more triangles
    flipped_edges: I64  # (f, 2) used twice in the same direction
    degenerate: I64  # (d,) triangles of zero area or with a repeated vertex
    components: int

    @property
    def euler(self) -> int:
        return self.vertices - self.edges + self.faces

    @property
    def closed_manifold(self) -> bool:
        return not (len(self.open_edges) or len(self.overused_edges) or len(self.flipped_edges))

    @property
    def ok(self) -> bool:
        # Euler's polyhedron formula: V - E + F = 2 for a closed surface of genus 0
        return (
            self.closed_manifold
            and self.euler == 2
            and self.components == 1
            and not len(self.degenerate)
        )


def topology(positions: F64, tris: I64, min_area_m2: float = 0.0) -> Topology:
    """Edge use of a welded triangle mesh: tris (t, 3) index positions (n, 3)."""
    e, key, forward = _edge_keys(tris)
    uniq, first, inv, counts = np.unique(
        key, return_index=True, return_inverse=True, return_counts=True
    )
    fwd = np.bincount(inv, weights=forward.astype(np.float64), minlength=len(uniq))
    pairs = e[first]
    used = np.unique(tris)
    p = positions[tris]
    area2 = np.linalg.norm(np.cross(p[:, 1] - p[:, 0], p[:, 2] - p[:, 0]), axis=1)
    repeated = (tris[:, 0] == tris[:, 1]) | (tris[:, 1] == tris[:, 2]) | (tris[:, 2] == tris[:, 0])
    remap = np.full(int(tris.max()) + 1 if len(tris) else 0, -1, np.int64)
    remap[used] = np.arange(len(used))
    return Topology(
        vertices=int(len(used)),
        edges=int(len(uniq)),
        faces=int(len(tris)),
        open_edges=pairs[counts == 1],
        open_triangles=first[counts == 1] % max(len(tris), 1),
        overused_edges=pairs[counts > 2],
        flipped_edges=pairs[(counts == 2) & (fwd != 1)],
        degenerate=np.flatnonzero(repeated | (area2 <= 2 * min_area_m2)),
        components=components(len(used), remap[pairs]),
    )


def t_junctions(positions: F64, open_edges: I64, limit: int = 4000) -> I64:
    """Open edges (a, b) with a vertex of another open edge strictly inside them: the vertex a
    finer neighbour added that this side lacks. Looks at the first `limit` open edges."""
    oe = open_edges[:limit]
    if len(oe) == 0:
        return np.zeros((0, 2), np.int64)
    cand = np.unique(open_edges)
    q = positions[cand]
    out = []
    for a, b in oe:
        pa, pb = positions[a], positions[b]
        ab = pb - pa
        ll = float(ab @ ab)
        if ll == 0:
            continue
        t = (q - pa) @ ab / ll
        d = np.linalg.norm(q - (pa + t[:, None] * ab), axis=1)
        inside = (t > 1e-9) & (t < 1 - 1e-9) & (d <= 1e-6 * math.sqrt(ll))
        if np.any(inside & (cand != a) & (cand != b)):
            out.append((a, b))
    return np.array(out, np.int64).reshape(-1, 2)


def closest_points(p: F64, a: F64, b: F64, c: F64) -> F64:
    """Closest point of triangle (a, b, c) to p, row by row: all (n, 3) -> (n, 3).

    Voronoi regions of the vertices, edges and face, after Ericson, "Real-Time Collision
    Detection" (2005), section 5.1.5 "Closest point on triangle to point".
    """
    ab, ac, ap = b - a, c - a, p - a
    bp, cp = p - b, p - c

    def dot(x: F64, y: F64) -> F64:
        return np.einsum("ij,ij->i", x, y)

    d1, d2 = dot(ab, ap), dot(ac, ap)
    d3, d4 = dot(ab, bp), dot(ac, bp)
    d5, d6 = dot(ab, cp), dot(ac, cp)
    va = d3 * d6 - d5 * d4
    vb = d5 * d2 - d1 * d6
    vc = d1 * d4 - d3 * d2
    with np.errstate(divide="ignore", invalid="ignore"):
        den = va + vb + vc
        v = vb / den
        w = vc / den
        out = a + ab * v[:, None] + ac * w[:, None]
        # later assignments win: the regions are tested in Ericson's order, vertex A first
        wbc = (d4 - d3) / ((d4 - d3) + (d5 - d6))
        m = (va <= 0) & (d4 - d3 >= 0) & (d5 - d6 >= 0)
        out[m] = (b + (c - b) * wbc[:, None])[m]
        wac = d2 / (d2 - d6)
        m = (vb <= 0) & (d2 >= 0) & (d6 <= 0)
        out[m] = (a + ac * wac[:, None])[m]
        m = (d6 >= 0) & (d5 <= d6)
        out[m] = c[m]
        vab = d1 / (d1 - d3)
        m = (vc <= 0) & (d1 >= 0) & (d3 <= 0)
        out[m] = (a + ab * vab[:, None])[m]
        m = (d3 >= 0) & (d4 <= d3)
        out[m] = b[m]
        m = (d1 <= 0) & (d2 <= 0)
        out[m] = a[m]
    bad = ~np.all(np.isfinite(out), axis=1)
    if np.any(bad):  # a degenerate triangle: the nearest of its three segments
        out[bad] = _closest_on_segments(p[bad], a[bad], b[bad], c[bad])
    return out


def _closest_on_segments(p: F64, a: F64, b: F64, c: F64) -> F64:
    best = a.copy()
    bestd = np.full(len(p), np.inf)
    for s, e in ((a, b), (b, c), (c, a)):
        d = e - s
        ll = np.einsum("ij,ij->i", d, d)
        with np.errstate(divide="ignore", invalid="ignore"):
            t = np.clip(np.einsum("ij,ij->i", p - s, d) / ll, 0, 1)
        t = np.where(ll > 0, t, 0.0)
        q = s + d * t[:, None]
        dist = np.linalg.norm(p - q, axis=1)
        m = dist < bestd
        best[m], bestd[m] = q[m], dist[m]
    return best


def _cell_keys(cells: I64, group: I64) -> npt.NDArray[np.uint64]:
    # a hash of (cell, group); a collision only adds candidate pairs, never loses one
    c = np.ascontiguousarray(cells).view(np.uint64)
    g = np.ascontiguousarray(group).view(np.uint64)
    k = c[:, 0] * np.uint64(0x9E3779B97F4A7C15)
    k ^= c[:, 1] * np.uint64(0xC2B2AE3D27D4EB4F)
    k ^= c[:, 2] * np.uint64(0x165667B19E3779F9)
    k ^= g * np.uint64(0x27D4EB2F165667C5)
    return k


def _grid_pass(points: F64, point_group: I64, tris: F64, tri_group: I64, reach: float) -> F64:
    """Nearest distance to the triangles of the point's group whose bounding box grown by
    `reach` holds the point (inf when none does): exact for every point within `reach`."""
    n = len(points)
    best = np.full(n, np.inf)
    lo = tris.min(axis=1) - reach
    hi = tris.max(axis=1) + reach
    ext = (hi - lo).max(axis=1)
    base = max(float(ext.min()), float(ext.max()) / 4.0**6, 1e-9)
    # size classes (factors of 4): a box no larger than its class's cell starts in the point's
    # cell or the one before it on each axis, so 8 cells hold every candidate
    cls = np.ceil(np.log(np.maximum(ext / base, 1.0)) / np.log(4.0)).astype(np.int64)
    offsets = np.array([(i, j, k) for i in (0, 1) for j in (0, 1) for k in (0, 1)], np.int64)
    for j in np.unique(cls):
        sel = np.flatnonzero(cls == j)
        size = max(base * 4.0 ** int(j), float(ext[sel].max()))
        tkey = _cell_keys(np.floor(lo[sel] / size).astype(np.int64), tri_group[sel])
        order = np.argsort(tkey, kind="stable")
        skey = tkey[order]
        pcell = np.floor(points / size).astype(np.int64)
        for off in offsets:
            pkey = _cell_keys(pcell - off, point_group)
            left = np.searchsorted(skey, pkey, "left")
            cnt = np.searchsorted(skey, pkey, "right") - left
            total = int(cnt.sum())
            if total == 0:
                continue
            pi = np.repeat(np.arange(n), cnt)
            first = np.cumsum(cnt) - cnt
            ti = sel[order[np.repeat(left - first, cnt) + np.arange(total)]]
            keep = (tri_group[ti] == point_group[pi]) & np.all(
                (points[pi] >= lo[ti]) & (points[pi] <= hi[ti]), axis=1
            )
            pi, ti = pi[keep], ti[keep]
            if len(pi) == 0:
                continue
            t = tris[ti]
            q = closest_points(points[pi], t[:, 0], t[:, 1], t[:, 2])
            np.minimum.at(best, pi, np.linalg.norm(points[pi] - q, axis=1))
    return best


def point_mesh_distance(
    points: F64, point_group: I64, tris: F64, tri_group: I64, reach: float
) -> F64:
    """Exact distance from each point to the nearest triangle of its own group (inf when the
    group has no triangle).

    points : (n, 3); tris : (m, 3, 3); groups : (n,), (m,) int64. Candidates come from uniform
    grids per triangle size class, over boxes grown by `reach` (pick about the distance that
    matters); points farther than that are searched again with a reach four times larger until
    their nearest triangle is found.
    """
    best = np.full(len(points), np.inf)
    if len(points) == 0 or len(tris) == 0:
        return best
    # no two points of the scene are farther apart than this
    far = 2.0 * (np.linalg.norm(points, axis=1).max() + np.linalg.norm(tris, axis=2).max()) + 1.0
    todo = np.arange(len(points))
    r = max(float(reach), 1e-9)
    while len(todo):
        best[todo] = _grid_pass(points[todo], point_group[todo], tris, tri_group, r)
        todo = todo[best[todo] > r]
        if r > far:
            break  # the rest have no triangle in their group
        r *= 4
    return best


# ---- distance from mesh points to the ground ---------------------------------------------------

# the safeguarded projection ends when its step (or its trust radius) is below this (m)
PROJECT_XTOL_M = 1e-7
PROJECT_ITERATIONS = 80
# the confirming search lays a CAP_GRID x CAP_GRID grid of directions over the cap that can hold
# the nearest ground point, then projects from the best node
CAP_GRID = 25
CAP_BATCH = 256
# a re-measured triangle is sampled at twice the measure order, then the worst sample is refined
# REFINE_STEPS times by a 5 x 5 grid of half the previous spacing around it
REFINE_STEPS = 4


def _unit(v: F64) -> F64:
    return v / np.linalg.norm(v, axis=1, keepdims=True)


def _dot(a: F64, b: F64) -> F64:
    return np.einsum("ij,ij->i", a, b)


def _tangent_frame(u: F64) -> tuple[F64, F64]:
    """Two unit vectors completing each unit row of u (n, 3) to an orthonormal frame."""
    helper = np.zeros_like(u)
    small = np.abs(u[:, 0]) < 0.9
    helper[small, 0] = 1.0
    helper[~small, 1] = 1.0
    e1 = _unit(helper - _dot(helper, u)[:, None] * u)
    return e1, np.cross(u, e1)


def _ground(core_field: Any, u: F64) -> tuple[F64, F64]:
    """H(u) (n,) and the ground points (R + H(u)) u (n, 3) of docs/terrain.md."""
    h = np.asarray(core_field.height(u), np.float64)
    return h, (core_field.radius_m + h)[:, None] * u


def project_to_ground(
    core_field: Any,
    points: F64,
    starts: F64 | None = None,
    *,
    trust_m: F64 | float | None = None,
    iterations: int = PROJECT_ITERATIONS,
    xtol_m: float = PROJECT_XTOL_M,
) -> tuple[F64, F64]:
    """Nearest ground point to each point by a safeguarded Gauss-Newton method on the direction.

    With rho = R + H(u) and g = grad H(u), a tangent step t moves the ground point by
    rho t + (g . t) u to first order; each iteration solves that 2 x 2 least-squares problem in a
    tangent frame (Nocedal & Wright, "Numerical Optimization", ch. 10) and limits the step to a
    trust radius (ch. 4). A step is taken only when the ground point comes closer; otherwise the
    trust radius halves (bisection of the step), so the distance never grows and each iterate is
    a ground point: steep flanks (large g), sharp crests and steps where the linear model is
    wrong only shrink the trust radius. A point ends when a taken step or the trust radius falls
    below `xtol_m`, i.e. within `xtol_m` of a local minimum or of the crease it stalls on.

    points : (n, 3); starts : (n, 3) first directions (default p/|p|); trust_m : first trust
    radius in metres (default the first distance). Returns (distance (n,), direction (n, 3)).
    """
    R = float(core_field.radius_m)
    p = np.asarray(points, np.float64)
    u = _unit(np.array(p if starts is None else starts, np.float64))
    h, s = _ground(core_field, u)
    d = np.linalg.norm(s - p, axis=1)
    trust = np.array(
        np.broadcast_to(d if trust_m is None else trust_m, d.shape), np.float64, copy=True
    )
    active = np.flatnonzero((trust >= xtol_m) & (d > 0))
    for _ in range(iterations):
        if active.size == 0:
            break
        ua, pa = u[active], p[active]
        rho = R + h[active]
        g = np.asarray(core_field.gradient(ua), np.float64)
        e1, e2 = _tangent_frame(ua)
        res = rho[:, None] * ua - pa
        j1 = rho[:, None] * e1 + _dot(g, e1)[:, None] * ua
        j2 = rho[:, None] * e2 + _dot(g, e2)[:, None] * ua
        a11, a12, a22 = _dot(j1, j1), _dot(j1, j2), _dot(j2, j2)
        b1, b2 = -_dot(j1, res), -_dot(j2, res)
        det = a11 * a22 - a12 * a12
        solvable = det > 1e-12 * a11 * a22
        safe = np.where(solvable, det, 1.0)
        # a singular model (never for rho > 0): a steepest-descent step instead
        s1 = np.where(solvable, (b1 * a22 - b2 * a12) / safe, b1 / a11)
        s2 = np.where(solvable, (a11 * b2 - a12 * b1) / safe, b2 / a22)
        length = rho * np.hypot(s1, s2)
        scale = np.minimum(1.0, trust[active] / np.maximum(length, 1e-300))
        un = _unit(ua + (s1 * scale)[:, None] * e1 + (s2 * scale)[:, None] * e2)
        hn, sn = _ground(core_field, un)
        dn = np.linalg.norm(sn - pa, axis=1)
        taken = length * scale
        better = dn < d[active]
        win = active[better]
        u[win], h[win], d[win] = un[better], hn[better], dn[better]
        trust[win] = 2.0 * taken[better]
        trust[active[~better]] = 0.5 * taken[~better]
        done = np.where(better, taken < xtol_m, 0.5 * taken < xtol_m)
        active = active[~done]
    return d, u


def cap_search(core_field: Any, points: F64, upper: F64, *, grid: int = CAP_GRID) -> F64:
    """Confirm distances to the ground by a dense search: `min(upper, found)` per point.

    The nearest ground point to p lies within `upper` of p, so its direction lies in the cap of
    angular radius asin(upper / |p|) around p/|p|. That cap is covered by a `grid` x `grid`
    gnomonic grid of directions (every node a ground point), and the safeguarded projection
    starts again from the best node with a trust radius of two grid steps. A basin of the
    distance narrower than a grid step can be missed; nothing here needs H to be smooth.

    points : (n, 3); upper : (n,) distances to known ground (or wall) points.
    """
    p_all = np.asarray(points, np.float64)
    out = np.array(upper, np.float64, copy=True)
    g = np.linspace(-1.0, 1.0, grid)
    gx, gy = (a.ravel() for a in np.meshgrid(g, g))
    for start in range(0, len(p_all), CAP_BATCH):
        sel = slice(start, start + CAP_BATCH)
        p, up = p_all[sel], out[sel]
        pn = np.linalg.norm(p, axis=1)
        pu = p / pn[:, None]
        e1, e2 = _tangent_frame(pu)
        half = np.tan(np.arcsin(np.clip(up / pn, 0.0, 0.99)))
        x, y = half[:, None] * gx[None, :], half[:, None] * gy[None, :]
        dirs = pu[:, None, :] + x[:, :, None] * e1[:, None, :] + y[:, :, None] * e2[:, None, :]
        dirs = _unit(dirs.reshape(-1, 3))
        _, s = _ground(core_field, dirs)
        dist = np.linalg.norm(s.reshape(len(p), gx.size, 3) - p[:, None, :], axis=2)
        best = np.argmin(dist, axis=1)
        first = dirs.reshape(len(p), gx.size, 3)[np.arange(len(p)), best]
        step = 2.0 * half * pn / (grid - 1)
        dp, _ = project_to_ground(core_field, p, first, trust_m=2.0 * step)
        out[sel] = np.minimum(up, np.minimum(dist.min(axis=1), dp))
    return out


def ground_distance(core_field: Any, points: F64, confirm_above: F64 | float | None = None) -> F64:
    """Distance from each point (n, 3) to the ground of docs/terrain.md, walls included.

    The safeguarded projection from the radial direction (its first iterate is the ground point
    straight above or below, so the result never exceeds the radial bound), the core's distance
    to the radial wall segments of steps, and for every point still farther than
    `confirm_above` the dense `cap_search`. Every value is a distance to an actual surface
    point, so it is an upper bound of the true distance; beyond `confirm_above` it is one that
    a dense search confirms.
    """
    p = np.asarray(points, np.float64)
    if len(p) == 0:
        return np.zeros(0)
    d, _ = project_to_ground(core_field, p)
    d = np.minimum(d, np.asarray(core_field.wall_distance(p), np.float64))
    if confirm_above is not None:
        far = np.flatnonzero(d > np.broadcast_to(confirm_above, d.shape))
        if len(far):
            d[far] = cap_search(core_field, p[far], d[far])
    return d


def barycentric_grid(order: int) -> F64:
    """Weights (s, 3) of the barycentric grid of step 1/order (corners included)."""
    g = np.array([(i, j) for i in range(order + 1) for j in range(order + 1 - i)], np.float64)
    g /= order
    return np.stack([1 - g[:, 0] - g[:, 1], g[:, 0], g[:, 1]], axis=1)


def _confirm_largest(
    core_field: Any, pts: F64, d: F64, above: F64, done: npt.NDArray[np.bool_] | None = None
) -> F64:
    """Per row (a triangle's points pts (t, k, 3), their distances d (t, k) from the projection),
    confirm by `cap_search`, largest first, until the row's largest value is confirmed or at
    most `above` (t,). Returns the largest value per row; d and `done` (which values are
    confirmed already) are updated in place."""
    if done is None:
        done = np.zeros(d.shape, bool)
    rows = np.arange(len(d))
    while True:
        cand = np.where(done, -np.inf, d)
        j = np.argmax(cand, axis=1)
        best_done = np.where(done, d, -np.inf).max(axis=1)
        top = cand[rows, j]
        # unresolved: an unconfirmed value above both the threshold and every confirmed one
        todo = np.flatnonzero((top > above) & (top > best_done))
        if len(todo) == 0:
            return np.where(done | (d <= above[:, None]), d, -np.inf).max(axis=1)
        jj = j[todo]
        d[todo, jj] = cap_search(core_field, pts[todo, jj], d[todo, jj])
        done[todo, jj] = True


def mesh_to_ground(core_field: Any, tri: F64, order: int, confirm_above: F64) -> tuple[F64, F64]:
    """Largest distance from each triangle (t, 3, 3) to the ground, by search over the triangle.

    The barycentric grid of step 1/(2 order), then REFINE_STEPS rounds of a 5 x 5 grid of half
    the previous spacing around the worst point so far (a crest or wall line between grid
    nodes is found to within the last spacing). Distances by `ground_distance`; every value over
    `confirm_above` (t,) that could be a triangle's largest is confirmed by the dense
    `cap_search`, largest first. Returns ((t,) the largest over the nodes of the grid of step
    1/order; (t,) the largest found).
    """
    nt = len(tri)
    if nt == 0:
        return np.zeros(0), np.zeros(0)
    rows = np.arange(nt)
    w = barycentric_grid(2 * order)
    # the nodes of the grid of step 1/order: even multiples of 1/(2 order)
    on_grid = np.all(np.rint(w * 2 * order).astype(np.int64) % 2 == 0, axis=1)
    pts = np.einsum("sk,tkd->tsd", w, tri)
    d = ground_distance(core_field, pts.reshape(-1, 3)).reshape(nt, -1)
    done = np.zeros(d.shape, bool)
    dg, dn = d[:, on_grid], done[:, on_grid]
    coarse = _confirm_largest(core_field, pts[:, on_grid], dg, confirm_above, dn)
    d[:, on_grid], done[:, on_grid] = dg, dn
    best = _confirm_largest(core_field, pts, d, confirm_above, done)
    bary = w[np.argmax(np.where(d <= best[:, None], d, -np.inf), axis=1)]
    o = np.linspace(-1.0, 1.0, 5)
    ox, oy = (a.ravel() for a in np.meshgrid(o, o))
    h = 0.5 / order
    for _ in range(REFINE_STEPS):
        cand = np.repeat(bary[:, None, :], len(ox), axis=1)
        cand[:, :, 1] += h * ox
        cand[:, :, 2] += h * oy
        cand[:, :, 0] = 1.0 - cand[:, :, 1] - cand[:, :, 2]
        # back into the triangle: negative weights to 0, then the weights summed to 1
        cand = np.maximum(cand, 0.0)
        cand /= cand.sum(axis=2, keepdims=True)
        pts = np.einsum("tsk,tkd->tsd", cand, tri)
        dc = ground_distance(core_field, pts.reshape(-1, 3)).reshape(nt, -1)
        top = _confirm_largest(core_field, pts, dc, np.maximum(confirm_above, best))
        up = top > best
        j = np.argmax(np.where(dc <= top[:, None], dc, -np.inf), axis=1)
        best[up], bary[up] = top[up], cand[rows, j][up]
        h /= 2.0
    return coarse, best


# ---- the report --------------------------------------------------------------------------------


@dataclass
class CheckResult:
    """One row: a guarantee measured at one level (or for the colliders, or overall).

    status: "ok", "FAIL", "info" (measured, not a guarantee) or "skipped"."""

    name: str
    level: int | str
    status: str
    value: float | None
    limit: float | None
    unit: str
    summary: str
    where: str = ""
    failures: list[str] = field(default_factory=list)
    failure_count: int = 0
    details: dict[str, Any] = field(default_factory=dict)

    @property
    def ok(self) -> bool:
        return self.status != "FAIL"

    def to_dict(self) -> dict[str, Any]:
        return {
            "check": self.name,
            "level": self.level,
            "ok": self.ok,
            "status": self.status,
            "value": self.value,
            "limit": self.limit,
            "unit": self.unit,
            "summary": self.summary,
            "where": self.where,
            "failure_count": self.failure_count,
            "failures": self.failures,
            "details": self.details,
        }


def _result(
    name: str,
    level: int | str,
    failures: list[str],
    *,
    value: float | None,
    limit: float | None,
    unit: str,
    summary: str,
    where: str = "",
    details: dict[str, Any] | None = None,
    status: str | None = None,
) -> CheckResult:
    return CheckResult(
        name=name,
        level=level,
        status=status or ("FAIL" if failures else "ok"),
        value=value,
        limit=limit,
        unit=unit,
        summary=summary,
        where=where,
        failures=failures[:MAX_LISTED],
        failure_count=len(failures),
        details=details or {},
    )


@dataclass
class CheckReport:
    """Every measurement of one `check` run; `.ok` when every guarantee holds."""

    spec: str
    outdir: str
    planet: str
    allowance_m: float
    checks: list[CheckResult]

    @property
    def ok(self) -> bool:
        return all(c.ok for c in self.checks)

    @property
    def failures(self) -> list[str]:
        out = []
        for c in self.checks:
            if not c.ok:
                lvl = f" level {c.level}" if isinstance(c.level, int) else f" {c.level}"
                lvl = "" if c.level in ("-", "") else lvl
                out.append(f"{c.name}{lvl}: {c.summary}")
                out.extend(f"  {f}" for f in c.failures)
                if c.failure_count > len(c.failures):
                    out.append(f"  ... and {c.failure_count - len(c.failures)} more")
        return out

    def to_dict(self) -> dict[str, Any]:
        return {
            "ok": self.ok,
            "planet": self.planet,
            "spec": self.spec,
            "outdir": self.outdir,
            "measure_order": MEASURE_ORDER,
            "float32_allowance_m": self.allowance_m,
            "allowance_note": (
                f"positions are float32 in the files: geometric limits get {ALLOWANCE_ULPS} ulps "
                "of the largest coordinate on top"
            ),
            "checks": [c.to_dict() for c in self.checks],
            "failures": self.failures,
        }

    def table(self) -> str:
        """The checks as a text table, then every failure with its place."""
        rows = [("check", "level", "result", "worst value", "where")]
        for c in self.checks:
            rows.append((c.name, str(c.level), c.status, c.summary, c.where))
        widths = [max(len(r[i]) for r in rows) for i in range(len(rows[0]))]
        lines = [
            f"{self.planet}: check of {self.outdir} (float32 allowance {self.allowance_m:.2g} m; "
            f"deviation sampled at order {MEASURE_ORDER}, confirmed by a dense search)"
        ]
        for r in rows:
            lines.append("  " + "  ".join(x.ljust(w) for x, w in zip(r, widths, strict=True)))
        if self.ok:
            lines.append("all guarantees hold")
        else:
            lines.append("FAILED:")
            lines.extend("  " + f for f in self.failures)
        return "\n".join(lines).rstrip()


# ---- the checks ---------------------------------------------------------------------------------


def _fmt(x: float) -> str:
    return f"{x:.4g}"


def _xyz(p: npt.ArrayLike) -> str:
    a = np.asarray(p, np.float64)
    return f"({a[0]:.2f}, {a[1]:.2f}, {a[2]:.2f})"


def surface_samples(core_field: Any, radius_m: float, tri: F64, order: int) -> F64:
    """Points of the true surface straight above or below a barycentric grid of `order` on each
    triangle (corners included): tri (t, 3, 3) -> (t, s, 3) with s = (order+1)(order+2)/2."""
    w = barycentric_grid(order)  # (s, 3)
    p = np.einsum("sk,tkd->tsd", w, tri).reshape(-1, 3)
    u = p / np.linalg.norm(p, axis=1, keepdims=True)
    # the ground of docs/terrain.md: (R + H(u)) u
    s = (radius_m + core_field.height(u))[:, None] * u
    return s.reshape(len(tri), len(w), 3)


def _surface_to_mesh(
    core_field: Any, positions: F64, tris: I64, which: I64, order: int, limit: F64
) -> F64:
    """Surface -> mesh for the triangles `which`: the surface points above their grid samples,
    each against the nearest triangle of the whole mesh. Exact up to `limit` (per triangle);
    beyond it the distance to the sample's own triangle (an upper bound) is kept."""
    tri_xyz = positions[tris]
    own = tri_xyz[which]
    s = surface_samples(core_field, core_field.radius_m, own, order)  # (w, k, 3)
    k = s.shape[1]
    pts = s.reshape(-1, 3)
    rep = np.repeat(own, k, axis=0)
    d = np.linalg.norm(pts - closest_points(pts, rep[:, 0], rep[:, 1], rep[:, 2]), axis=1)
    lim = np.repeat(limit[which], k)
    far = np.flatnonzero(d > lim)
    if len(far):
        near = _grid_pass(
            pts[far],
            np.zeros(len(far), np.int64),
            tri_xyz,
            np.zeros(len(tris), np.int64),
            float(lim.max()),
        )
        d[far] = np.minimum(d[far], near)
    return d.reshape(len(which), k).max(axis=1)


def _where(level: int | str) -> str:
    return f"level {level}" if isinstance(level, int) else str(level)


def _reported_error(claimed: Any, level: int | str) -> tuple[float | None, str | None]:
    """The report's max_error_m of a level as a number, or the reason it is unusable."""
    if claimed is None:
        return None, f"{_where(level)}: the report states no max_error_m"
    if isinstance(claimed, bool) or not isinstance(claimed, (int, float)):
        return None, f"{_where(level)}: the report's max_error_m {claimed!r} is not a number"
    if not math.isfinite(float(claimed)) or float(claimed) < 0:
        return None, f"{_where(level)}: the report's max_error_m {claimed!r} is not a distance"
    return float(claimed), None


def check_deviation(
    core_field: Any,
    positions: F64,
    tris: I64,
    tri_chunk: I64,
    tri_limit: F64,
    allowance: float,
    *,
    name: str,
    level: int | str,
    threads: int = 0,
    order: int = MEASURE_ORDER,
    claimed: Any = None,
    check_claim: bool = False,
) -> CheckResult:
    """Two-sided deviation of a mesh from the true surface against a per-triangle limit, and
    (`check_claim`) against the report's `claimed` max_error_m.

    `_core.measure` gives, per triangle, the larger of mesh -> surface (projection of grid
    samples, walls included) and a bound of surface -> mesh (the surface point above each sample
    against that one triangle). Both can overstate: the projection is local (from a point above
    the foot of a steep flank it ends on the flat ground below, near the radial bound) and the
    bound is pessimistic where the ground is steeper than the triangle. So a triangle over its
    limit, or (largest first) over the claimed figure, is measured again: mesh -> surface by
    `mesh_to_ground` (the grid at twice the order, the worst point refined, every point over the
    limit confirmed by the dense `cap_search`), surface -> mesh from the surface points above
    the grid against the nearest triangle of the whole mesh. It fails only what that confirms.

    The figures a bake reports were measured on its float64 positions; `allowance` (the float32
    allowance of the module docstring) covers their rounding to float32, for the tolerance and
    the claimed figure. The claim is compared at the grid of `order` (the bake's own sampling
    is at least that grid but not the same points, hence REPORT_SAMPLING_SLACK).
    """
    from . import _core

    t32 = tris.astype(np.uint32)
    dev = _core.measure(core_field, positions, t32, order, threads)
    per = np.asarray(dev["per_triangle"], np.float64).copy()
    # per triangle at the report's sampling (the grid of `order`), for the claimed figure
    per_grid = per.copy()
    remeasured = np.zeros(len(per), bool)
    claim, claim_problem = _reported_error(claimed, level) if check_claim else (None, None)
    # the figure every re-measured point must be confirmed beyond
    confirm = tri_limit + allowance
    claim_limit = math.inf
    if claim is not None:
        claim_limit = claim * (1.0 + REPORT_SAMPLING_SLACK) + allowance
        confirm = np.minimum(confirm, claim_limit)

    def remeasure(which: I64) -> None:
        which = which[~remeasured[which]]
        if len(which) == 0:
            return
        m2s_grid, m2s = mesh_to_ground(core_field, positions[tris[which]], order, confirm[which])
        s2m = _surface_to_mesh(core_field, positions, tris, which, order, confirm)
        per[which] = np.maximum(m2s, s2m)
        per_grid[which] = np.maximum(m2s_grid, s2m)
        remeasured[which] = True

    remeasure(np.flatnonzero(per > tri_limit + allowance))
    understated = None
    if claim is not None:
        # largest first, until one confirms the claim is exceeded or none can exceed it
        batch = 8
        while True:
            over = per_grid > claim_limit
            if np.any(over & remeasured):
                understated = int(np.argmax(np.where(remeasured, per_grid, -np.inf)))
                break
            todo = np.flatnonzero(over & ~remeasured)
            if len(todo) == 0:
                break
            remeasure(todo[np.argsort(-per[todo], kind="stable")[:batch]])
            batch *= 2
    over = per - (tri_limit + allowance)
    worst = int(np.argmax(per / tri_limit)) if len(per) else 0
    failures = []
    bad = np.flatnonzero(over > 0)
    for c in np.unique(tri_chunk[bad]):
        in_c = bad[tri_chunk[bad] == c]
        t = in_c[np.argmax(per[in_c])]
        failures.append(
            f"chunk {int(c)}: {len(in_c)} triangle(s) beyond the tolerance, worst "
            f"{_fmt(per[t])} m > {_fmt(tri_limit[t])} m near "
            f"{_xyz(positions[tris[t]].mean(axis=0))}"
        )
    if claim_problem is not None:
        failures.append(claim_problem)
    if understated is not None and claim is not None:
        t = understated
        failures.append(
            f"{_where(level)}: the report understates the error: it says max_error_m "
            f"{_fmt(claim)} m, the check measures {_fmt(per_grid[t])} m (more than "
            f"{_fmt(claim_limit)} m: {REPORT_SAMPLING_SLACK:.0%} for sampling and "
            f"{_fmt(allowance)} m for float32) in chunk {int(tri_chunk[t])} near "
            f"{_xyz(positions[tris[t]].mean(axis=0))}"
        )
    limit = float(tri_limit.min()) if len(tri_limit) else 0.0
    value = float(per.max()) if len(per) else 0.0
    details: dict[str, Any] = {
        "max_m": value,
        "tolerance_m": limit,
        "mesh_to_surface_m": float(dev["mesh_to_surface_m"]),
        "surface_to_mesh_bound_m": float(dev["surface_to_mesh_m"]),
        "remeasured_triangles": int(remeasured.sum()),
        "samples": int(dev["samples"]),
        "triangles": int(len(tris)),
        "triangles_beyond": int(len(bad)),
    }
    if claimed is not None:
        details["reported_max_error_m"] = claimed
    if check_claim:
        details["report_understated"] = understated is not None or claim_problem is not None
    return _result(
        name,
        level,
        failures,
        value=value,
        limit=limit,
        unit="m",
        summary=f"{_fmt(value)} m / {_fmt(limit)} m",
        where=f"chunk {int(tri_chunk[worst])}" if len(per) else "",
        details=details,
    )


def check_topology(
    positions: F64, tris: I64, tri_chunk: I64, *, name: str, level: int | str, min_area_m2: float
) -> CheckResult:
    """Welded mesh: closed, manifold, oriented, one piece, no zero-area triangle, V - E + F = 2."""
    topo = topology(positions, tris, min_area_m2)
    failures: list[str] = []
    chunk_of_vertex = np.zeros(len(positions), np.int64)
    chunk_of_vertex[tris.reshape(-1)] = np.repeat(tri_chunk, 3)

    def place(pairs: I64) -> list[str]:
        out = []
        for a in pairs[:MAX_LISTED, 0]:
            out.append(f"chunk {int(chunk_of_vertex[a])} at {_xyz(positions[a])}")
        return out

    if len(topo.open_edges):
        tj = t_junctions(positions, topo.open_edges)
        where = [
            f"chunk {int(tri_chunk[t])} at {_xyz(positions[a])}"
            for t, a in zip(topo.open_triangles[:6], topo.open_edges[:6, 0], strict=True)
        ]
        failures.append(
            f"{len(topo.open_edges)} open edge(s) (holes or cracks), {len(tj)} of them "
            "T-junctions: " + "; ".join(where)
        )
    if len(topo.overused_edges):
        failures.append(
            f"{len(topo.overused_edges)} edge(s) used by 3+ triangles (non-manifold): "
            + "; ".join(place(topo.overused_edges)[:4])
        )
    if len(topo.flipped_edges):
        failures.append(
            f"{len(topo.flipped_edges)} edge(s) used twice in one direction (flipped "
            "triangles): " + "; ".join(place(topo.flipped_edges)[:4])
        )
    if len(topo.degenerate):
        t = topo.degenerate[:4]
        failures.append(
            f"{len(topo.degenerate)} zero-area triangle(s): "
            + "; ".join(f"chunk {int(tri_chunk[i])} triangle {int(i)}" for i in t)
        )
    if topo.components != 1:
        failures.append(f"{topo.components} separate pieces, expected 1")
    # Euler's polyhedron formula: a closed surface of genus 0 has V - E + F = 2
    if topo.euler != 2:
        failures.append(
            f"V - E + F = {topo.vertices} - {topo.edges} + {topo.faces} = {topo.euler}, "
            "expected 2 (Euler's polyhedron formula for a sphere)"
        )
    bad = (
        len(topo.open_edges)
        + len(topo.overused_edges)
        + len(topo.flipped_edges)
        + len(topo.degenerate)
    )
    return _result(
        name,
        level,
        failures,
        value=float(bad),
        limit=0.0,
        unit="defects",
        summary=(
            f"V-E+F={topo.euler}, open {len(topo.open_edges)}, non-manifold "
            f"{len(topo.overused_edges) + len(topo.flipped_edges)}"
        ),
        details={
            "vertices": topo.vertices,
            "edges": topo.edges,
            "faces": topo.faces,
            "euler_characteristic": topo.euler,
            "open_edges": int(len(topo.open_edges)),
            "overused_edges": int(len(topo.overused_edges)),
            "flipped_edges": int(len(topo.flipped_edges)),
            "degenerate_triangles": int(len(topo.degenerate)),
            "components": topo.components,
        },
    )


def _keys(pairs: I64) -> I64:
    return (pairs[:, 0] << 32) | pairs[:, 1]


def _marks(ids: I64, size: int) -> npt.NDArray[np.bool_]:
    m = np.zeros(size, bool)
    m[ids] = True
    return m


def seam_pair_mismatch(variant: I64, neighbour: I64) -> tuple[I64, I64, int, I64]:
    """Compare a chunk's stitched variant with a coarser neighbour along their shared edge.

    Both are (t, 3) triangles in welded ids. The shared edge is found without the mesher's
    bookkeeping: border edges (used once) of one side whose two ends are vertices of the other.
    Returns (variant edges with no reversed twin on the neighbour, neighbour edges with no
    twin on the variant, matched edges, ends of the matched chain): the matched edges must
    make one chain from corner to corner, so other ends mark a gap (a vertex that only one
    side has, e.g. moved off the other's).
    """
    size = int(max(variant.max(initial=-1), neighbour.max(initial=-1))) + 1
    vb = boundary_edges(variant)
    nb = boundary_edges(neighbour)
    v_side = vb[_marks(neighbour.reshape(-1), size)[vb].all(axis=1)]
    n_side = nb[_marks(variant.reshape(-1), size)[nb].all(axis=1)]
    v_keys = _keys(v_side)
    n_rev = _keys(n_side[:, ::-1])
    v_ok = np.isin(v_keys, n_rev)
    chain = v_side[v_ok]
    ids, degree = np.unique(chain, return_counts=True)
    return v_side[~v_ok], n_side[~np.isin(n_rev, v_keys)], int(v_ok.sum()), ids[degree == 1]


def open_border_edges(chunk_tris: I64, neighbour_tris: list[I64]) -> I64:
    """Edges between vertices of a chunk left open, doubled or flipped when the chunk is drawn
    beside the given neighbour meshes (all (t, 3) welded ids): (o, 2) vertex pairs."""
    size = int(max(t.max(initial=-1) for t in [chunk_tris, *neighbour_tris])) + 1
    mine = _marks(chunk_tris.reshape(-1), size)
    # a neighbour triangle without a vertex of the chunk has no edge between two of them
    near = [t[mine[t].any(axis=1)] for t in neighbour_tris]
    allt = np.concatenate([chunk_tris, *near])
    _, key, forward = _edge_keys(allt)
    uniq, inv, counts = np.unique(key, return_inverse=True, return_counts=True)
    fwd = np.bincount(inv, weights=forward.astype(np.float64), minlength=len(uniq))
    lo, hi = uniq >> 32, uniq & 0xFFFFFFFF
    sel = ((counts != 2) | (fwd != 1)) & mine[lo] & mine[hi]
    return np.stack([lo[sel], hi[sel]], axis=1)


def check_seams(world: World, level: int) -> list[CheckResult]:
    """Seams of `level` against `level + 1`: each edge on its own, then every edge mask."""
    pos = world.welded.astype(np.float64)
    chunks = world.chunks
    full = [[cl.gid[cl.triangles] for cl in levels] for levels in chunks]
    pair_fail: list[str] = []
    mask_fail: list[str] = []
    matched = pairs = variants = 0
    worst_pair = worst_mask = 0
    where_pair = where_mask = ""
    for c, levels in enumerate(chunks):
        cl = levels[level]
        nbrs = cl.neighbors
        for i, n in enumerate(nbrs):
            var = cl.gid[cl.variant(1 << i)]
            v_miss, n_miss, m, ends = seam_pair_mismatch(var, full[n][level + 1])
            # the corners of the shared edge: on both sides and on a chunk across another edge
            others = [
                full[o][lv] for j, o in enumerate(nbrs) if j != i for lv in (level, level + 1)
            ]
            corners = np.intersect1d(
                np.intersect1d(var, full[n][level + 1]), np.concatenate([o.ravel() for o in others])
            )
            matched += m
            pairs += 1
            broken = len(corners) != 2 or not np.array_equal(np.sort(ends), corners)
            bad = len(v_miss) + len(n_miss) + int(broken)
            if bad == 0 and m > 0:
                continue
            head = f"chunk {c} edge {i} at level {level} beside chunk {n} at level {level + 1}: "
            if len(v_miss) + len(n_miss):
                at = v_miss[0, 0] if len(v_miss) else n_miss[0, 0]
                pair_fail.append(
                    head + f"{len(n_miss)} border edge(s) of chunk {n} and {len(v_miss)} of the "
                    f"stitched variant have no partner (crack or T-junction) near {_xyz(pos[at])}"
                )
            elif m == 0:
                pair_fail.append(head + "no shared border edge found")
            else:
                gap = np.setdiff1d(ends, corners)
                at = gap[0] if len(gap) else ends[0]
                pair_fail.append(
                    head + f"the matched border does not run corner to corner ({len(corners)} "
                    f"shared corner(s), {len(ends)} chain ends): a gap near {_xyz(pos[at])}"
                )
            if bad >= worst_pair:
                worst_pair, where_pair = bad, f"chunk {c} edge {i}"
        for mask in range(1, 8):
            var = cl.gid[cl.variant(mask)]
            around = [full[n][level + 1 if (mask >> i) & 1 else level] for i, n in enumerate(nbrs)]
            open_e = open_border_edges(var, around)
            variants += 1
            if len(open_e):
                edges = [i for i in range(len(nbrs)) if (mask >> i) & 1]
                mask_fail.append(
                    f"chunk {c} at level {level}, mask {mask} (edges {edges} beside level "
                    f"{level + 1}): {len(open_e)} edge(s) open, doubled or flipped (crack, "
                    f"hole or overlap) near {_xyz(pos[open_e[0, 0]])}"
                )
                if len(open_e) > worst_mask:
                    worst_mask, where_mask = len(open_e), f"chunk {c} mask {mask}"
    return [
        _result(
            "seam per edge",
            level,
            pair_fail,
            value=float(worst_pair),
            limit=0.0,
            unit="unmatched edges",
            summary=f"{len(pair_fail)} of {pairs} chunk edges fail ({matched} edges matched)",
            where=where_pair,
            details={"chunk_edges": pairs, "matched_edges": matched, "failing": len(pair_fail)},
        ),
        _result(
            "seam every mask",
            level,
            mask_fail,
            value=float(worst_mask),
            limit=0.0,
            unit="open edges",
            summary=f"{len(mask_fail)} of {variants} variants leave bad edges",
            where=where_mask,
            details={"variants": variants, "failing": len(mask_fail)},
        ),
    ]


def check_morph(world: World, level: int, allowance: float) -> CheckResult:
    """Morph positions of `level` against the same chunk's `level + 1` triangles."""
    limit = MORPH_TOLERANCE_M + allowance
    pts, pgroup, tris, tgroup = [], [], [], []
    missing = []
    for c, levels in enumerate(world.chunks):
        cl, coarse = levels[level], levels[level + 1]
        if cl.morph is None:
            missing.append(c)
            continue
        used = np.unique(cl.triangles)
        pts.append(cl.morph[used])
        pgroup.append(np.full(len(used), c, np.int64))
        tris.append(coarse.positions.astype(np.float64)[coarse.triangles])
        tgroup.append(np.full(len(coarse.triangles), c, np.int64))
    failures = [f"chunk {c} at level {level} has no morph target" for c in missing]
    worst, where = 0.0, ""
    count = 0
    if pts:
        p, pg = np.concatenate(pts), np.concatenate(pgroup)
        d = point_mesh_distance(p, pg, np.concatenate(tris), np.concatenate(tgroup), limit)
        count = len(d)
        if len(d):
            w = int(np.argmax(d))
            worst, where = float(d[w]), f"chunk {int(pg[w])}"
        bad = np.flatnonzero(d > limit)
        for c in np.unique(pg[bad]):
            in_c = bad[pg[bad] == c]
            v = in_c[np.argmax(d[in_c])]
            failures.append(
                f"chunk {int(c)} at level {level}: {len(in_c)} morph position(s) off level "
                f"{level + 1}, worst {_fmt(d[v])} m at {_xyz(p[v])}"
            )
    return _result(
        "morph on coarser",
        level,
        failures,
        value=worst,
        limit=limit,
        unit="m",
        summary=f"{_fmt(worst)} m / {_fmt(limit)} m",
        where=where,
        details={"vertices": count, "chunks_without_target": len(missing)},
    )


def _welded_level(world: World, level: int) -> tuple[I64, I64, F64]:
    """Triangles (welded ids), their chunk and the stated tolerance of each."""
    tris, chunk, tol = [], [], []
    for c, levels in enumerate(world.chunks):
        cl = levels[level]
        tris.append(cl.gid[cl.triangles])
        chunk.append(np.full(len(cl.triangles), c, np.int64))
        tol.append(np.full(len(cl.triangles), cl.tolerance_m))
    return np.concatenate(tris), np.concatenate(chunk), np.concatenate(tol)


def check_report(report: dict[str, Any], world: World, collider_tris: int | None) -> CheckResult:
    """The report states what the files hold: levels, tolerances and counts."""
    failures = []
    lods = report.get("lods") or []
    if len(lods) != world.levels:
        failures.append(f"report lists {len(lods)} levels, the .glb holds {world.levels}")
    for k in range(min(len(lods), world.levels)):
        lv = lods[k]
        tris, _, tol = _welded_level(world, k)
        file_tols = sorted({float(t) for t in np.unique(tol)})
        if file_tols != [float(lv.get("tolerance_m", math.nan))]:
            failures.append(
                f"level {k}: report tolerance {lv.get('tolerance_m')} m, mesh extras say "
                f"{', '.join(_fmt(t) for t in file_tols)} m"
            )
        if lv.get("triangles") != len(tris):
            failures.append(
                f"level {k}: report counts {lv.get('triangles')} triangles, the .glb {len(tris)}"
            )
        nv = len(np.unique(tris))
        if lv.get("vertices") != nv:
            failures.append(
                f"level {k}: report counts {lv.get('vertices')} vertices, the .glb {nv} (welded)"
            )
        if lv.get("chunks") not in (None, len(world.chunks)):
            failures.append(
                f"level {k}: report counts {lv.get('chunks')} chunks, the .glb has "
                f"{len(world.chunks)}"
            )
    col = report.get("collision")
    if col and collider_tris is not None and col.get("triangles") != collider_tris:
        failures.append(
            f"collision: report counts {col.get('triangles')} triangles, the file {collider_tris}"
        )
    return _result(
        "report matches files",
        "-",
        failures,
        value=float(len(failures)),
        limit=0.0,
        unit="mismatches",
        summary=f"{len(failures)} mismatch(es)",
    )


def _scene_extras(glb: Glb) -> dict[str, Any]:
    try:
        extras = glb.doc["scenes"][glb.doc.get("scene", 0)].get("extras", {})
    except (KeyError, IndexError, TypeError, AttributeError):
        raise CheckInputError(f"{glb.name}: no scene") from None
    return extras if isinstance(extras, dict) else {}


def check_provenance(spec: WorldSpec, files: dict[str, dict[str, Any]]) -> CheckResult:
    """Every file names the spec it was baked from by its content hash (`provenance`): each must
    carry the hash of `spec`. `files` maps a file name to its metadata (the report, or a .glb's
    scene extras). Files without a hash (bakes of an older globemill) fail too: nothing ties
    them to the spec. The globemill version of each file is listed, not checked."""
    want = spec_hash(spec)
    failures = []
    other = False
    hashes: dict[str, Any] = {}
    versions: dict[str, Any] = {}
    for fname, meta in files.items():
        got = meta.get(SPEC_HASH_KEY)
        hashes[fname] = got
        versions[fname] = meta.get(VERSION_KEY)
        if got is None:
            failures.append(
                f"{fname}: no spec hash ({SPEC_HASH_KEY}): an older bake, or not a bake of "
                "this globemill; bake again to check it"
            )
        elif got != want:
            other = True
            failures.append(
                f"{fname}: baked from another spec (file {short_hash(str(got))}, spec "
                f"{short_hash(want)})"
            )
    if other:
        summary = f"baked from another spec (spec {short_hash(want)})"
    elif failures:
        summary = f"{len(failures)} file(s) without a spec hash"
    else:
        summary = f"spec {short_hash(want)}"
    return _result(
        "baked from this spec",
        "-",
        failures,
        value=float(len(failures)),
        limit=0.0,
        unit="files",
        summary=summary,
        details={
            "spec_sha256": want,
            "files_spec_sha256": hashes,
            "files_globemill": versions,
            "other_spec": other,
        },
    )


def _read_report(path: Path) -> dict[str, Any]:
    try:
        rep = json.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise CheckInputError(f"{path}: missing (bake writes it beside the .glb)") from None
    except (UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise CheckInputError(f"{path}: not valid JSON ({exc})") from None
    if not isinstance(rep, dict) or not isinstance(rep.get("lods"), list):
        raise CheckInputError(f"{path}: not a bake report (no 'lods' list)")
    return rep


def _read(path: Path) -> Glb:
    if not path.is_file():
        raise CheckInputError(f"{path}: missing")
    return read_glb(path)


def run_check(
    spec: WorldSpec | str | Path,
    outdir: str | Path,
    *,
    threads: int = 0,
    order: int = MEASURE_ORDER,
) -> CheckReport:
    """Read `<name>.glb`, `<name>.collision.glb` and `<name>.report.json` from `outdir` and
    measure every guarantee. Raises CheckInputError (or SpecError) when the input is unusable."""
    from .field import Field

    spec_label = str(spec) if not isinstance(spec, WorldSpec) else spec.name
    if not isinstance(spec, WorldSpec):
        spec = load_spec(spec)
    out = Path(outdir)
    if not out.is_dir():
        raise CheckInputError(f"{out}: no such output folder")
    name = spec.name
    report = _read_report(out / f"{name}.report.json")
    if report.get("planet", name) != name:
        raise CheckInputError(
            f"{out / f'{name}.report.json'}: a bake of {report.get('planet')!r}, not {name!r}"
        )
    main_glb = _read(out / f"{name}.glb")
    col_glb = _read(out / f"{name}.collision.glb") if report.get("collision") else None
    files = {f"{name}.report.json": report, f"{name}.glb": _scene_extras(main_glb)}
    if col_glb is not None:
        files[f"{name}.collision.glb"] = _scene_extras(col_glb)
    origin = check_provenance(spec, files)
    if origin.details["other_spec"]:
        # measuring the files against another world's surface would only add noise
        return CheckReport(spec_label, str(out), name, 0.0, [origin])
    radius = report.get("radius_m")
    if radius is not None and not math.isclose(float(radius), spec.radius_m, rel_tol=1e-12):
        raise CheckInputError(
            f"report radius_m {radius} differs from the spec's {spec.radius_m}: wrong spec?"
        )
    world = read_world(main_glb)
    colliders = read_colliders(col_glb) if col_glb is not None else None
    fld = Field(spec)
    everything = [world.welded] + (colliders[1] if colliders else [])
    allowance = max(float32_allowance(p) for p in everything)
    pos = world.welded.astype(np.float64)
    min_area = 1e-12 * spec.radius_m**2  # twice this is "zero" area at float32 precision
    checks: list[CheckResult] = [origin]
    lods = report["lods"]
    stitched = report.get("seams", "stitch") == "stitch"
    if not stitched:
        checks.append(split_skirts(world, fld, _skirt_depth(spec, report)))
    for k in range(world.levels):
        tris, chunk, tol = _welded_level(world, k)
        stated = tol
        claimed = None
        if k < len(lods) and isinstance(lods[k], dict) and "tolerance_m" in lods[k]:
            # the smaller of the two statements of this level's tolerance
            stated = np.minimum(tol, float(lods[k]["tolerance_m"]))
            claimed = lods[k].get("max_error_m")
        checks.append(
            check_deviation(
                fld._core,
                pos,
                tris,
                chunk,
                stated,
                allowance,
                name="deviation",
                level=k,
                threads=threads,
                order=order,
                claimed=claimed,
                check_claim=k < len(lods),
            )
        )
        checks.append(
            check_topology(pos, tris, chunk, name="watertight", level=k, min_area_m2=min_area)
        )
        if k + 1 < world.levels:
            # a quantized file rounds the morph position and the coarser triangle each by up to
            # sqrt(3)/2 of its grid step
            checks.append(check_morph(world, k, allowance + math.sqrt(3) * world.quant_step_m))
            if stitched:
                checks.extend(check_seams(world, k))
            else:
                checks.append(
                    _skipped("seams", k, "skirts: only their presence is checked (level -)")
                )
    if colliders is not None:
        col = report["collision"]
        cchunks, cpos, ctris = colliders
        cw, inv = weld(np.concatenate(cpos))
        starts = np.cumsum([0] + [len(p) for p in cpos])
        ct = np.concatenate([inv[starts[i] : starts[i + 1]][t] for i, t in enumerate(ctris)])
        cc = np.concatenate(
            [np.full(len(t), c, np.int64) for c, t in zip(cchunks, ctris, strict=True)]
        )
        cpos64 = cw.astype(np.float64)
        if not isinstance(col, dict) or not isinstance(col.get("tolerance_m"), (int, float)):
            raise CheckInputError("report: collision has no tolerance_m")
        tol_c = float(col["tolerance_m"])
        checks.append(
            check_deviation(
                fld._core,
                cpos64,
                ct,
                cc,
                np.full(len(ct), tol_c),
                allowance,
                name="deviation",
                level="collision",
                threads=threads,
                order=order,
                claimed=col.get("max_error_m"),
                check_claim=True,
            )
        )
        checks.append(
            check_topology(
                cpos64, ct, cc, name="watertight", level="collision", min_area_m2=min_area
            )
        )
    checks.append(
        check_report(report, world, sum(len(t) for t in colliders[2]) if colliders else None)
    )
    return CheckReport(
        spec=spec_label,
        outdir=str(out),
        planet=name,
        allowance_m=allowance,
        checks=checks,
    )


def _skirt_depth(spec: WorldSpec, report: dict[str, Any]) -> float:
    if spec.lod.skirt_depth_m > 0:
        return float(spec.lod.skirt_depth_m)
    # the bake's default: twice the coarsest level's tolerance
    return 2.0 * float(report["lods"][-1]["tolerance_m"])


def split_skirts(world: World, fld: Any, depth: float) -> CheckResult:
    """Bakes with skirts append skirt triangles to each primitive. The surface vertices lie on
    the ground, skirt vertices `depth` below it: triangles with a vertex more than half the
    depth off the ground are taken out of `triangles` (kept in `ChunkLevel.skirt`), and every
    border edge of the remaining surface must carry a skirt quad (two triangles)."""
    failures = []
    total = 0
    for c, levels in enumerate(world.chunks):
        for cl in levels:
            p = cl.positions.astype(np.float64)
            r = np.linalg.norm(p, axis=1)
            off = np.abs(r - fld.radius_m - fld.height(p / r[:, None])) > depth / 2
            sk = off[cl.triangles].any(axis=1)
            cl.skirt = cl.triangles[sk]
            cl.triangles = cl.triangles[~sk]
            cl.interior = min(cl.interior, len(cl.triangles))
            border = len(boundary_edges(cl.triangles))
            total += len(cl.skirt)
            if len(cl.skirt) != 2 * border:
                failures.append(
                    f"chunk {c} at level {cl.level}: {len(cl.skirt)} skirt triangles for "
                    f"{border} border edges (expected two per edge)"
                )
    return _result(
        "skirts",
        "-",
        failures,
        value=float(len(failures)),
        limit=0.0,
        unit="chunks",
        summary=f"{total} skirt triangles, {len(failures)} chunk level(s) short",
    )


def _skipped(name: str, level: int | str, why: str) -> CheckResult:
    return _result(name, level, [], value=None, limit=None, unit="", summary=why, status="skipped")
