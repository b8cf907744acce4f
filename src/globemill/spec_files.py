"""Spec files as files: validate, convert between TOML and JSON (the C ABI reads JSON), and write
one canonical layout (keys in the order of the rule table, one world per file).

What is written is the document as the user wrote it (no defaults added), with its keys put in
the rule table's order. The document is validated first: nothing is written for a bad spec.
"""

from __future__ import annotations

import json
import os
from collections.abc import Mapping
from pathlib import Path
from typing import Any

from ._atomic import write_files_atomically
from .spec import SPEC_RULES, SpecError, WorldSpec, parse_spec, read_spec_data

FORMATS = {".toml": "toml", ".json": "json"}


def _order(rules_fields: list[dict[str, Any]], data: Mapping[str, Any]) -> list[str]:
    """Keys of `data` in the order of the table's fields; any other key after them, as given."""
    known = [f["key"] for f in rules_fields]
    return [k for k in known if k in data] + [k for k in data if k not in known]


def _feature_keys(data: Mapping[str, Any]) -> list[str]:
    common = SPEC_RULES["sections"]["feature"]["fields"]
    kind = next((k for k in SPEC_RULES["kinds"] if k["kind"] == data.get("kind")), None)
    own = kind["fields"] if kind else []
    # kind and name first, then the kind's own fields, then how it blends
    lead = [f for f in common if f["key"] in ("kind", "name")]
    tail = [f for f in common if f["key"] not in ("kind", "name")]
    return _order(lead + own + tail, data)


def canonical(data: Mapping[str, Any]) -> dict[str, Any]:
    """The document with every table's keys in the rule table's order (values unchanged)."""
    sections = SPEC_RULES["sections"]
    out: dict[str, Any] = {}
    for key in _order(sections["world"]["fields"], data):
        value = data[key]
        if key in ("lod", "collision") and isinstance(value, Mapping):
            value = {k: value[k] for k in _order(sections[key]["fields"], value)}
        elif key == "features" and isinstance(value, list):
            value = [
                {k: f[k] for k in _feature_keys(f)} if isinstance(f, Mapping) else f for f in value
            ]
        elif key == "layers" and isinstance(value, list):
            value = [
                {k: x[k] for k in _order(sections["layer"]["fields"], x)}
                if isinstance(x, Mapping)
                else x
                for x in value
            ]
        out[key] = value
    return out


def file_format(path: str | os.PathLike[str], what: str = "spec") -> str:
    suffix = Path(path).suffix.lower()
    if suffix not in FORMATS:
        raise ValueError(
            f"{what}: the file must end in .toml or .json, got {suffix or '(no suffix)'!r}"
        )
    return FORMATS[suffix]


def dumps(data: Mapping[str, Any], fmt: str) -> str:
    """The document as TOML or JSON text (UTF-8, newline at the end)."""
    if fmt == "json":
        return json.dumps(data, indent=2, ensure_ascii=False, allow_nan=False) + "\n"
    import tomli_w

    return tomli_w.dumps(_toml_ready(data))


def _toml_ready(value: Any) -> Any:
    # TOML has no null: keys holding null (a nullable field left unset) are left out
    if isinstance(value, Mapping):
        return {k: _toml_ready(v) for k, v in value.items() if v is not None}
    if isinstance(value, (list, tuple)):
        return [_toml_ready(v) for v in value]
    return value


def read_valid(path: str | os.PathLike[str]) -> tuple[dict[str, Any], WorldSpec]:
    """The document of spec file `path` and the validated spec; SpecError when it is bad."""
    data = read_spec_data(path)
    spec = parse_spec(data, source=str(Path(path)))
    return dict(data), spec


def convert(src: str | os.PathLike[str], dst: str | os.PathLike[str]) -> WorldSpec:
    """Write spec file `src` as `dst` (format from each suffix), keys in canonical order.

    The written file describes the same world: it loads to an equal spec (checked before it is
    written). Raises SpecError for a bad spec and ValueError for a bad suffix; writes nothing
    then."""
    fmt = file_format(dst, "output")
    file_format(src)
    data, spec = read_valid(src)
    text = dumps(canonical(data), fmt)
    _same_world(text, fmt, spec, str(dst))
    write_files_atomically({Path(dst): text.encode("utf-8")})
    return spec


def formatted(path: str | os.PathLike[str]) -> tuple[str, str, WorldSpec]:
    """(the file's text, its canonical text, the spec) of spec file `path`."""
    fmt = file_format(path)
    data, spec = read_valid(path)
    text = dumps(canonical(data), fmt)
    _same_world(text, fmt, spec, str(path))
    before = Path(path).read_text(encoding="utf-8")
    if fmt == "toml" and before != text and has_comments(before):
        raise SpecError(
            str(path),
            [
                "holds comments, which formatting would drop; nothing was changed (write the "
                "canonical layout elsewhere with: globemill spec convert SPEC -o NEW.toml)"
            ],
            what="cannot format world spec",
        )
    return before, text, spec


def has_comments(toml_text: str) -> bool:
    """Whether TOML text holds a comment (a # outside strings)."""
    from .spec import _TOML_TOKENS

    return any(m.group().startswith("#") for m in _TOML_TOKENS.finditer(toml_text))


def _same_world(text: str, fmt: str, spec: WorldSpec, where: str) -> None:
    if fmt == "json":
        back = json.loads(text)
    else:
        from .spec import tomllib

        back = tomllib.loads(text)
    again = parse_spec(back, source=where)
    if again != spec:  # a guard: the writer must never change the world
        raise SpecError(where, ["the rewritten file would describe another world"])
