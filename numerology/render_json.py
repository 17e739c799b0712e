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

#: 2.0: check and solve name their rule list "rules" ("constraints" stays as a deprecated alias until 3.0), each
#: rule with its "value", "comparison" and "limit"; designs describe their pilot arrangement ("pilot": scope,
#: symbols, period, boost_db, data_shared) and channel_bandwidth_hz; the cyclic-prefix rule is "guard_interval"
#: by default and "pilots_in_slot" is gone; normalised profiles give "delays_rms" and "rms_delay_spread_rms"
#: (in units of the rms spread) instead of "delays_s" and "rms_delay_spread_s"; verify gives a verdict per
#: figure (agree, disagree, inconclusive); sweep --out writes its metadata as numerology.sweep_csv.
SCHEMA_VERSION = "2.0"
#: Documents whose keys changed at a different release than the rest. numerology.solve 2.1 (keys added): the
#: window says whether it is "empty" and gives "lower_bound_hz" and "upper_bound_hz" (the crossing values of an
#: empty window); "diagnosis" {"cause", "statement", "bounds"}; each relaxation gives "toml_value", "current",
#: "direction" and "also" (its value_si is null for a choice); "relaxation_pairs" where no single change does.
#: numerology.sweep and numerology.sweep_csv 2.1 (keys added): "estimation_table", how the estimation error of sites
#: sharing a channel was tabulated over the Doppler (null when no table was used); each sweep site's
#: "estimation_interpolated". 2.2: sites stretching one profile shape may share a table over the stretch and the
#: Doppler; "intervals" counts the accepted cells (intervals of the Doppler, or rectangles of stretch and Doppler).
SCHEMA_VERSIONS: dict = {"numerology.solve": "2.1", "numerology.plan": "1.0", "numerology.sweep": "2.2",
                         "numerology.sweep_csv": "2.2"}


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
