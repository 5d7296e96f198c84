"""A small, strict reader for CSV and whitespace-separated text tables.

Format: optional ``# key: value`` (or ``# key = value``) comment lines giving
metadata such as ``wave_unit``, ``flux_unit`` or ``medium``; an optional header
line of column names, each optionally followed by a unit in brackets
(``wavelength [nm]``); then one row per line. Commas separate fields in
``.csv`` files (and in any file whose first row contains a comma), whitespace
otherwise.
"""

import re

import numpy as np

from teffmc.errors import DataError

__all__ = ["read_text_table", "to_float"]

_UNIT_IN_NAME = re.compile(r"^\s*(.*?)\s*[\[(]\s*(.+?)\s*[\])]\s*$")
_META = re.compile(r"^#\s*([A-Za-z_][\w\-]*)\s*[:=]\s*(.+?)\s*$")


def _is_number(text):
    try:
        float(text)
    except ValueError:
        return False
    return True


def read_text_table(path):
    """Read a text table.

    Returns
    -------
    names : list of str
        Column names (``col1, col2, ...`` when the file has no header).
    units : dict
        ``{name: unit string}`` for columns whose header gives a unit.
    columns : dict
        ``{name: ndarray of str}``.
    meta : dict
        ``{key: value}`` from ``# key: value`` comment lines (keys lower-case).
    """
    try:
        with open(path, encoding="utf-8") as fh:
            lines = fh.read().splitlines()
    except UnicodeDecodeError as exc:
        raise DataError(f"is not UTF-8 text (byte 0x{exc.object[exc.start]:02x} at offset "
                        f"{exc.start}); save the table as UTF-8", file=path) from None
    meta, rows, sep = {}, [], None
    for number, line in enumerate(lines, start=1):
        text = line.strip()
        if not text:
            continue
        if text.startswith("#"):
            match = _META.match(text)
            if match:
                meta[match.group(1).lower()] = match.group(2)
            continue
        if sep is None:
            sep = "," if (str(path).lower().endswith(".csv") or "," in text) else None
        fields = [f.strip() for f in text.split(sep)] if sep else text.split()
        rows.append((number, fields))
    if not rows:
        raise DataError("no data rows", file=path)
    names, units = None, {}
    first = rows[0][1]
    if not all(_is_number(f) for f in first if f != ""):
        names, rows = [], rows[1:]
        for field in first:
            match = _UNIT_IN_NAME.match(field)
            name = match.group(1) if match else field
            if match:
                units[name] = match.group(2)
            names.append(name)
        if not rows:
            raise DataError("header but no data rows", file=path)
    if names is None:
        names = [f"col{i + 1}" for i in range(len(first))]
    for number, fields in rows:
        if len(fields) != len(names):
            raise DataError(
                f"line {number} has {len(fields)} fields but the table has {len(names)} columns",
                file=path,
                value=len(fields),
            )
    data = np.array([fields for _, fields in rows], dtype=str)
    columns = {name: data[:, i] for i, name in enumerate(names)}
    return names, units, columns, meta


def to_float(values, *, file=None, column=None):
    """Convert strings to float; an empty field becomes NaN, text is an error."""
    out = np.empty(len(values))
    for i, text in enumerate(values):
        if text == "":
            out[i] = np.nan
            continue
        try:
            out[i] = float(text)
        except ValueError:
            raise DataError(
                f"row {i + 1}: should be a number but got {str(text)!r}",
                file=file,
                column=column,
                value=str(text),
            ) from None
    return out
