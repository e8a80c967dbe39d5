"""Deterministic JSON files: sorted keys where the writer asks, fixed float formatting, no NaN."""

from __future__ import annotations

import dataclasses
import json
import math
from pathlib import Path, PurePath
from typing import Any

import numpy as np

from premiumlab._core.errors import InputError


def plain(obj: Any) -> Any:
    """Convert numpy scalars and arrays to plain Python, dataclasses to dicts of their fields and
    paths to strings; non-finite floats become None."""
    if dataclasses.is_dataclass(obj) and not isinstance(obj, type):
        return {f.name: plain(getattr(obj, f.name)) for f in dataclasses.fields(obj)}
    if isinstance(obj, PurePath):
        return str(obj)
    if isinstance(obj, dict):
        return {str(k): plain(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [plain(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return [plain(v) for v in obj.tolist()]
    if isinstance(obj, np.generic):
        obj = obj.item()
    if isinstance(obj, float) and not math.isfinite(obj):
        return None
    return obj


def write_json(path: str | Path, obj: Any) -> None:
    """Write `obj` as indented UTF-8 JSON with a trailing newline."""
    Path(path).write_text(json.dumps(plain(obj), indent=2, allow_nan=False) + "\n", encoding="utf-8")


def read_json(path: str | Path) -> Any:
    """Read a JSON file, naming the file on any error."""
    p = Path(path)
    try:
        return json.loads(p.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise InputError(f"{p}: not found") from None
    except (UnicodeDecodeError, json.JSONDecodeError) as e:
        raise InputError(f"{p}: not valid JSON ({e})") from None
