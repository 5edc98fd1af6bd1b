"""Plain Python data out of numpy values, and the one way tradewise writes a JSON file.

(The archive writer, which runs in a process of its own on the standard
library only, keeps its own encoder; see ``_archive_writer.py``.)
"""

from __future__ import annotations

import json
import math
import os
from pathlib import Path
from typing import Any

import numpy as np

__all__ = ["plain", "write_json"]


def plain(value: Any) -> Any:
    """``value`` with numpy scalars and arrays made Python numbers and lists, tuples made lists, paths
    made text and non-finite floats made ``None``, through dicts and lists.

    Examples
    --------
    >>> plain({"n": np.int64(3), "x": [np.float64(0.5), float("nan")], "p": Path("a")})
    {'n': 3, 'x': [0.5, None], 'p': 'a'}
    """
    if isinstance(value, dict):
        return {str(k): plain(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [plain(v) for v in value]
    if isinstance(value, np.ndarray):
        return plain(value.tolist())
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if isinstance(value, Path):
        return str(value)
    return value


def write_json(path: str | Path, data: Any, *, indent: int | None = 2) -> Path:
    """Write ``plain(data)`` as UTF-8 JSON (strict: no NaN), replacing the file only once it is whole."""
    path = Path(path)
    text = json.dumps(plain(data), indent=indent, allow_nan=False) + "\n"
    partial = path.with_name(f".{path.name}.{os.getpid()}.partial")
    partial.write_text(text, encoding="utf-8")
    os.replace(partial, path)
    return path
