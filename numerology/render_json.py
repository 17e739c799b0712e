"""JSON renderer: plain dicts of SI values under unit-suffixed keys.

Every document carries ``schema`` (its name) and ``schema_version``; the
schemas are described in the README. Output is deterministic: keys keep their
insertion order, floats are written with ``repr`` precision, and infinities
(unbounded limits) become ``null``.
"""

from __future__ import annotations

import json
import math

import numpy as np

SCHEMA_VERSION = "1.0"
#: Documents whose keys changed meaning since 1.0 (see the README's JSON section).
SCHEMA_VERSIONS = {"numerology.verify": "2.0"}


def _clean(obj):
    if isinstance(obj, dict):
        return {str(k): _clean(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_clean(v) for v in obj]
    if isinstance(obj, (np.floating, float)):
        value = float(obj)
        return None if not math.isfinite(value) else value
    if isinstance(obj, (np.integer,)):
        return int(obj)
    if isinstance(obj, np.bool_):
        return bool(obj)
    if isinstance(obj, np.ndarray):
        return _clean(obj.tolist())
    return obj


def document(schema: str, body: dict) -> str:
    """Serialise one output document with its schema header."""
    payload = {"schema": schema, "schema_version": SCHEMA_VERSIONS.get(schema, SCHEMA_VERSION), **body}
    return json.dumps(_clean(payload), indent=2, allow_nan=False) + "\n"
