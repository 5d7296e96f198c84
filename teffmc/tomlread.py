"""Walking a parsed TOML table with errors that name the file and the dotted key."""

import math
from pathlib import Path

from .errors import ConfigError

__all__ = ["TableReader"]


class TableReader:
    """Walks a TOML table, tracking the dotted key for error messages."""

    def __init__(self, file, table, prefix=""):
        self.file, self.table, self.prefix = file, table, prefix
        self.used = set()

    def key(self, k):
        """Return the dotted key of ``k`` in this table, as error messages name it."""
        return f"{self.prefix}{k}"

    def err(self, k, msg, value=None):
        """Return a ConfigError naming the file, the dotted key of ``k`` and ``value``."""
        return ConfigError(msg, file=self.file, key=self.key(k), value=value)

    def get(self, k, types, default=None, *, required=False):
        """Return the value of ``k``, checked to be of ``types`` (and finite); else refuse.

        An int is accepted for a float; a bool is never a number. ``default`` when absent,
        unless ``required``.
        """
        self.used.add(k)
        if k not in self.table:
            if required:
                raise self.err(k, "is required but missing")
            return default
        v = self.table[k]
        if types is float and isinstance(v, int) and not isinstance(v, bool):
            v = float(v)
        if not isinstance(v, types) or (isinstance(v, bool) and types in (int, float)):
            want = (types.__name__ if isinstance(types, type)
                    else "/".join(t.__name__ for t in types))
            raise self.err(k, f"should be {want} but got {v!r}", v)
        if isinstance(v, float) and not math.isfinite(v):
            raise self.err(k, f"should be finite but got {v!r}", v)
        return v

    def positive(self, k, default=None, *, required=False):
        """Return the float value of ``k``, refused unless > 0."""
        v = self.get(k, float, default, required=required)
        if v is not None and v <= 0:
            raise self.err(k, f"should be > 0 but got {v!r}", v)
        return v

    def sub(self, k, *, required=False):
        """Return a TableReader of the sub-table ``k``, or None when absent."""
        t = self.get(k, dict, None, required=required)
        return None if t is None else TableReader(self.file, t, f"{self.key(k)}.")

    def choice(self, k, allowed, default):
        """Return the string value of ``k``, refused unless one of ``allowed``."""
        v = self.get(k, str, default)
        if v not in allowed:
            raise self.err(k, f"should be one of {', '.join(allowed)} but got {v!r}", v)
        return v

    def done(self):
        """Refuse the first key of the table that was never read (an unknown key)."""
        extra = sorted(set(self.table) - self.used)
        if extra:
            raise self.err(extra[0], "unknown key", extra[0])

    def path(self, k, base, *, required=False):
        """Return the path in ``k`` (relative to ``base``, ``~`` expanded), refused if missing."""
        v = self.get(k, str, None, required=required)
        if v is None:
            return None
        p = Path(v).expanduser()
        p = p if p.is_absolute() else (base / p)
        if not p.exists():
            raise self.err(k, f"file not found: {p}", v)
        return p
