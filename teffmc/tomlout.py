"""A minimal TOML writer for the run record (tomllib only reads)."""

import json
import math

__all__ = ["dumps_toml"]


def _value(v):
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        return repr(v) if math.isfinite(v) else ("nan" if math.isnan(v) else
                                                 ("inf" if v > 0 else "-inf"))
    if isinstance(v, (list, tuple)):
        return "[" + ", ".join(_value(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{" + ", ".join(f"{_key(k)} = {_value(x)}" for k, x in v.items()) + "}"
    return json.dumps(str(v), ensure_ascii=False)


def _key(k):
    k = str(k)
    return k if k.replace("_", "").replace("-", "").isalnum() else json.dumps(k)


def dumps_toml(data, prefix=""):
    """Serialise nested dicts / lists of dicts / scalars to TOML text."""
    lines, tables, arrays = [], [], []
    for k, v in data.items():
        if isinstance(v, dict):
            tables.append((k, v))
        elif isinstance(v, list) and v and all(isinstance(x, dict) for x in v):
            arrays.append((k, v))
        else:
            lines.append(f"{_key(k)} = {_value(v)}")
    out = "\n".join(lines) + ("\n" if lines else "")
    for k, v in tables:
        name = f"{prefix}{_key(k)}"
        out += f"\n[{name}]\n" + dumps_toml(v, name + ".")
    for k, v in arrays:
        name = f"{prefix}{_key(k)}"
        for item in v:
            out += f"\n[[{name}]]\n" + dumps_toml(item, name + ".")
    return out
