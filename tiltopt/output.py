"""Plain-text table, JSON and CSV writers for the command line."""
from __future__ import annotations

import csv
import io
import json
import math
from typing import Any, Iterable, Sequence


def _cell(v: Any, digits: int) -> str:
    if v is None:
        return "-"
    if isinstance(v, bool):
        return "yes" if v else "NO"
    if isinstance(v, float):
        if not math.isfinite(v):
            return "-"
        text = f"{v:.{digits}f}"
        return text[1:] if text.startswith("-") and float(text) == 0 else text
    if isinstance(v, (list, tuple)):
        return "[" + ", ".join(_cell(x, digits) for x in v) + "]"
    return str(v)


def table(rows: Sequence[dict], columns: Sequence[tuple[str, str]] | None = None, digits: int = 3) -> str:
    """Aligned text table. ``columns`` is a list of (key, header)."""
    if not rows:
        return "(no rows)"
    columns = columns or [(k, k) for k in rows[0]]
    cells = [[h for _, h in columns]] + [[_cell(r.get(k), digits) for k, _ in columns] for r in rows]
    widths = [max(len(row[i]) for row in cells) for i in range(len(columns))]
    lines = ["  ".join(c.rjust(w) for c, w in zip(row, widths)) for row in cells]
    lines.insert(1, "  ".join("-" * w for w in widths))
    return "\n".join(lines)


def to_json(obj: Any) -> str:
    def clean(o):
        if isinstance(o, float) and not math.isfinite(o):
            return None
        if isinstance(o, dict):
            return {k: clean(v) for k, v in o.items()}
        if isinstance(o, (list, tuple)):
            return [clean(v) for v in o]
        if hasattr(o, "item") and callable(o.item):
            return clean(o.item())
        return o

    return json.dumps(clean(obj), indent=2, allow_nan=False)


def flatten(row: dict) -> dict:
    """Flatten nested dicts/lists for CSV: ``spring_lengths_mm.left_spring``, ``contact_left_mm.y``."""
    out = {}
    for k, v in row.items():
        if isinstance(v, dict):
            for kk, vv in v.items():
                out[f"{k}.{kk}"] = vv
        elif isinstance(v, (list, tuple)) and len(v) == 2:
            out[f"{k}.y"], out[f"{k}.z"] = v
        elif v is None and k.startswith("contact_"):
            out[f"{k}.y"], out[f"{k}.z"] = None, None
        else:
            out[k] = v
    return out


def to_csv(rows: Iterable[dict]) -> str:
    rows = [flatten(r) for r in rows]
    if not rows:
        return ""
    keys: list[str] = []
    for r in rows:
        keys += [k for k in r if k not in keys]
    buf = io.StringIO()
    w = csv.DictWriter(buf, fieldnames=keys, lineterminator="\n")
    w.writeheader()
    for r in rows:
        w.writerow({k: ("" if r.get(k) is None else r.get(k)) for k in keys})
    return buf.getvalue()
