"""Plain JSON-ready values from results: numbers, arrays, paths and dataclasses.

One helper for every JSON we write (command-line --json, export provenance, sessions). Non-finite
floats become None (JSON has no NaN); anything else unknown becomes its text.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import numpy as np


def to_jsonable(obj: Any) -> Any:
    if isinstance(obj, Mapping):
        return {str(k): to_jsonable(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [to_jsonable(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return to_jsonable(obj.tolist())
    if isinstance(obj, np.generic):
        return to_jsonable(obj.item())
    if isinstance(obj, float):
        return obj if math.isfinite(obj) else None
    if isinstance(obj, Path):
        return str(obj)
    if isinstance(obj, str | int | bool) or obj is None:
        return obj
    if hasattr(obj, "__dataclass_fields__"):
        from dataclasses import asdict

        return to_jsonable(asdict(obj))
    return str(obj)
