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
import difflib
import functools
import json
import math
import operator
import os
import re
import sys
import warnings
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Annotated, Any, Literal

import numpy as np
import numpy.typing as npt
from pydantic import (
    AfterValidator,
    AllowInfNan,
    BaseModel,
    ConfigDict,
    Field,
    Strict,
    ValidationError,
    create_model,
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
    "LIMITS",
    "PROFILE_CODES",
    "SPEC_RULES",
    "Block",
    "CollisionSettings",
    "Crater",
    "Feature",
    "Hill",
    "Layer",
    "LodSettings",
    "Mesa",
    "Noise",
    "Ridge",
    "SpecDeprecationWarning",
    "SpecError",
    "WorldSpec",
    "json_schema",
    "load_spec",
    "parse_spec",
    "read_spec_data",
    "unit_vector",
]

# --------------------------------------------------------------------------------------------
# problems


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


class SpecDeprecationWarning(FutureWarning):
    """A spec uses a key that was renamed; it is read for one more release (docs/spec.md)."""


class _Problems(ValueError):
    """Raised by model validators: problems as (path relative to the model, text) pairs.

    The loader turns these into full paths; used directly through pydantic they still read well.
    """

    def __init__(self, problems: list[tuple[str, str]]):
        self.problems = problems
        super().__init__("; ".join(f"{path}: {text}" if path else text for path, text in problems))


def _num(value: float) -> str:
    """Format a number the way a person would write it in a spec: integral values without a
    fraction, others in the shortest text that reads back as the same double."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if math.isfinite(value) and value == int(value) and abs(value) < 1e16:
        return str(int(value))
    return repr(value)  # the shortest text that reads back as the same number


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
# the rule table (src/globemill/spec_rules.json): the one place where names, types, ranges,
# defaults, units, cross-field rules and the core row layout of every section and feature kind
# are written. The C++ side (csrc/spec_rules.cpp) reads the same file, embedded at build time.

SPEC_RULES: dict[str, Any] = json.loads(
    Path(__file__).with_name("spec_rules.json").read_text(encoding="utf-8")
)
"""The rule table, as read from ``spec_rules.json`` (treat as read-only)."""

_SECTIONS: dict[str, dict[str, Any]] = SPEC_RULES["sections"]
_KINDS: dict[str, dict[str, Any]] = {k["kind"]: k for k in SPEC_RULES["kinds"]}
# the deprecation message of a renamed key, by its entry's convert ("rename": none)
_RENAMED_MESSAGES: dict[str, str] = {
    k: v for k, v in SPEC_RULES["renamed_messages"].items() if k != "doc"
}
LIMITS: dict[str, int] = dict(SPEC_RULES["limits"])
"""Reader limits shared with the C ABI: max_bytes, max_depth, max_values, max_problems."""


def _check(rules: Mapping[str, Any], name: str) -> dict[str, Any]:
    return next(c for c in rules.get("checks", []) if c["rule"] == name)


def _field_rule(rules: Mapping[str, Any], key: str) -> dict[str, Any]:
    return next(f for f in rules["fields"] if f["key"] == key)


# codes shared with the C++ core (see the "core feature array" of the internal interface)
KIND_CODES: dict[str, int] = {k: r["code"] for k, r in _KINDS.items()}
BLEND_CODES: dict[str, int] = {
    v: i for i, v in enumerate(_field_rule(_SECTIONS["feature"], "blend")["values"])
}
PROFILE_CODES: dict[str, int] = {
    v: i for i, v in enumerate(_field_rule(_KINDS["ridge"], "profile")["values"])
}
CORE_COLUMNS: int = SPEC_RULES["core_columns"]
"""Number of float64 columns per feature in :meth:`WorldSpec.core_features`."""

SMOOTH_BLENDS = frozenset(_check(_SECTIONS["feature"], "required_if")["in"])
MAX_BLOCK_ANGLE_DEG: float = _check(_SECTIONS["world"], "block_footprint")["max_deg"]
"""A block's footprint must stay within this angle of its centre (docs/terrain.md, Validity)."""
MAX_RIDGE_ARC_DEG: float = _check(_KINDS["ridge"], "arc")["max_deg"]
MIN_RIDGE_ARC_DEG: float = _check(_KINDS["ridge"], "arc")["min_deg"]
"""Ridge end points closer than this (degrees) count as the same point."""
AMPLITUDE_LIMIT: float = _check(_SECTIONS["world"], "amplitude_sum")["below_fraction"]
"""The sum of feature amplitudes must stay below this fraction of the base radius."""

_ANGLE_SLACK_DEG: float = SPEC_RULES["angle_slack_deg"]  # round-off allowed on computed angles

# --------------------------------------------------------------------------------------------
# field types

FiniteFloat = Annotated[float, Strict(), AllowInfNan(False)]
"""A finite number; integers are accepted, booleans, strings, NaN and infinities are not."""
StrictInt = Annotated[int, Strict()]
StrictStr = Annotated[str, Strict()]

Vec3 = npt.NDArray[np.float64]

_IDENTIFIER_CLASS = "[A-Za-z0-9_-]"


def _is_control(ch: str) -> bool:
    """A control character (Unicode category Cc: U+0000-U+001F, U+007F-U+009F)."""
    code = ord(ch)
    return code < 0x20 or 0x7F <= code <= 0x9F


def _is_surrogate(ch: str) -> bool:
    return 0xD800 <= ord(ch) <= 0xDFFF


def _printable(text: str) -> str:
    """Validator of the ``printable`` character class of the rule table."""
    for i, ch in enumerate(text):
        if _is_control(ch):
            raise ValueError(f"has the control character U+{ord(ch):04X} at position {i}")
    return text


def _path_key(key: str) -> str:
    """A key as it appears in a problem path: as is, or quoted (_quoted) when it holds control
    characters, lone surrogates, quotes or backslashes (the C ABI writes the same)."""
    if not any(_is_control(c) or _is_surrogate(c) or c in '"\\' for c in key):
        return key
    return _quoted(key)


def _quoted(text: str) -> str:
    """`text` in double quotes, with backslash and double quote escaped by a backslash and
    control characters and lone surrogates as \\uXXXX (the C ABI's quote_text writes the same)."""
    out = "".join(
        f"\\u{ord(c):04x}" if _is_control(c) or _is_surrogate(c) else "\\" + c if c in '"\\' else c
        for c in text
    )
    return f'"{out}"'


def _bounds_text(rule: Mapping[str, Any], integer: bool = False) -> str:
    """The allowed range of a number rule in words (the C ABI words it the same way)."""
    noun = "integer " if integer else ""
    lo = ("> ", rule["gt"]) if "gt" in rule else (">= ", rule["ge"]) if "ge" in rule else None
    hi = ("< ", rule["lt"]) if "lt" in rule else ("<= ", rule["le"]) if "le" in rule else None
    if lo and hi and lo[0] == ">= " and hi[0] == "<= ":
        text = f"{noun}{_num(lo[1])} to {_num(hi[1])}"
    elif lo and hi:
        text = f"{noun}{lo[0]}{_num(lo[1])} and {hi[0]}{_num(hi[1])}"
    elif lo or hi:
        bound = lo or hi
        assert bound is not None
        text = f"{noun}{bound[0]}{_num(bound[1])}"
    else:
        text = "any integer" if integer else "any finite number"
    if rule.get("nonzero"):
        text += " except 0"
    return text


def _allowed(rule: Mapping[str, Any]) -> str:
    """What a field of the rule table accepts, in words: the ``(allowed: ...)`` of a problem."""
    if "allowed" in rule:
        return str(rule["allowed"])
    kind = rule["type"]
    if kind in ("number", "integer"):
        return _bounds_text(rule, kind == "integer")
    if kind == "choice":
        return ", ".join(rule["values"])
    if kind == "kind":
        return ", ".join(KIND_CODES)
    if kind == "text" and rule["charset"] == "identifier":
        return f"text matching ^{_IDENTIFIER_CLASS}{{{rule['min_length']},{rule['max_length']}}}$"
    if kind == "text":
        if rule["min_length"] > 0:
            return f"printable text of {rule['min_length']} to {rule['max_length']} characters"
        return f"printable text of at most {rule['max_length']} characters"
    if kind == "numbers":
        return f"a list of {rule['count']} numbers, each {_bounds_text(rule['item'])}"
    if kind == "list" and "max_items" in rule:
        return f"a list of at most {rule['max_items']} items"
    return "a table" if kind == "table" else "a list"


def _bounds(rule: Mapping[str, Any]) -> dict[str, Any]:
    return {b: rule[b] for b in ("gt", "ge", "lt", "le") if b in rule}


def _nonzero(value: float) -> float:
    if value == 0.0:
        raise ValueError("must not be 0")
    return value


# --------------------------------------------------------------------------------------------
# geometry helpers (docs/terrain.md, "Frame and directions")


def heading_of_bearing(bearing_deg: float) -> float:
    """A block's bearing (degrees clockwise from north) as the core's heading (degrees counter-
    clockwise from east): 90 - bearing, wrapped into -360..360 (csrc/spec_rules.cpp, the same)."""
    h = 90.0 - bearing_deg
    return h - 360.0 if h > 360.0 else h


def bearing_of_heading(heading_deg: float) -> float:
    """The inverse of heading_of_bearing (for specs that still give heading_deg)."""
    b = 90.0 - heading_deg
    return b - 360.0 if b > 360.0 else b


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
# models built from the table


def _require_kind(schema: dict[str, Any]) -> None:
    """JSON schema tweak: ``kind`` has a default in Python but is required in a spec file."""
    required = schema.setdefault("required", [])
    if "kind" not in required:
        required.insert(0, "kind")


# the rules of each generated model, and the allowed text of each (model name, key)
_RULES_OF: dict[type, dict[str, Any]] = {}
_ALLOWED: dict[tuple[str, str], str] = {}


class _Model(BaseModel):
    """Common configuration: unknown keys are errors, no NaN/inf, immutable. Runs the table's
    cross-field checks of its section after the fields are valid."""

    model_config = ConfigDict(extra="forbid", frozen=True, allow_inf_nan=False)

    @classmethod
    def _table(cls) -> dict[str, Any]:
        return next(_RULES_OF[k] for k in cls.__mro__ if k in _RULES_OF)

    def _cross_checks(self) -> list[tuple[str, str]]:
        """The table's cross-field checks of this model: (field, problem text) pairs."""
        problems: list[tuple[str, str]] = []
        for rules in self._rule_sets():
            for field in rules["fields"]:
                if field.get("ordered"):
                    lo, hi = getattr(self, field["key"])
                    if lo > hi:
                        text = _problem("lo must be <= hi", "[lo, hi] with lo <= hi", [lo, hi])
                        problems.append((field["key"], text))
            for check in rules.get("checks", []):
                problems.extend(_model_check(self, check, rules))
        return problems

    def _rule_sets(self) -> list[dict[str, Any]]:
        return [self._table()]

    @model_validator(mode="after")
    def _run_checks(self) -> _Model:
        problems = self._cross_checks()
        if problems:
            raise _Problems(problems)
        return self


def _model_check(
    model: Any, check: Mapping[str, Any], rules: Mapping[str, Any]
) -> list[tuple[str, str]]:
    """One cross-field check of the table that needs this model alone."""
    rule = check["rule"]
    if rule == "required_if":
        when = getattr(model, check["when"])
        if when in check["in"] and getattr(model, check["key"]) is None:
            what = f"is required when {check['when']} is {when!r}"
            return [(check["key"], _problem(what, check["allowed"]))]
    elif rule == "at_most_min":
        value = getattr(model, check["key"])
        limit = min(getattr(model, k) for k in check["of"])
        if value > limit:
            lower = _field_rule(rules, check["key"]).get("ge", 0.0)
            what = f"must be <= min({', '.join(check['of'])}) = {_num(limit)}"
            return [(check["key"], _problem(what, f"{_num(lower)} to {_num(limit)}", value))]
    elif rule == "arc":
        arc = model.arc_deg()
        allowed = f"arc angle in (0°, {_num(check['max_deg'])}°]"
        if arc < check["min_deg"]:
            return [("", _problem("end points must be distinct", allowed, exact_got=f"{arc:.6g}°"))]
        if arc > check["max_deg"] + _ANGLE_SLACK_DEG:
            what = f"end points must be at most {_num(check['max_deg'])}° apart"
            return [("", _problem(what, allowed, exact_got=f"{arc:.6g}°"))]
    return []  # world-level checks run in WorldSpec


def _field_def(rule: Mapping[str, Any], models: Mapping[str, Any]) -> tuple[Any, Any]:
    """The pydantic (annotation, FieldInfo) of one field rule of the table."""
    kind = rule["type"]
    extra: dict[str, Any] = {}
    meta: list[Any] = []
    if kind == "number":
        ann: Any = FiniteFloat
        if rule.get("nonzero"):
            meta.append(AfterValidator(_nonzero))
            extra["json_schema_extra"] = {"not": {"const": 0}}
    elif kind == "integer":
        ann = StrictInt
    elif kind == "choice":
        ann = Literal[tuple(rule["values"])]
    elif kind == "text" and rule["charset"] == "identifier":
        ann = StrictStr
        extra["pattern"] = f"^{_IDENTIFIER_CLASS}{{{rule['min_length']},{rule['max_length']}}}$"
    elif kind == "text":
        ann = StrictStr
        meta.append(
            Field(
                min_length=rule["min_length"],
                max_length=rule["max_length"],
                json_schema_extra={"pattern": "^[^\\u0000-\\u001f\\u007f-\\u009f]*$"},
            )
        )
        meta.append(AfterValidator(_printable))
    elif kind == "numbers":
        item = Annotated[FiniteFloat, Field(**_bounds(rule["item"]))]
        items = (item,) * int(rule["count"])
        ann = tuple[items]  # type: ignore[valid-type]
    elif kind == "table":
        ann = models[rule["section"]]
        extra["default_factory"] = ann
    elif kind == "list":
        element = models[rule["of"]]
        ann = list[element]  # type: ignore[valid-type]
        extra["default_factory"] = list
        if "max_items" in rule:
            extra["max_length"] = rule["max_items"]
    else:
        raise ValueError(f"spec_rules.json: unknown field type {kind!r}")
    if meta:
        ann = Annotated[(ann, *meta)]
    if kind in ("number", "integer"):
        extra.update(_bounds(rule))
    if rule.get("nullable"):
        ann = ann | None
        extra["default"] = None
    elif "default" in rule:
        default = rule["default"]
        extra["default"] = tuple(default) if isinstance(default, list) else default
    field = Field(description=rule.get("doc"), **extra)
    return ann, field


def _make_model(
    name: str,
    base: type[_Model],
    rules: dict[str, Any],
    fields: list[dict[str, Any]],
    models: Mapping[str, Any],
    doc: str,
    **more: tuple[Any, Any],
) -> Any:
    defs = {**more, **{f["key"]: _field_def(f, models) for f in fields}}
    model = create_model(name, __base__=base, __module__=__name__, __doc__=doc, **defs)
    _RULES_OF[model] = rules
    for f in fields:
        _ALLOWED[(name, f["key"])] = _allowed(f)
    return model


# --------------------------------------------------------------------------------------------
# features


class _FeatureBase(_Model):
    """Fields every feature has (generated from the table); one subclass per kind."""

    model_config = ConfigDict(json_schema_extra=_require_kind)

    kind: str

    def _rule_sets(self) -> list[dict[str, Any]]:
        return [_SECTIONS["feature"], _KINDS[self.kind]]

    def directions(self) -> list[Vec3]:
        """The unit directions of this feature's row (centre; ridge: both ends), (3,) each."""
        return [
            unit_vector(*(getattr(self, k) for k in entry["direction"]))
            for entry in _KINDS[self.kind]["row"]
            if "direction" in entry
        ]

    def centre(self) -> Vec3:
        """Centre direction ``c = u(lat_deg, lon_deg)`` (ridge: its start), (3,) float64."""
        return self.directions()[0]

    def endpoints(self) -> tuple[Vec3, Vec3]:
        """End directions ``c0, c1`` of a kind with an arc rule (a ridge), each (3,) float64."""
        arc = _check(_KINDS[self.kind], "arc")
        c0 = unit_vector(*(getattr(self, k) for k in arc["from"]))
        return c0, unit_vector(*(getattr(self, k) for k in arc["to"]))

    def arc_deg(self) -> float:
        """Angle of the arc between the end points, degrees."""
        c0, c1 = self.endpoints()
        return math.degrees(_angle(c0, c1))

    def footprint_angle_deg(self, radius_m: float) -> float:
        """Largest angle (degrees) between the centre and a point of the footprint
        ``s <= wall_width_m`` of a kind with a ``footprint`` entry (a block).

        The footprint is the rounded rectangle grown by ``wall_width_m``. A point with local
        coordinates (x, y) lies at angle θ from the centre with
        ``tan²θ = tan²(x/R) + tan²(y/R)`` (from the definition of x and y in docs/terrain.md);
        that grows with |x| and |y|, so the farthest point is on the outer corner arc, which is
        sampled finely. Returns at least 90 when the footprint reaches past the hemisphere.
        """
        fp = _KINDS[self.kind]["footprint"]
        half_x, half_y = (getattr(self, k) for k in fp["half"])
        r = getattr(self, fp["corner"])
        grown = r + getattr(self, fp["grow"])
        t = np.linspace(0.0, 0.5 * math.pi, 1025)
        x = (half_x - r + grown * np.cos(t)) / radius_m
        y = (half_y - r + grown * np.sin(t)) / radius_m
        reach = float(max(x.max(), y.max()))
        if reach >= 0.5 * math.pi:
            return math.degrees(reach)
        tan2 = np.tan(x) ** 2 + np.tan(y) ** 2
        return math.degrees(math.atan(math.sqrt(float(tan2.max()))))

    def validity_amplitude_m(self) -> float:
        """This feature's term of the amplitude sum in docs/terrain.md "Validity" (metres)."""
        amp = _KINDS[self.kind]["amplitude"]
        if "abs" in amp:
            return float(sum(abs(getattr(self, k)) for k in amp["abs"]))
        if "sum" in amp:
            return float(sum(getattr(self, k) for k in amp["sum"]))
        a, gain, terms = (getattr(self, k) for k in amp["abs_geometric"])
        return abs(a) * sum(gain**k for k in range(terms))

    def core_row(self) -> npt.NDArray[np.float64]:
        """This feature as one row of the core feature table.

        Returns
        -------
        row : (16,) float64
            Column layout as in :meth:`WorldSpec.core_features`.
        """
        row = np.zeros(CORE_COLUMNS, dtype=np.float64)
        for rules in self._rule_sets():
            for entry in rules["row"]:
                col = entry["col"]
                if "code" in entry:
                    row[col] = KIND_CODES[self.kind]
                elif "direction" in entry:
                    row[col : col + 3] = unit_vector(
                        *(getattr(self, k) for k in entry["direction"])
                    )
                elif (
                    "only_if" in entry
                    and getattr(self, entry["only_if"]["key"]) not in entry["only_if"]["in"]
                ):
                    continue
                else:
                    value = getattr(self, entry["key"])
                    rule = _field_rule(rules, entry["key"])
                    if rule["type"] == "choice":
                        value = rule["values"].index(value)
                    if entry.get("from_bearing"):
                        value = heading_of_bearing(value)
                    row[col] = math.radians(value) if entry.get("radians") else value
        return row


def _feature_models() -> dict[str, type[_FeatureBase]]:
    common = _SECTIONS["feature"]["fields"]
    out: dict[str, type[_FeatureBase]] = {}
    for kind, rules in _KINDS.items():
        kind_field = (Literal[kind], Field(default=kind, description=common[0]["doc"]))
        out[kind] = _make_model(
            rules["model"],
            _FeatureBase,
            rules,
            common[1:] + rules["fields"],
            {},
            rules["doc"],
            kind=kind_field,
        )
    return out


FEATURE_MODELS: dict[str, type[_FeatureBase]] = _feature_models()
"""The model of each feature kind, in the order of the table's ``kinds``."""

Hill = FEATURE_MODELS["hill"]
Mesa = FEATURE_MODELS["mesa"]
Block = FEATURE_MODELS["block"]
Crater = FEATURE_MODELS["crater"]
Ridge = FEATURE_MODELS["ridge"]
Noise = FEATURE_MODELS["noise"]

Feature = Annotated[
    functools.reduce(operator.or_, FEATURE_MODELS.values()),  # type: ignore[arg-type]
    Field(discriminator="kind"),
]
"""Any feature; the ``kind`` key selects the model."""


# --------------------------------------------------------------------------------------------
# layers, settings and the world


def _section(name: str, models: dict[str, Any], base: type[_Model] = _Model) -> Any:
    rules = _SECTIONS[name]
    model = _make_model(rules["model"], base, rules, rules["fields"], models, rules["doc"])
    models[name] = model
    return model


_MODELS: dict[str, Any] = {"feature": Feature}


class Layer(_section("layer", _MODELS)):  # type: ignore[misc]
    """A material layer rule: applies where slope and altitude fall in both bands."""


class LodSettings(_section("lod", _MODELS)):  # type: ignore[misc]
    """Levels of detail and chunks."""


class CollisionSettings(_section("collision", _MODELS)):  # type: ignore[misc]
    """Collision meshes, one per chunk."""


_MODELS.update(layer=Layer, lod=LodSettings, collision=CollisionSettings)


class _WorldChecks(_Model):
    """The world-level checks of the table (they need the radius and every feature)."""

    def _cross_checks(self) -> list[tuple[str, str]]:
        problems: list[tuple[str, str]] = []
        for check in _SECTIONS["world"]["checks"]:
            rule = check["rule"]
            if rule == "at_most_fraction":
                value, limit = getattr(self, check["key"]), getattr(self, check["of"])
                limit /= check["divisor"]
                if value > limit:
                    what = f"must be <= {check['of']} / {_num(check['divisor'])} = {_num(limit)}"
                    lower = _bounds_text(_field_rule(_SECTIONS["world"], check["key"]))
                    allowed = f"{lower} and <= {_num(limit)}"
                    problems.append((check["key"], _problem(what, allowed, value)))
            elif rule == "block_footprint":
                problems.extend(self._footprints(check["max_deg"]))
            elif rule == "amplitude_sum":
                total = sum(f.validity_amplitude_m() for f in self.features)
                frac = check["below_fraction"]
                cap = frac * getattr(self, check["of"])
                if total >= cap:
                    what = (
                        f"sum of |amplitudes| (heights, depths, rim heights, noise amplitude · "
                        f"Σ gain^k) must be < {_num(frac)} · {check['of']} = {_num(cap)}"
                    )
                    got = f"{_num(total)} m"
                    problems.append(("features", _problem(what, f"< {_num(cap)} m", exact_got=got)))
        return problems

    def _footprints(self, max_deg: float) -> list[tuple[str, str]]:
        problems: list[tuple[str, str]] = []
        for i, feature in enumerate(self.features):
            if "footprint" not in _KINDS[feature.kind]:
                continue
            reach = feature.footprint_angle_deg(self.radius_m)
            if reach > max_deg + _ANGLE_SLACK_DEG:
                what = (
                    f"{feature.kind} footprint (half sizes grown by wall_width_m) must stay within "
                    f"{_num(max_deg)}° of its centre"
                )
                allowed = f"<= {_num(max_deg)}° at radius_m = {_num(self.radius_m)}"
                got = f"{reach:.4g}°"
                problems.append((f"features[{i}]", _problem(what, allowed, exact_got=got)))
        return problems


class WorldSpec(_section("world", _MODELS, _WorldChecks)):  # type: ignore[misc]
    """One world: base sphere, ordered features and material layers.

    Build one with :func:`load_spec` or :func:`parse_spec`; change one with
    ``spec.model_copy(update=...)`` (which does not re-validate; pass the result's
    ``model_dump()`` through :func:`parse_spec` to check it again).
    """

    def core_features(self) -> npt.NDArray[np.float64]:
        """The features as the table the C++ core evaluates.

        Returns
        -------
        table : (n, 16) float64, C-contiguous
            One row per feature, in spec order. Columns: 0 kind code (:data:`KIND_CODES`),
            1 blend code (:data:`BLEND_CODES`), 2 blend width k (0 unless smooth_max/min),
            3..5 centre unit vector c (ridge: c0; noise: 0), 6..8 ridge end c1 (else 0),
            9.. kind parameters (the ``row`` of each kind in ``spec_rules.json``):

            - hill: 9 amplitude_m, 10 sigma_m
            - mesa: 9 height_m, 10 radius_m, 11 wall_width_m
            - block: 9 height_m, 10 half_x_m, 11 half_y_m, 12 corner_radius_m,
              13 wall_width_m, 14 heading: radians counter-clockwise from east,
              of heading_of_bearing(bearing_deg)
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
            "corner_radius_m <= half sizes, block footprints within 60°, ridge arcs in (0°, 179°], "
            "sum of amplitudes < 0.9 radius_m) are checked by the loader only."
        ),
    }


def json_schema() -> dict[str, Any]:
    """JSON Schema (draft 2020-12) of a world spec; a fresh copy on every call."""
    return copy.deepcopy(_schema())


# --------------------------------------------------------------------------------------------
# turning pydantic errors into problem lines

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
        key = _path_key(item)
        path = f"{path}.{key}" if path else key
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
        return "text"
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


def _did_you_mean(word: str, choices: Sequence[str]) -> str:
    """ "; did you mean 'x'?" for the closest of `choices` (difflib's ratio >= 0.6), else ""."""
    close = difflib.get_close_matches(word, list(choices), n=1, cutoff=0.6)
    return f"; did you mean {close[0]!r}?" if close else ""


_ITEM_PATH = re.compile(r"^(features|layers)\[(\d+)\]")


def _with_names(problems: Sequence[str], data: Mapping[str, Any]) -> list[str]:
    """Each problem about a feature or a layer that has a name ends by naming it:
    ``features[3].sigma_m: ... , got -1 (feature 'Gorse Knoll')``."""
    out = []
    for line in problems:
        m = _ITEM_PATH.match(line)
        items = data.get(m.group(1)) if m else None
        if m and isinstance(items, list) and int(m.group(2)) < len(items):
            item = items[int(m.group(2))]
            name = item.get("name") if isinstance(item, Mapping) else None
            if isinstance(name, str) and name and not any(_is_surrogate(c) for c in name):
                what = "feature" if m.group(1) == "features" else "layer"
                line = f"{line} ({what} {name!r})"
        out.append(line)
    return out


def _error_lines(root: dict[str, Any], error: Mapping[str, Any]) -> list[str]:
    """Problem lines for one pydantic error."""
    kind: str = error["type"]
    ctx: Mapping[str, Any] = error.get("ctx") or {}
    value = error.get("input", ...)
    path, node, parent = _walk(root, error["loc"])
    last = error["loc"][-1] if error["loc"] else None
    model = WorldSpec.__name__ if parent is root else (parent or {}).get("title", "")
    allowed = _ALLOWED.get((model, last), "") if isinstance(last, str) else ""
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
        tag = ctx.get("tag", value)
        line = f"{path}: {_problem('unknown kind', kinds, tag)}"
        return [line + _did_you_mean(str(tag), list(KIND_CODES))]
    if kind == "extra_forbidden":
        keys = list((parent or {}).get("properties", {}))
        line = f"{path}: unknown key (allowed keys: {', '.join(keys)}), got {_got(value)}"
        return [line + _did_you_mean(str(last), keys)]
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
        choices = [str(c) for c in node.get("enum", [])]
        if isinstance(value, str) and choices:
            return [f"{path}: {_problem(what, allowed, value)}" + _did_you_mean(value, choices)]
    elif kind == "too_long" and node.get("minItems") == node.get("maxItems"):
        what = f"must have {node.get('maxItems')} items"  # a fixed-length list
    elif kind == "too_long":
        what = f"must have at most {ctx.get('max_length', '?')} items"
    elif kind == "value_error":
        what = str(ctx.get("error", error["msg"]))
    elif kind in _TYPE_WORDS:
        what = _TYPE_WORDS[kind]
    else:
        msg = str(error["msg"])
        what = msg[:1].lower() + msg[1:]
    return [f"{path}: {_problem(what, allowed, value)}"]


# --------------------------------------------------------------------------------------------
# input limits: nothing a user feeds in reaches a traceback (deep nesting, huge files, text that
# is not Unicode). The limits are the table's, the same as the C ABI's reader.


def _scan_depth(text: str, tokens: re.Pattern[str], limit: int, toml: bool) -> int | None:
    """Offset of the first bracket nested deeper than ``limit`` levels, or None (iterative).

    The document itself is level 1, as in the C reader. In TOML, a ``[`` that opens a line at
    depth 0 is a table header, not an array: its line is skipped.
    """
    depth = 1 if toml else 0
    line_start = 0
    i, n = 0, len(text)
    while i < n:
        m = tokens.search(text, i)
        if m is None:
            return None
        tok, i = m.group(), m.end()
        if tok == "\n":
            line_start = i
        elif tok in "[{":
            if toml and depth == 1 and tok == "[" and not text[line_start : m.start()].strip():
                nl = text.find("\n", i)
                i, line_start = (n, n) if nl < 0 else (nl + 1, nl + 1)
                continue
            depth += 1
            if depth > limit:
                return m.start()
        elif tok in "]}":
            depth = max(depth - 1, 1 if toml else 0)
    return None


_JSON_TOKENS = re.compile(r'"(?:[^"\\]|\\.)*"|[\[\]{}\n]')
_TOML_TOKENS = re.compile(
    r'"""(?:[^\\]|\\.)*?"""|\'\'\'[\s\S]*?\'\'\'|"(?:[^"\\\n]|\\.)*"|\'[^\'\n]*\'|#[^\n]*|[\[\]{}\n]'
)


def _line_col(text: str, offset: int) -> str:
    line = text.count("\n", 0, offset) + 1
    return f"line {line}, column {offset - (text.rfind(chr(10), 0, offset) + 1) + 1}"


def _input_problems(data: Any) -> list[str]:
    """Nesting depth, value count and lone surrogates of parsed data, walked without recursion."""
    max_depth, max_values = LIMITS["max_depth"], LIMITS["max_values"]
    stack: list[tuple[Any, str, int]] = [(data, "", 1)]
    count = 0
    while stack:
        value, path, depth = stack.pop()
        count += 1
        if count > max_values:
            return [f"(top level): more than {max_values} values (allowed: at most {max_values})"]
        where = path or "(top level)"
        if isinstance(value, str):
            bad = next((i for i, c in enumerate(value) if _is_surrogate(c)), None)
            if bad is not None:
                what = (
                    f"is not Unicode text: lone surrogate U+{ord(value[bad]):04X} at position {bad}"
                )
                return [_problem(f"{where}: {what}", "Unicode text without lone surrogates")]
            continue
        if isinstance(value, Mapping | list | tuple) and depth > max_depth:
            what = f"nested deeper than {max_depth} levels"
            return [_problem(f"{where}: {what}", f"at most {max_depth} levels of tables and lists")]
        if isinstance(value, Mapping):
            for key, item in value.items():
                key_path = _path_key(str(key))
                key_path = f"{path}.{key_path}" if path else key_path
                if isinstance(key, str) and any(_is_surrogate(c) for c in key):
                    what = "key is not Unicode text: it holds a lone surrogate"
                    return [_problem(f"{key_path}: {what}", "Unicode text without lone surrogates")]
                stack.append((item, key_path, depth + 1))
        elif isinstance(value, list | tuple):
            stack.extend((item, f"{path}[{i}]", depth + 1) for i, item in enumerate(value))
    return []


# --------------------------------------------------------------------------------------------
# loading


def migrate_renamed(data: Mapping[str, Any]) -> tuple[dict[str, Any], list[str]]:
    """The document with renamed keys (each kind's ``renamed`` in the rule table) in their new
    spelling, headings turned into bearings, and a message for each; `data` is not changed. A
    feature that gives both spellings keeps both (validation then names the old one)."""
    out = dict(data)
    notes: list[str] = []
    features = data.get("features")
    if not isinstance(features, list):
        return out, notes
    new_features = []
    for i, f in enumerate(features):
        tag = f.get("kind") if isinstance(f, Mapping) else None
        kind = _KINDS.get(tag) if isinstance(tag, str) else None
        if kind is None or not kind.get("renamed"):
            new_features.append(f)
            continue
        g = dict(f)
        name = f.get("name")
        what = f"features[{i}]" + (f" ({_quoted(name)})" if isinstance(name, str) and name else "")
        for rn in kind["renamed"]:
            old, new = rn["from"], rn["to"]
            if old not in g or new in g:
                continue
            value = g.pop(old)
            words = {"feature": what, "from": old, "to": new}
            convert = rn.get("convert") or "rename"
            if convert == "heading_to_bearing" and _is_number(value):
                value = bearing_of_heading(float(value))
                words["value"] = _num(value)
            else:
                convert = "rename"  # not a number: nothing to convert (validation names it)
            notes.append(_RENAMED_MESSAGES[convert].format(**words))
            g[new] = value
        new_features.append(g)
    out["features"] = new_features
    return out, notes


def _is_number(value: Any) -> bool:
    return isinstance(value, (int, float)) and not isinstance(value, bool) and math.isfinite(value)


def parse_spec(data: Mapping[str, Any], source: str = "<spec>") -> WorldSpec:
    """Validate a world spec given as plain data (the parsed TOML or JSON document).

    Raises
    ------
    SpecError
        Listing every problem found; ``source`` names the spec in the message. Data nested
        deeper than ``LIMITS["max_depth"]`` levels, with more than ``LIMITS["max_values"]``
        values or with lone surrogates in its text is refused before validation.
    """
    if not isinstance(data, Mapping):
        raise SpecError(source, [_problem("(top level): must be a table", "a table", data)])
    refused = _input_problems(data)
    if refused:
        raise SpecError(source, refused)
    data, notes = migrate_renamed(data)
    for note in notes:
        warnings.warn(SpecDeprecationWarning(f"{source}: {note}"), stacklevel=2)
    try:
        return WorldSpec.model_validate(dict(data))
    except ValidationError as exc:
        root = _schema()
        problems = [line for err in exc.errors() for line in _error_lines(root, err)]
        raise SpecError(source, _with_names(problems, data)) from None


_TOML_POSITION = re.compile(r"^(?P<msg>.*?)\s*\(at line (?P<line>\d+), column (?P<col>\d+)\)$")


def _reject_duplicate_keys(pairs: list[tuple[str, Any]]) -> dict[str, Any]:
    out: dict[str, Any] = {}
    for key, value in pairs:
        if key in out:
            raise ValueError(f"duplicate key {key!r}")
        out[key] = value
    return out


def _read_text(file: Path, source: str) -> str:
    """The file's text, refusing files over the size limit and text that is not UTF-8."""
    limit = LIMITS["max_bytes"]
    try:
        with file.open("rb") as f:
            raw = f.read(limit + 1)
        if len(raw) > limit:
            problem = f"the file is larger than the limit of {limit} bytes"
            raise SpecError(source, [problem], what="cannot read world spec")
        return raw.decode("utf-8")
    except FileNotFoundError:
        raise SpecError(source, ["file not found"], what="cannot read world spec") from None
    except UnicodeDecodeError as exc:
        problem = f"not UTF-8 text (bad byte at offset {exc.start})"
        raise SpecError(source, [problem], what="cannot read world spec") from None
    except OSError as exc:
        problem = exc.strerror or str(exc)
        raise SpecError(source, [problem], what="cannot read world spec") from None


def _parse_toml(text: str, source: str) -> Any:
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        match = _TOML_POSITION.match(str(exc))
        if match:
            where = f"line {match['line']}, column {match['col']}"
            problem = f"malformed TOML at {where}: {match['msg']}"
        else:
            problem = f"malformed TOML: {exc}"
    except ValueError as exc:  # e.g. an integer of more digits than Python converts
        problem = f"malformed TOML: {exc}"
    except RecursionError:  # the scan above keeps nesting within the limit; a last guard
        problem = f"malformed TOML: nested too deeply to read (limit {LIMITS['max_depth']} levels)"
    raise SpecError(source, [problem], what="cannot read world spec")


def _parse_json(text: str, source: str) -> Any:
    try:
        return json.loads(text, object_pairs_hook=_reject_duplicate_keys)
    except json.JSONDecodeError as exc:
        problem = f"malformed JSON at line {exc.lineno}, column {exc.colno}: {exc.msg}"
    except ValueError as exc:  # duplicate keys, integers of more digits than Python converts
        problem = f"malformed JSON: {exc}"
    except RecursionError:  # the scan above keeps nesting within the limit; a last guard
        problem = f"malformed JSON: nested too deeply to read (limit {LIMITS['max_depth']} levels)"
    raise SpecError(source, [problem], what="cannot read world spec")


def read_spec_data(path: str | os.PathLike[str]) -> Any:
    """The parsed document of a spec file (TOML for ``.toml``, JSON for ``.json``), not yet
    validated. Raises SpecError as :func:`load_spec` does for files that cannot be read."""
    file = Path(path)
    source = str(file)
    suffix = file.suffix.lower()
    if suffix not in (".toml", ".json"):
        problem = _problem("unsupported file type", ".toml or .json", suffix or "(none)")
        raise SpecError(source, [problem], what="cannot read world spec")
    text = _read_text(file, source)
    toml = suffix == ".toml"
    limit = LIMITS["max_depth"]
    deep = _scan_depth(text, _TOML_TOKENS if toml else _JSON_TOKENS, limit, toml)
    if deep is not None:
        fmt = "TOML" if toml else "JSON"
        problem = f"malformed {fmt} at {_line_col(text, deep)}: nested deeper than {limit} levels"
        raise SpecError(source, [problem], what="cannot read world spec")
    return _parse_toml(text, source) if toml else _parse_json(text, source)


def load_spec(path: str | os.PathLike[str]) -> WorldSpec:
    """Read and validate a world spec file: TOML for ``.toml``, JSON for ``.json``.

    Raises
    ------
    SpecError
        When the file is missing, unreadable or larger than ``LIMITS["max_bytes"]``, is not
        well-formed TOML/JSON or nests tables and lists deeper than ``LIMITS["max_depth"]``
        levels (the message gives the line and column), or describes an invalid world (every
        problem listed).
    """
    return parse_spec(read_spec_data(path), source=str(Path(path)))
