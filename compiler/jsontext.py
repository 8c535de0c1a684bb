"""Plain JSON values from dotseq's data (dataclasses, numpy arrays and
scalars, complex numbers, non-finite floats), for every file written as JSON
(results.json, sweep.json, the sweep's state file)."""

from __future__ import annotations

import dataclasses
import json
import math
from pathlib import Path
from typing import Any, Mapping

import numpy as np


def jsonable(obj: Any) -> Any:
    """A plain JSON value (dict, list, str, int, float, bool, None) for ``obj``.

    Parameters
    ----------
    obj : object
        Dataclasses become dicts of their fields, mappings dicts with text
        keys, tuples, lists and numpy arrays lists, sets sorted lists, numpy
        scalars Python numbers, complex numbers ``{"re": x, "im": y}``,
        paths text; non-finite floats the strings ``"nan"``, ``"inf"``,
        ``"-inf"``.  Anything else becomes ``str(obj)``.

    Returns
    -------
    object
        Something :func:`json.dumps` writes with ``allow_nan=False``.
    """
    if obj is None or isinstance(obj, (bool, str)):
        return obj
    if isinstance(obj, np.generic):
        return jsonable(obj.item())
    if isinstance(obj, int):
        return int(obj)
    if isinstance(obj, float):
        return _float(obj)
    if isinstance(obj, complex):
        return {"im": _float(obj.imag), "re": _float(obj.real)}
    if dataclasses.is_dataclass(obj) and not isinstance(obj, type):
        return {f.name: jsonable(getattr(obj, f.name)) for f in dataclasses.fields(obj)}
    if isinstance(obj, Mapping):
        return {str(k): jsonable(v) for k, v in obj.items()}
    if isinstance(obj, np.ndarray):
        return jsonable(obj.tolist())
    if isinstance(obj, (list, tuple)):
        return [jsonable(v) for v in obj]
    if isinstance(obj, (set, frozenset)):
        return sorted((jsonable(v) for v in obj), key=lambda v: json.dumps(v, sort_keys=True))
    if isinstance(obj, Path):
        return str(obj)
    return str(obj)


def _float(x: float) -> float | str:
    x = float(x)
    if math.isfinite(x):
        return x
    return "nan" if math.isnan(x) else ("inf" if x > 0 else "-inf")
