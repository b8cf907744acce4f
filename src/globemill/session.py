"""Live editing: keep a world's meshes and re-mesh only what a feature edit touches.

The session itself lives in the C++ core (csrc/session.cpp), the same one the C ABI's gm_edit_*
calls use: an edit builds the world's bisection hierarchy again, but every node clear of the edited
feature's old and new footprints takes its tests and measurements from the previous hierarchy
instead of computing them (they depend only on the ground near the node, which did not change),
and every chunk whose triangles, vertices and borders map one to one onto the previous ones keeps
its stitched borders and its buffers. The result is, bit for bit, what `bake` makes of the edited
spec; the edit reports the chunks whose arrays changed, so an engine uploads only those. This
module edits the spec (validated as any spec is) and hands the new ground to the core.

Thread contract: an EditSession may be used from several threads; its calls run one at a time
(each holds the session's lock), and a result read before an edit stays valid and unchanged.
"""

from __future__ import annotations

import functools
import math
import threading
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from typing import Any, TypeVar

import numpy as np
import numpy.typing as npt

from . import _core
from .attributes import layer_rows
from .bake import BakeResult, ChunkMesh, _wrap, named_features, settings
from .field import Field
from .spec import Feature, Ridge, WorldSpec, parse_spec, unit_vector


@dataclass
class EditReport:
    """What one edit changed.

    changed : {level: [chunk, ...]} the chunks whose arrays (positions, normals, morph targets,
        triangles, stitched borders, skirts) differ from before, ascending; levels with none
        are left out
    colliders : chunks whose collider changed (empty when the session has no colliders)
    seconds : wall time of the edit
    reused / tested : triangle tests taken from the previous hierarchy / run in all
    """

    changed: dict[int, list[int]]
    colliders: list[int]
    seconds: float
    reused: int
    tested: int
    stats: dict[str, Any] = field(default_factory=dict)

    @property
    def chunk_count(self) -> int:
        """Chunk meshes to upload (every level)."""
        return sum(len(v) for v in self.changed.values())


def _rotation(a: npt.NDArray[np.float64], b: npt.NDArray[np.float64]) -> npt.NDArray[np.float64]:
    """The rotation (3, 3) taking unit vector a to unit vector b about their common normal
    (Rodrigues' rotation formula); the identity when they coincide."""
    v = np.cross(a, b)
    s = float(np.linalg.norm(v))
    c = float(np.dot(a, b))
    if s < 1e-15:
        if c > 0:
            return np.eye(3)
        # half turn about any axis perpendicular to a
        p = np.cross(a, [1.0, 0.0, 0.0] if abs(a[0]) < 0.9 else [0.0, 1.0, 0.0])
        p /= np.linalg.norm(p)
        return 2.0 * np.outer(p, p) - np.eye(3)
    k = v / s
    kx = np.array([[0, -k[2], k[1]], [k[2], 0, -k[0]], [-k[1], k[0], 0]])
    return np.eye(3) + s * kx + (1 - c) * (kx @ kx)


def _to_lat_lon(u: npt.NDArray[np.float64]) -> tuple[float, float]:
    """Latitude and longitude (degrees) of a unit vector: the inverse of spec.unit_vector,
    u = (cos φ sin λ, sin φ, cos φ cos λ) (docs/terrain.md)."""
    lat = math.degrees(math.asin(max(-1.0, min(1.0, float(u[1])))))
    lon = math.degrees(math.atan2(float(u[0]), float(u[2])))
    return lat, lon


def _direction(direction: Any) -> npt.NDArray[np.float64]:
    """A unit vector from (lat_deg, lon_deg) or an (x, y, z) direction."""
    try:
        d = np.asarray(direction, dtype=np.float64).reshape(-1)
    except (TypeError, ValueError):
        raise ValueError(
            f"direction: must be (lat_deg, lon_deg) or a unit vector (x, y, z), got {direction!r}"
        ) from None
    if d.size == 2 and np.all(np.isfinite(d)):
        if not (-90.0 <= d[0] <= 90.0 and -180.0 <= d[1] <= 180.0):
            raise ValueError(
                "direction: (lat_deg, lon_deg) must have lat in [-90, 90] and lon in "
                f"[-180, 180], got {tuple(float(x) for x in d)}"
            )
        return np.asarray(unit_vector(float(d[0]), float(d[1])), dtype=np.float64)
    if d.size == 3 and np.all(np.isfinite(d)) and np.linalg.norm(d) > 0:
        return d / np.linalg.norm(d)
    raise ValueError(
        f"direction: must be (lat_deg, lon_deg) or a finite non-zero (x, y, z), got {direction!r}"
    )


_F = TypeVar("_F", bound=Callable[..., Any])


def _serialised(method: _F) -> _F:
    """Run the method holding the session's lock: concurrent edits run one after another."""

    @functools.wraps(method)
    def run(self: EditSession, *args: Any, **kwargs: Any) -> Any:
        with self._lock:
            return method(self, *args, **kwargs)

    return run  # type: ignore[return-value]


class EditSession:
    """A world kept in memory for live editing.

    >>> s = EditSession(spec)                       # bakes once, like `bake(spec)`
    >>> r = s.move_feature(3, (12.5, 20.0))         # feature 3's centre to lat 12.5, lon 20
    >>> for level, chunks in r.changed.items():
    ...     for c in chunks:
    ...         upload(s.chunk(level, c))           # ChunkMesh: only these changed

    Every edit validates the edited spec first (a bad value raises ValueError naming the field
    and the allowed range, and the session stays as it was), then re-meshes: after any sequence
    of edits `result` equals `bake(spec)` of the current spec, array for array, bit for bit.
    Options are those of `bake` and stay fixed for the session; colliders are off by default
    (with them, every edit rebuilds all colliders).
    """

    def __init__(
        self,
        spec: WorldSpec,
        *,
        tolerance_m: float | None = None,
        offset: str | None = None,
        levels: int | None = None,
        ratio: float | None = None,
        chunk_level: int | None = None,
        seams: str | None = None,
        collision: bool = False,
        threads: int = 0,
        accept_over_tolerance: bool = False,
    ) -> None:
        self._settings = settings(
            spec,
            tolerance_m=tolerance_m,
            offset=offset,
            levels=levels,
            ratio=ratio,
            chunk_level=chunk_level,
            seams=seams,
            collision=collision,
            threads=threads,
            accept_over_tolerance=accept_over_tolerance,
        )
        self._lock = threading.RLock()
        self._spec = spec
        with named_features(spec):
            self._core = _core.EditSession(Field(spec)._core, self._settings)
        self._result = _wrap(spec, self._settings, self._core.result())

    # ---- reading ---------------------------------------------------------------------------

    @property
    def spec(self) -> WorldSpec:
        """The current spec (with every edit so far)."""
        return self._spec

    @property
    def result(self) -> BakeResult:
        """The current meshes, as `bake(spec)` would return them."""
        return self._result

    @property
    def chunk_count(self) -> int:
        return len(self._result.chunk_corners)

    def chunk(self, level: int, chunk: int) -> ChunkMesh:
        """One chunk at one level (its arrays are shared, not copied; an edit replaces the
        ChunkMesh of a changed chunk and leaves the old one as it was)."""
        levels = self._result.levels
        if not isinstance(level, int) or not 0 <= level < len(levels):
            raise ValueError(f"level: must be an integer in 0..{len(levels) - 1}, got {level!r}")
        n = self.chunk_count
        if not isinstance(chunk, int) or not 0 <= chunk < n:
            raise ValueError(f"chunk: must be an integer in 0..{n - 1}, got {chunk!r}")
        return levels[level].chunks[chunk]

    # ---- edits -----------------------------------------------------------------------------

    @_serialised
    def set_feature(self, index: int, **changes: Any) -> EditReport:
        """Change fields of feature `index` (e.g. ``sigma_m=90.0``; ``kind`` too, with the
        fields the new kind needs)."""
        self._check_index(index)
        if not changes:
            raise ValueError("set_feature: give at least one field to change")
        features = self._features()
        features[index] = {**features[index], **changes}
        return self._edit(features)

    @_serialised
    def add_feature(
        self, feature: Mapping[str, Any] | Feature, *, index: int | None = None
    ) -> EditReport:
        """Insert a feature (a mapping as in the spec file, or a feature model) before `index`
        (default: last, so it applies after every other)."""
        features = self._features()
        n = len(features)
        at = n if index is None else index
        if not isinstance(at, int) or isinstance(at, bool) or not 0 <= at <= n:
            raise ValueError(f"index: must be an integer in 0..{n}, got {index!r}")
        row = feature.model_dump(mode="json") if hasattr(feature, "model_dump") else dict(feature)
        features.insert(at, row)
        return self._edit(features)

    @_serialised
    def remove_feature(self, index: int) -> EditReport:
        """Remove feature `index`."""
        self._check_index(index)
        features = self._features()
        del features[index]
        return self._edit(features)

    @_serialised
    def move_feature(self, index: int, direction: Any) -> EditReport:
        """Move feature `index` so that its centre lies at `direction`: (lat_deg, lon_deg) or a
        unit vector. A ridge moves as a whole (both ends turn about the same axis); a block
        keeps its heading relative to north. Noise has no centre and cannot be moved."""
        self._check_index(index)
        target = _direction(direction)
        f = self._spec.features[index]
        row = f.model_dump(mode="json")
        if isinstance(f, Ridge):
            c0, c1 = (np.asarray(x, dtype=np.float64) for x in f.endpoints())
            mid = c0 + c1
            mid /= np.linalg.norm(mid)
            rot = _rotation(mid, target)
            (row["lat0_deg"], row["lon0_deg"]) = _to_lat_lon(rot @ c0)
            (row["lat1_deg"], row["lon1_deg"]) = _to_lat_lon(rot @ c1)
        elif "lat_deg" in row:
            row["lat_deg"], row["lon_deg"] = _to_lat_lon(target)
        else:
            raise ValueError(f"features[{index}]: a {row['kind']} feature has no centre to move")
        features = self._features()
        features[index] = row
        return self._edit(features)

    @_serialised
    def replace(self, spec: WorldSpec) -> EditReport:
        """Take another spec of the same world (same radius, tolerance, levels and chunks; any
        features): the footprints of every feature that differs are re-meshed."""
        if spec.model_dump(exclude={"features", "layers", "name"}) != self._spec.model_dump(
            exclude={"features", "layers", "name"}
        ):
            raise ValueError(
                "spec: only features, layers and name may differ from the session's spec"
            )
        return self._apply(spec)

    # ---- internals -------------------------------------------------------------------------

    def _check_index(self, index: Any) -> None:
        n = len(self._spec.features)
        if not isinstance(index, int) or isinstance(index, bool) or not 0 <= index < n:
            hi = f"0..{n - 1}" if n else "none (the spec has no features)"
            raise ValueError(f"index: must be an integer in {hi}, got {index!r}")

    def _features(self) -> list[dict[str, Any]]:
        return [f.model_dump(mode="json", exclude_none=True) for f in self._spec.features]

    def _edit(self, features: list[dict[str, Any]]) -> EditReport:
        data = self._spec.model_dump(mode="json", exclude_none=True)
        data["features"] = features
        return self._apply(parse_spec(data, source="edit"))

    def _apply(self, spec: WorldSpec) -> EditReport:
        with named_features(spec):
            done = self._core.update(Field(spec)._core, layer_rows(spec.layers))
        result = _wrap(spec, self._settings, self._core.result(), self._result)
        self._spec, self._result = spec, result
        changed: dict[int, list[int]] = {}
        for level, chunk in done["chunks"]:
            changed.setdefault(int(level), []).append(int(chunk))
        stats = dict(result.report["refine"])
        return EditReport(
            changed=changed,
            colliders=[int(c) for c in done["colliders"]],
            seconds=float(done["seconds"]),
            reused=int(stats.get("reused", 0)),
            tested=int(stats["tested"]),
            stats=stats,
        )
