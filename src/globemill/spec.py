"""World specs: load, validate and flatten the description of one world.

A world spec (TOML, or JSON of the same structure) names a base sphere and an ordered list of
features that displace it, plus material layer rules. The formulas behind every field are in
``docs/terrain.md``; this module only checks that a spec is well formed and hands the C++ core a
flat feature table (:meth:`WorldSpec.core_features`).

Everything here is pure Python on top of pydantic v2 and numpy; it never imports the C++ core.

Errors are reported as one :class:`SpecError` that lists every problem found, one per line, as
``path: what is wrong (allowed: range), got value``, e.g.
``features[3].sigma_m: must be > 0 (allowed: > 0), got -1``.
"""

from __future__ import annotations

import copy
import functools
import json
import math
import os
import re
import sys
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Annotated, Any, Literal

import numpy as np
import numpy.typing as npt
from pydantic import (
    AllowInfNan,
    BaseModel,
    ConfigDict,
    Field,
    Strict,
    ValidationError,
    field_validator,
    model_validator,
)

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover - exercised on Python 3.10 only
    import tomli as tomllib

__all__ = [
    "BLEND_CODES",
    "CORE_COLUMNS",
    "FEATURE_MODELS",
    "KIND_CODES",
    "PROFILE_CODES",
    "Block",
    "Crater",
    "Feature",
    "Hill",
    "Layer",
    "Mesa",
    "Noise",
    "Ridge",
    "SpecError",
    "WorldSpec",
    "json_schema",
    "load_spec",
    "parse_spec",
    "unit_vector",
]

# --------------------------------------------------------------------------------------------
# codes shared with the C++ core (see the "core feature array" of the internal interface)

KIND_CODES: dict[str, int] = {"hill": 0, "mesa": 1, "block": 2, "crater": 3, "ridge": 4, "noise": 5}
BLEND_CODES: dict[str, int] = {
    "add": 0,
    "max": 1,
    "min": 2,
    "set": 3,
    "smooth_max": 4,
    "smooth_min": 5,
}
PROFILE_CODES: dict[str, int] = {"round": 0, "sharp": 1}
CORE_COLUMNS = 16
"""Number of float64 columns per feature in :meth:`WorldSpec.core_features`."""

SMOOTH_BLENDS = frozenset({"smooth_max", "smooth_min"})
MAX_BLOCK_ANGLE_DEG = 60.0
"""A block's footprint must stay within this angle of its centre (docs/terrain.md, Validity)."""
MAX_RIDGE_ARC_DEG = 179.0
MIN_RIDGE_ARC_DEG = 1e-6
"""Ridge end points closer than this (degrees) count as the same point."""
AMPLITUDE_LIMIT = 0.9
"""The sum of feature amplitudes must stay below this fraction of the base radius."""

_ANGLE_SLACK_DEG = 1e-9  # forgive round-off when comparing angles computed from degrees

# --------------------------------------------------------------------------------------------
# field types

FiniteFloat = Annotated[float, Strict(), AllowInfNan(False)]
"""A finite number; integers are accepted, booleans, strings, NaN and infinities are not."""
StrictInt = Annotated[int, Strict()]
StrictStr = Annotated[str, Strict()]
UnitFloat = Annotated[FiniteFloat, Field(ge=0.0, le=1.0)]
SlopeDeg = Annotated[FiniteFloat, Field(ge=0.0, le=90.0)]

Blend = Literal["add", "max", "min", "set", "smooth_max", "smooth_min"]
Offset = Literal["radial", "normal", "exact"]
Profile = Literal["round", "sharp"]

Vec3 = npt.NDArray[np.float64]


class SpecError(ValueError):
    """A world spec that cannot be read or is invalid.

    Attributes
    ----------
    source : str
        Where the spec came from (a file path, or the ``source`` given to :func:`parse_spec`).
    problems : list of str
        Every problem found, each ``path: what is wrong (allowed: range), got value``.
    """

    def __init__(self, source: str, problems: Sequence[str], *, what: str = "invalid world spec"):
        self.source = source
        self.problems = list(problems)
        if len(self.problems) == 1:
            message = f"{what} {source}: {self.problems[0]}"
        else:
            lines = "\n".join(f"  - {p}" for p in self.problems)
            message = f"{what} {source} ({len(self.problems)} problems):\n{lines}"
        super().__init__(message)


class _Problems(ValueError):
    """Raised by model validators: problems as (path relative to the model, text) pairs.

    The loader turns these into full paths; used directly through pydantic they still read well.
    """

    def __init__(self, problems: list[tuple[str, str]]):
        self.problems = problems
        super().__init__("; ".join(f"{path}: {text}" if path else text for path, text in problems))


def _num(value: float) -> str:
    """Format a number the way a person would write it in a spec."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if math.isfinite(value) and value == int(value) and abs(value) < 1e16:
        return str(int(value))
    return f"{value:.6g}" if math.isfinite(value) else repr(value)


def _got(value: Any) -> str:
    """Format an offending input value for a message (JSON-like, truncated)."""
    if value is None:
        text = "null"
    elif isinstance(value, bool):
        text = "true" if value else "false"
    elif isinstance(value, int):
        text = str(value)
    elif isinstance(value, float):
        text = repr(value)
    elif isinstance(value, str):
        text = json.dumps(value)
    else:
        try:
            text = json.dumps(value, allow_nan=True, default=repr)
        except (TypeError, ValueError):
            text = repr(value)
    return text if len(text) <= 80 else text[:77] + "..."


def _problem(what: str, allowed: str, got: Any = ..., *, exact_got: str | None = None) -> str:
    """One problem line (without its path): ``what (allowed: ...), got ...``."""
    text = f"{what} (allowed: {allowed})"
    if exact_got is not None:
        return f"{text}, got {exact_got}"
    if got is not ...:
        return f"{text}, got {_got(got)}"
    return text


# --------------------------------------------------------------------------------------------
# geometry helpers (docs/terrain.md, "Frame and directions")


def _sin_cos_deg(angle_deg: float) -> tuple[float, float]:
    """sin and cos of an angle in degrees, exact at multiples of 90 degrees."""
    if angle_deg % 90.0 == 0.0:
        quadrant = int(angle_deg // 90.0) % 4
        return ((0.0, 1.0), (1.0, 0.0), (0.0, -1.0), (-1.0, 0.0))[quadrant]
    rad = math.radians(angle_deg)
    return math.sin(rad), math.cos(rad)


def unit_vector(lat_deg: float, lon_deg: float) -> Vec3:
    """Direction ``u(φ, λ) = (cos φ · sin λ, sin φ, cos φ · cos λ)`` of docs/terrain.md.

    Y is up; (0°, 0°) is +Z, (0°, 90°) is +X, (90°, ·) is +Y. Multiples of 90° are exact.

    Returns
    -------
    u : (3,) float64
    """
    sin_lat, cos_lat = _sin_cos_deg(lat_deg)
    sin_lon, cos_lon = _sin_cos_deg(lon_deg)
    return np.array([cos_lat * sin_lon, sin_lat, cos_lat * cos_lon], dtype=np.float64)


def _angle(a: Vec3, b: Vec3) -> float:
    """Angle between unit vectors, ``atan2(|a × b|, a · b)`` (radians)."""
    return math.atan2(float(np.linalg.norm(np.cross(a, b))), float(np.dot(a, b)))


# --------------------------------------------------------------------------------------------
# features


def _require_kind(schema: dict[str, Any]) -> None:
    """JSON schema tweak: ``kind`` has a default in Python but is required in a spec file."""
    required = schema.setdefault("required", [])
    if "kind" not in required:
        required.insert(0, "kind")


class _Model(BaseModel):
    """Common configuration: unknown keys are errors, no NaN/inf, immutable."""

    model_config = ConfigDict(extra="forbid", frozen=True, allow_inf_nan=False)


class _FeatureBase(_Model):
    """Fields every feature has. Subclasses fix ``kind`` and add their parameters."""

    model_config = ConfigDict(json_schema_extra=_require_kind)

    kind: str = Field(description="Feature kind.")
    blend: Blend = Field(
        default="add", description="How the feature's profile is combined with the height so far."
    )
    blend_width_m: FiniteFloat | None = Field(
        default=None,
        gt=0.0,
        description="Blend width k in metres; required for smooth_max and smooth_min only.",
    )
    name: StrictStr | None = Field(default=None, description="Optional label.")

    def validity_amplitude_m(self) -> float:
        """This feature's term of the amplitude sum in docs/terrain.md "Validity" (metres)."""
        raise NotImplementedError

    def _checks(self) -> list[tuple[str, str]]:
        """Cross-field checks of this kind: (field, problem text) pairs."""
        return []

    def _params(self, row: npt.NDArray[np.float64]) -> None:
        """Fill columns 3.. of the core row (directions and kind parameters)."""
        raise NotImplementedError

    @model_validator(mode="after")
    def _check_feature(self) -> _FeatureBase:
        problems: list[tuple[str, str]] = []
        if self.blend in SMOOTH_BLENDS and self.blend_width_m is None:
            problems.append(
                ("blend_width_m", _problem(f"is required when blend is {self.blend!r}", "> 0"))
            )
        problems.extend(self._checks())
        if problems:
            raise _Problems(problems)
        return self

    def core_row(self) -> npt.NDArray[np.float64]:
        """This feature as one row of the core feature table.

        Returns
        -------
        row : (16,) float64
            Column layout as in :meth:`WorldSpec.core_features`.
        """
        row = np.zeros(CORE_COLUMNS, dtype=np.float64)
        row[0] = KIND_CODES[self.kind]
        row[1] = BLEND_CODES[self.blend]
        if self.blend in SMOOTH_BLENDS and self.blend_width_m is not None:
            row[2] = self.blend_width_m
        self._params(row)
        return row


class _Centred(_FeatureBase):
    """A feature placed around one centre direction."""

    lat_deg: FiniteFloat = Field(ge=-90.0, le=90.0, description="Latitude of the centre, degrees.")
    lon_deg: FiniteFloat = Field(
        ge=-180.0, le=180.0, description="Longitude of the centre, degrees."
    )

    def centre(self) -> Vec3:
        """Centre direction ``c = u(lat_deg, lon_deg)``, (3,) float64."""
        return unit_vector(self.lat_deg, self.lon_deg)


class Hill(_Centred):
    """Gaussian hill (amplitude > 0) or valley (amplitude < 0)."""

    kind: Literal["hill"] = "hill"
    amplitude_m: FiniteFloat = Field(
        description="Peak height in metres; negative for a valley.",
        json_schema_extra={"not": {"const": 0}},
    )
    sigma_m: FiniteFloat = Field(gt=0.0, description="Gaussian width σ along the surface, metres.")

    @field_validator("amplitude_m")
    @classmethod
    def _nonzero(cls, value: float) -> float:
        if value == 0.0:
            raise ValueError("must not be 0")
        return value

    def validity_amplitude_m(self) -> float:
        return abs(self.amplitude_m)

    def _params(self, row: npt.NDArray[np.float64]) -> None:
        row[3:6] = self.centre()
        row[9] = self.amplitude_m
        row[10] = self.sigma_m


class Mesa(_Centred):
    """Flat-topped disc; ``wall_m = 0`` gives a vertical wall."""

    kind: Literal["mesa"] = "mesa"
    height_m: FiniteFloat = Field(description="Height of the flat top, metres.")
    radius_m: FiniteFloat = Field(gt=0.0, description="Radius of the flat top, metres.")
    wall_m: FiniteFloat = Field(ge=0.0, description="Width of the wall, metres (0: vertical).")

    def validity_amplitude_m(self) -> float:
        return abs(self.height_m)

    def _params(self, row: npt.NDArray[np.float64]) -> None:
        row[3:6] = self.centre()
        row[9] = self.height_m
        row[10] = self.radius_m
        row[11] = self.wall_m


class Block(_Centred):
    """Oriented rounded rectangle in the local tangent frame of its centre."""

    kind: Literal["block"] = "block"
    height_m: FiniteFloat = Field(description="Height of the top, metres.")
    half_x_m: FiniteFloat = Field(gt=0.0, description="Half size along local X, metres.")
    half_y_m: FiniteFloat = Field(gt=0.0, description="Half size along local Y, metres.")
    heading_deg: FiniteFloat = Field(
        ge=-360.0, le=360.0, description="Rotation of local X counter-clockwise from east, degrees."
    )
    corner_m: FiniteFloat = Field(
        ge=0.0, description="Corner radius, metres; at most min(half_x_m, half_y_m)."
    )
    wall_m: FiniteFloat = Field(ge=0.0, description="Width of the wall, metres (0: vertical).")

    def _checks(self) -> list[tuple[str, str]]:
        limit = min(self.half_x_m, self.half_y_m)
        if self.corner_m > limit:
            return [
                (
                    "corner_m",
                    _problem(
                        f"must be <= min(half_x_m, half_y_m) = {_num(limit)}",
                        f"0 to {_num(limit)}",
                        self.corner_m,
                    ),
                )
            ]
        return []

    def footprint_angle_deg(self, radius_m: float) -> float:
        """Largest angle (degrees) between the centre and a point of the footprint ``s <= wall_m``.

        The footprint is the rounded rectangle grown by ``wall_m``. A point with local
        coordinates (x, y) lies at angle θ from the centre with
        ``tan²θ = tan²(x/R) + tan²(y/R)`` (from the definition of x and y in docs/terrain.md);
        that grows with |x| and |y|, so the farthest point is on the outer corner arc, which is
        sampled finely. Returns at least 90 when the footprint reaches past the hemisphere.
        """
        r = self.corner_m
        grown = r + self.wall_m
        t = np.linspace(0.0, 0.5 * math.pi, 1025)
        x = (self.half_x_m - r + grown * np.cos(t)) / radius_m
        y = (self.half_y_m - r + grown * np.sin(t)) / radius_m
        reach = float(max(x.max(), y.max()))
        if reach >= 0.5 * math.pi:
            return math.degrees(reach)
        tan2 = np.tan(x) ** 2 + np.tan(y) ** 2
        return math.degrees(math.atan(math.sqrt(float(tan2.max()))))

    def validity_amplitude_m(self) -> float:
        return abs(self.height_m)

    def _params(self, row: npt.NDArray[np.float64]) -> None:
        row[3:6] = self.centre()
        row[9] = self.height_m
        row[10] = self.half_x_m
        row[11] = self.half_y_m
        row[12] = self.corner_m
        row[13] = self.wall_m
        row[14] = math.radians(self.heading_deg)


class Crater(_Centred):
    """Bowl with a raised rim."""

    kind: Literal["crater"] = "crater"
    radius_m: FiniteFloat = Field(gt=0.0, description="Radius of the rim crest, metres.")
    depth_m: FiniteFloat = Field(ge=0.0, description="Depth of the floor below the rim base, m.")
    rim_height_m: FiniteFloat = Field(ge=0.0, description="Height of the rim crest, metres.")
    rim_width_m: FiniteFloat = Field(gt=0.0, description="Width of the rim's outer slope, m.")

    def validity_amplitude_m(self) -> float:
        return self.depth_m + self.rim_height_m

    def _params(self, row: npt.NDArray[np.float64]) -> None:
        row[3:6] = self.centre()
        row[9] = self.depth_m
        row[10] = self.radius_m
        row[11] = self.rim_height_m
        row[12] = self.rim_width_m


class Ridge(_FeatureBase):
    """Great-circle arc from (lat0, lon0) to (lat1, lon1) with a cross-section profile."""

    kind: Literal["ridge"] = "ridge"
    lat0_deg: FiniteFloat = Field(ge=-90.0, le=90.0, description="Latitude of the start, deg.")
    lon0_deg: FiniteFloat = Field(ge=-180.0, le=180.0, description="Longitude of the start, deg.")
    lat1_deg: FiniteFloat = Field(ge=-90.0, le=90.0, description="Latitude of the end, deg.")
    lon1_deg: FiniteFloat = Field(ge=-180.0, le=180.0, description="Longitude of the end, deg.")
    height_m: FiniteFloat = Field(description="Height of the crest, metres.")
    half_width_m: FiniteFloat = Field(gt=0.0, description="Half width of the cross-section, m.")
    profile: Profile = Field(default="round", description="Cross-section shape.")

    def endpoints(self) -> tuple[Vec3, Vec3]:
        """End directions ``c0, c1``, each (3,) float64."""
        return unit_vector(self.lat0_deg, self.lon0_deg), unit_vector(self.lat1_deg, self.lon1_deg)

    def arc_deg(self) -> float:
        """Angle of the arc between the end points, degrees."""
        c0, c1 = self.endpoints()
        return math.degrees(_angle(c0, c1))

    def _checks(self) -> list[tuple[str, str]]:
        arc = self.arc_deg()
        allowed = f"arc angle in (0°, {_num(MAX_RIDGE_ARC_DEG)}°]"
        if arc < MIN_RIDGE_ARC_DEG:
            return [("", _problem("end points must be distinct", allowed, exact_got=f"{arc:.6g}°"))]
        if arc > MAX_RIDGE_ARC_DEG + _ANGLE_SLACK_DEG:
            what = f"end points must be at most {_num(MAX_RIDGE_ARC_DEG)}° apart"
            return [("", _problem(what, allowed, exact_got=f"{arc:.6g}°"))]
        return []

    def validity_amplitude_m(self) -> float:
        return abs(self.height_m)

    def _params(self, row: npt.NDArray[np.float64]) -> None:
        c0, c1 = self.endpoints()
        row[3:6] = c0
        row[6:9] = c1
        row[9] = self.height_m
        row[10] = self.half_width_m
        row[11] = PROFILE_CODES[self.profile]


class Noise(_FeatureBase):
    """Fractal improved gradient noise over the whole world."""

    kind: Literal["noise"] = "noise"
    amplitude_m: FiniteFloat = Field(description="Amplitude of the first octave, metres.")
    frequency_per_m: FiniteFloat = Field(gt=0.0, description="Frequency of the first octave, 1/m.")
    octaves: StrictInt = Field(default=4, ge=1, le=12, description="Number of octaves.")
    gain: FiniteFloat = Field(
        default=0.5, gt=0.0, le=1.0, description="Amplitude factor from one octave to the next."
    )
    seed: StrictInt = Field(default=0, ge=0, le=2**32 - 1, description="Permutation seed.")

    def validity_amplitude_m(self) -> float:
        return abs(self.amplitude_m) * sum(self.gain**k for k in range(self.octaves))

    def _params(self, row: npt.NDArray[np.float64]) -> None:
        row[9] = self.amplitude_m
        row[10] = self.frequency_per_m
        row[11] = self.octaves
        row[12] = self.gain
        row[13] = self.seed


Feature = Annotated[Hill | Mesa | Block | Crater | Ridge | Noise, Field(discriminator="kind")]
"""Any feature; the ``kind`` key selects the model."""

FEATURE_MODELS: dict[str, type[_FeatureBase]] = {
    "hill": Hill,
    "mesa": Mesa,
    "block": Block,
    "crater": Crater,
    "ridge": Ridge,
    "noise": Noise,
}


# --------------------------------------------------------------------------------------------
# layers and the world


class Layer(_Model):
    """A material layer rule: applies where slope and altitude fall in both bands."""

    name: StrictStr = Field(min_length=1, description="Layer name.")
    color: tuple[UnitFloat, UnitFloat, UnitFloat] = Field(
        description="Linear RGB colour, each channel 0..1."
    )
    slope_deg: tuple[SlopeDeg, SlopeDeg] = Field(
        default=(0.0, 90.0), description="Slope band [lo, hi] in degrees, lo <= hi."
    )
    altitude_m: tuple[FiniteFloat, FiniteFloat] = Field(
        default=(-1e9, 1e9), description="Altitude band [lo, hi] in metres above radius_m."
    )

    @model_validator(mode="after")
    def _check_bands(self) -> Layer:
        problems: list[tuple[str, str]] = []
        for field in ("slope_deg", "altitude_m"):
            lo, hi = getattr(self, field)
            if lo > hi:
                text = _problem("lo must be <= hi", "[lo, hi] with lo <= hi", [lo, hi])
                problems.append((field, text))
        if problems:
            raise _Problems(problems)
        return self


class LodSettings(_Model):
    """Levels of detail and chunks."""

    levels: StrictInt = Field(
        default=4, ge=1, le=12, description="Number of levels; level 0 is the finest."
    )
    ratio: FiniteFloat = Field(
        default=2.0,
        gt=1.0,
        le=16.0,
        description="Tolerance of level k is tolerance_m * ratio^k.",
    )
    chunk_level: StrictInt = Field(
        default=1, ge=0, le=5, description="The sphere is split into 20 * 4^chunk_level chunks."
    )
    seams: Literal["stitch", "skirt"] = Field(
        default="stitch",
        description="How a chunk meets a one-level-coarser neighbour: stitched index buffers "
        "(no crack, no T-junction) or skirts hanging below the chunk's edges.",
    )
    skirt_depth_m: FiniteFloat = Field(
        default=0.0,
        ge=0.0,
        le=1e5,
        description="Skirt depth in metres (0: twice the coarsest level's tolerance).",
    )


class CollisionSettings(_Model):
    """Collision meshes, one per chunk."""

    tolerance_m: FiniteFloat | None = Field(
        default=None, gt=0.0, description="Collider tolerance (default: 4 x tolerance_m)."
    )
    bias: Literal["none", "centered"] = Field(
        default="centered",
        description="centered: move collider vertices radially so the collider straddles the "
        "true surface (bodies neither float above it nor sink into it); none: vertices on it.",
    )
    max_triangles_per_chunk: StrictInt = Field(
        default=65535,
        ge=16,
        le=10_000_000,
        description="Triangle cap per chunk collider; the collider tolerance is raised until "
        "every chunk fits.",
    )


class WorldSpec(_Model):
    """One world: base sphere, ordered features and material layers.

    Build one with :func:`load_spec` or :func:`parse_spec`; change one with
    ``spec.model_copy(update=...)`` (which does not re-validate; pass the result's
    ``model_dump()`` through :func:`parse_spec` to check it again).
    """

    name: StrictStr = Field(
        pattern=r"^[A-Za-z0-9_-]{1,64}$", description="World name, used for output file names."
    )
    radius_m: FiniteFloat = Field(ge=1.0, le=1e6, description="Base radius R in metres.")
    tolerance_m: FiniteFloat = Field(
        gt=0.0, description="Mesh tolerance in metres; at most radius_m / 10."
    )
    offset: Offset = Field(default="normal", description="How the mesher measures offset.")
    max_triangles: StrictInt = Field(
        default=8_000_000, ge=20, le=200_000_000, description="Triangle budget."
    )
    lod: LodSettings = Field(default_factory=LodSettings, description="Levels and chunks.")
    collision: CollisionSettings = Field(
        default_factory=CollisionSettings, description="Collision meshes."
    )
    features: list[Feature] = Field(default_factory=list, description="Features, in order.")
    layers: list[Layer] = Field(
        default_factory=list,
        max_length=255,
        description="Material layer rules; the first match wins (at most 255: layer 255 means "
        "no rule matched).",
    )

    @model_validator(mode="after")
    def _check_world(self) -> WorldSpec:
        problems: list[tuple[str, str]] = []
        limit = self.radius_m / 10.0
        if self.tolerance_m > limit:
            what = f"must be <= radius_m / 10 = {_num(limit)}"
            problems.append(
                ("tolerance_m", _problem(what, f"> 0 and <= {_num(limit)}", self.tolerance_m))
            )
        for i, feature in enumerate(self.features):
            if isinstance(feature, Block):
                reach = feature.footprint_angle_deg(self.radius_m)
                if reach > MAX_BLOCK_ANGLE_DEG + _ANGLE_SLACK_DEG:
                    what = (
                        f"block footprint (half sizes grown by wall_m) must stay within "
                        f"{_num(MAX_BLOCK_ANGLE_DEG)}° of its centre"
                    )
                    allowed = f"<= {_num(MAX_BLOCK_ANGLE_DEG)}° at radius_m = {_num(self.radius_m)}"
                    got = f"{reach:.4g}°"
                    problems.append((f"features[{i}]", _problem(what, allowed, exact_got=got)))
        total = sum(f.validity_amplitude_m() for f in self.features)
        cap = AMPLITUDE_LIMIT * self.radius_m
        if total >= cap:
            what = (
                f"sum of |amplitudes| (heights, depths, rim heights, noise amplitude · Σ gain^k) "
                f"must be < {_num(AMPLITUDE_LIMIT)} · radius_m = {_num(cap)}"
            )
            problems.append(
                ("features", _problem(what, f"< {_num(cap)} m", exact_got=f"{_num(total)} m"))
            )
        if problems:
            raise _Problems(problems)
        return self

    def core_features(self) -> npt.NDArray[np.float64]:
        """The features as the table the C++ core evaluates.

        Returns
        -------
        table : (n, 16) float64, C-contiguous
            One row per feature, in spec order. Columns: 0 kind code (:data:`KIND_CODES`),
            1 blend code (:data:`BLEND_CODES`), 2 blend width k (0 unless smooth_max/min),
            3..5 centre unit vector c (ridge: c0; noise: 0), 6..8 ridge end c1 (else 0),
            9.. kind parameters:

            - hill: 9 amplitude_m, 10 sigma_m
            - mesa: 9 height_m, 10 radius_m, 11 wall_m
            - block: 9 height_m, 10 half_x_m, 11 half_y_m, 12 corner_m, 13 wall_m,
              14 heading (radians)
            - crater: 9 depth_m, 10 radius_m, 11 rim_height_m, 12 rim_width_m
            - ridge: 9 height_m, 10 half_width_m, 11 profile (:data:`PROFILE_CODES`)
            - noise: 9 amplitude_m, 10 frequency_per_m, 11 octaves, 12 gain, 13 seed

            Unused columns are 0.
        """
        table = np.zeros((len(self.features), CORE_COLUMNS), dtype=np.float64)
        for i, feature in enumerate(self.features):
            table[i] = feature.core_row()
        return table


# --------------------------------------------------------------------------------------------
# JSON schema


@functools.lru_cache(maxsize=1)
def _schema() -> dict[str, Any]:
    schema = WorldSpec.model_json_schema()
    return {
        "$schema": "https://json-schema.org/draft/2020-12/schema",
        **schema,
        "title": "globemill world spec",
        "description": (
            "One world for globemill: base sphere, ordered features and material layers. "
            "Formulas in docs/terrain.md. Cross-field limits (tolerance_m <= radius_m / 10, "
            "corner_m <= half sizes, block footprints within 60°, ridge arcs in (0°, 179°], "
            "sum of amplitudes < 0.9 radius_m) are checked by the loader only."
        ),
    }


def json_schema() -> dict[str, Any]:
    """JSON Schema (draft 2020-12) of a world spec; a fresh copy on every call."""
    return copy.deepcopy(_schema())


# --------------------------------------------------------------------------------------------
# turning pydantic errors into problem lines

# allowed ranges that the JSON schema alone cannot state (they depend on other fields)
_ALLOWED_OVERRIDES: dict[str, str] = {
    "tolerance_m": "> 0 and <= radius_m / 10",
    "corner_m": "0 to min(half_x_m, half_y_m)",
    "blend_width_m": "> 0; required for smooth_max and smooth_min",
    "slope_deg": "[lo, hi] with 0 <= lo <= hi <= 90",
    "altitude_m": "[lo, hi] of finite numbers with lo <= hi",
}

_TYPE_WORDS = {
    "float_type": "must be a number",
    "int_type": "must be an integer",
    "string_type": "must be a string",
    "finite_number": "must be a finite number",
    "tuple_type": "must be a list",
    "list_type": "must be a list",
    "model_type": "must be a table",
    "model_attributes_type": "must be a table",
    "dict_type": "must be a table",
    "missing": "is required",
    "string_pattern_mismatch": "does not match the allowed pattern",
}


def _deref(root: dict[str, Any], node: dict[str, Any]) -> dict[str, Any]:
    while "$ref" in node:
        node = root["$defs"][node["$ref"].rsplit("/", 1)[-1]]
    return node


def _walk(
    root: dict[str, Any], loc: Sequence[int | str]
) -> tuple[str, dict[str, Any], dict[str, Any] | None]:
    """Follow a pydantic error location through the schema.

    Returns the spec path (``features[3].sigma_m``; the union tag pydantic adds is dropped),
    the schema of the addressed value, and the schema of the table holding the last key.
    """
    node = root
    parent: dict[str, Any] | None = None
    path = ""
    for item in loc:
        node = _deref(root, node)
        if isinstance(item, int):
            path += f"[{item}]"
            prefix = node.get("prefixItems", [])
            node = prefix[item] if item < len(prefix) else node.get("items", {})
            continue
        mapping = node.get("discriminator", {}).get("mapping", {})
        if item in mapping:
            node = _deref(root, {"$ref": mapping[item]})
            continue
        parent = node
        path = f"{path}.{item}" if path else item
        node = node.get("properties", {}).get(item, {})
    return path or "(top level)", _deref(root, node), parent


def _describe(root: dict[str, Any], node: dict[str, Any]) -> str:
    """Allowed values of a schema node, in words."""
    node = _deref(root, node)
    if "anyOf" in node:
        options = [o for o in node["anyOf"] if o.get("type") != "null"]
        return " or ".join(_describe(root, o) for o in options) or "anything"
    if "discriminator" in node:
        mapping = node["discriminator"]["mapping"]
        kinds = ", ".join(k for k in KIND_CODES if k in mapping)
        return f"a table whose kind is one of {kinds}"
    if "const" in node:
        return _got(node["const"])
    if "enum" in node:
        return ", ".join(str(v) for v in node["enum"])
    kind = node.get("type")
    if kind in ("number", "integer"):
        lo = ("> ", node["exclusiveMinimum"]) if "exclusiveMinimum" in node else None
        lo = ("", node["minimum"]) if "minimum" in node else lo
        hi = ("< ", node["exclusiveMaximum"]) if "exclusiveMaximum" in node else None
        hi = ("", node["maximum"]) if "maximum" in node else hi
        noun = "integer " if kind == "integer" else ""
        if lo and hi and not lo[0] and not hi[0]:
            text = f"{noun}{_num(lo[1])} to {_num(hi[1])}"
        elif lo and hi:
            text = f"{noun}{lo[0] or '>= '}{_num(lo[1])} and {hi[0] or '<= '}{_num(hi[1])}"
        elif lo:
            text = f"{noun}{lo[0] or '>= '}{_num(lo[1])}"
        elif hi:
            text = f"{noun}{hi[0] or '<= '}{_num(hi[1])}"
        else:
            text = "any integer" if kind == "integer" else "any finite number"
        if node.get("not", {}).get("const") is not None:
            text += f" except {_num(node['not']['const'])}"
        return text
    if kind == "string":
        if "pattern" in node:
            return f"text matching {node['pattern']}"
        return "text" if "minLength" not in node else "non-empty text"
    if kind == "array":
        items = node.get("prefixItems")
        if items:
            words = [_describe(root, i) for i in items]
            if len(set(words)) == 1:
                return f"a list of {len(items)} numbers, each {words[0]}"
            return "[" + ", ".join(words) + "]"
        return "a list"
    if kind == "object":
        return "a table"
    return "anything"


def _error_lines(root: dict[str, Any], error: Mapping[str, Any]) -> list[str]:
    """Problem lines for one pydantic error."""
    kind: str = error["type"]
    ctx: Mapping[str, Any] = error.get("ctx") or {}
    value = error.get("input", ...)
    path, node, parent = _walk(root, error["loc"])
    last = error["loc"][-1] if error["loc"] else None
    allowed = _ALLOWED_OVERRIDES.get(last, "") if isinstance(last, str) else ""
    allowed = allowed or _describe(root, node)

    if kind == "value_error" and isinstance(ctx.get("error"), _Problems):
        base = "" if path == "(top level)" else path
        lines = []
        for rel, text in ctx["error"].problems:
            full = base + rel if rel.startswith("[") else ".".join(p for p in (base, rel) if p)
            lines.append(f"{full or '(top level)'}: {text}")
        return lines
    if kind in ("union_tag_invalid", "union_tag_not_found"):
        kinds = ", ".join(KIND_CODES)
        path = f"{path}.kind"
        if kind == "union_tag_not_found" and isinstance(value, Mapping):
            return [f"{path}: {_problem('is required', kinds)}"]
        if kind == "union_tag_not_found":
            return [f"{path[:-5]}: {_problem('must be a table with a kind', kinds, value)}"]
        return [f"{path}: {_problem('unknown kind', kinds, ctx.get('tag', value))}"]
    if kind == "extra_forbidden":
        known = ", ".join((parent or {}).get("properties", {}))
        return [f"{path}: unknown key (allowed keys: {known}), got {_got(value)}"]
    if kind == "missing" and isinstance(last, int):  # a fixed-length list that is too short
        path, node, _ = _walk(root, error["loc"][:-1])
        what = f"must have {node.get('minItems', last + 1)} items"
        return [f"{path}: {_problem(what, _describe(root, node), value)}"]
    if kind == "missing":
        return [f"{path}: {_problem('is required', allowed)}"]

    bounds = {"greater_than": ">", "greater_than_equal": ">=", "less_than": "<"}
    bounds["less_than_equal"] = "<="
    if kind in bounds:
        limit = next(iter(ctx.values()))
        what = f"must be {bounds[kind]} {_num(limit)}"
    elif kind == "literal_error":
        what = "unknown value"
    elif kind in ("too_short", "too_long"):
        what = f"must have {node.get('minItems', '?')} items"
    elif kind == "value_error":
        what = str(ctx.get("error", error["msg"]))
    elif kind in _TYPE_WORDS:
        what = _TYPE_WORDS[kind]
    else:
        msg = str(error["msg"])
        what = msg[:1].lower() + msg[1:]
    return [f"{path}: {_problem(what, allowed, value)}"]


# --------------------------------------------------------------------------------------------
# loading


def parse_spec(data: Mapping[str, Any], source: str = "<spec>") -> WorldSpec:
    """Validate a world spec given as plain data (the parsed TOML or JSON document).

    Raises
    ------
    SpecError
        Listing every problem found; ``source`` names the spec in the message.
    """
    if not isinstance(data, Mapping):
        raise SpecError(source, [_problem("(top level): must be a table", "a table", data)])
    try:
        return WorldSpec.model_validate(dict(data))
    except ValidationError as exc:
        root = _schema()
        problems = [line for err in exc.errors() for line in _error_lines(root, err)]
        raise SpecError(source, problems) from None


_TOML_POSITION = re.compile(r"^(?P<msg>.*?)\s*\(at line (?P<line>\d+), column (?P<col>\d+)\)$")


def _reject_duplicate_keys(pairs: list[tuple[str, Any]]) -> dict[str, Any]:
    out: dict[str, Any] = {}
    for key, value in pairs:
        if key in out:
            raise ValueError(f"duplicate key {key!r}")
        out[key] = value
    return out


def load_spec(path: str | os.PathLike[str]) -> WorldSpec:
    """Read and validate a world spec file: TOML for ``.toml``, JSON for ``.json``.

    Raises
    ------
    SpecError
        When the file is missing or unreadable, is not well-formed TOML/JSON (the message gives
        the line and column), or describes an invalid world (every problem listed).
    """
    file = Path(path)
    source = str(file)
    suffix = file.suffix.lower()
    if suffix not in (".toml", ".json"):
        problem = _problem("unsupported file type", ".toml or .json", suffix or "(none)")
        raise SpecError(source, [problem], what="cannot read world spec")
    try:
        text = file.read_bytes().decode("utf-8")
    except FileNotFoundError:
        raise SpecError(source, ["file not found"], what="cannot read world spec") from None
    except UnicodeDecodeError as exc:
        problem = f"not UTF-8 text (bad byte at offset {exc.start})"
        raise SpecError(source, [problem], what="cannot read world spec") from None
    except OSError as exc:
        problem = exc.strerror or str(exc)
        raise SpecError(source, [problem], what="cannot read world spec") from None

    data: Any
    if suffix == ".toml":
        try:
            data = tomllib.loads(text)
        except tomllib.TOMLDecodeError as exc:
            match = _TOML_POSITION.match(str(exc))
            if match:
                where = f"line {match['line']}, column {match['col']}"
                problem = f"malformed TOML at {where}: {match['msg']}"
            else:
                problem = f"malformed TOML: {exc}"
            raise SpecError(source, [problem], what="cannot read world spec") from None
    else:
        try:
            data = json.loads(text, object_pairs_hook=_reject_duplicate_keys)
        except json.JSONDecodeError as exc:
            problem = f"malformed JSON at line {exc.lineno}, column {exc.colno}: {exc.msg}"
            raise SpecError(source, [problem], what="cannot read world spec") from None
        except ValueError as exc:  # duplicate keys
            problem = f"malformed JSON: {exc}"
            raise SpecError(source, [problem], what="cannot read world spec") from None
    return parse_spec(data, source=source)
