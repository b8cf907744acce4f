"""globemill: bake the ground of small round game worlds into triangle meshes."""

__version__ = "0.1.0"

from .bake import BakeError, BakeResult, bake  # noqa: E402
from .farm import FarmSummary, farm  # noqa: E402
from .field import Field, field  # noqa: E402
from .session import EditReport, EditSession  # noqa: E402
from .spec import SpecError, WorldSpec, json_schema, load_spec, parse_spec  # noqa: E402

__all__ = [
    "BakeError",
    "BakeResult",
    "EditReport",
    "EditSession",
    "FarmSummary",
    "Field",
    "SpecError",
    "WorldSpec",
    "__version__",
    "bake",
    "farm",
    "field",
    "json_schema",
    "load_spec",
    "parse_spec",
]
