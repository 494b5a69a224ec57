"""Shared printing helpers for commands: tables for people, JSON for machines."""

from __future__ import annotations

import dataclasses
import json
import math
import sys
from collections.abc import Sequence

import numpy as np


def jsonable(value):
    """Convert dataclasses, numpy scalars and arrays into JSON-ready values.

    Non-finite floats become ``None`` so the output is strict JSON.
    """
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        return {f.name: jsonable(getattr(value, f.name)) for f in dataclasses.fields(value)}
    if isinstance(value, dict):
        return {str(k): jsonable(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [jsonable(v) for v in value]
    if isinstance(value, np.ndarray):
        return jsonable(value.tolist())
    if isinstance(value, np.generic):
        return jsonable(value.item())
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value


def print_json(value, stream=None) -> None:
    """Write ``value`` as indented strict JSON to stdout (or ``stream``)."""
    stream = stream or sys.stdout
    json.dump(jsonable(value), stream, indent=2, allow_nan=False)
    stream.write("\n")


def format_table(rows: Sequence[Sequence], headers: Sequence[str], formats: Sequence[str] | None = None) -> str:
    """Render rows as a right-aligned plain-text table.

    Parameters
    ----------
    rows : sequence of sequences
        Cell values, one inner sequence per row.
    headers : sequence of str
        Column titles (put the unit in the title).
    formats : sequence of str, optional
        ``format()`` specs per column, e.g. ``".3f"``; strings pass through.
    """
    formats = list(formats or [""] * len(headers))
    cells = [[str(h) for h in headers]]
    for row in rows:
        cells.append([
            v if isinstance(v, str) else format(v, f) for v, f in zip(row, formats)
        ])
    widths = [max(len(r[i]) for r in cells) for i in range(len(headers))]
    lines = ["  ".join(c.rjust(w) for c, w in zip(r, widths)) for r in cells]
    lines.insert(1, "  ".join("-" * w for w in widths))
    return "\n".join(lines)


def add_json_flag(parser) -> None:
    """Add the standard ``--json`` flag."""
    parser.add_argument("--json", action="store_true", help="print machine-readable JSON on stdout")
