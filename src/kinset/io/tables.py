"""Reading instrument CSV exports into SI tables.

A file may hold one device or many, in any column order; lines whose first
non-blank character is ``#`` are comments; units live in the column names
(``kinset.io.units``). Every problem raises :class:`kinset.errors.InputError`
naming the file and the line or column.
"""

from __future__ import annotations

import io
import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from kinset.errors import InputError
from kinset.io.units import resolve_columns

_COMMENT = re.compile(rb"^[ \t]*#", re.MULTILINE)


@dataclass
class Spec:
    """What one kind of table holds.

    quantities : quantity -> dimension for the numeric columns kinset reads.
    required : the quantities that must be present.
    text : plain (unit-less) text columns, e.g. ``device``, ``fixture``.
    required_text : the text columns that must be present.
    integer : plain columns holding whole numbers (``position``).
    """

    quantities: dict[str, str]
    required: set[str]
    text: tuple[str, ...] = ("device",)
    required_text: tuple[str, ...] = ("device",)
    integer: tuple[str, ...] = ()


def _decode(raw: bytes, path: str) -> str:
    if raw.startswith(b"\xef\xbb\xbf"):
        raw = raw[3:]
    try:
        return raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        line = raw.count(b"\n", 0, exc.start) + 1
        raise InputError(f"byte 0x{raw[exc.start]:02x} is not valid UTF-8 text "
                         f"(save the file as UTF-8)", path, line) from None


def _body(path: str) -> tuple[str, list[int]]:
    """The file's text without comment and blank lines, and the kept lines' indices."""
    try:
        raw = Path(path).read_bytes()
    except OSError as exc:
        raise InputError(f"cannot read file: {exc.strerror}", path) from None
    text = _decode(raw, path)
    all_lines = text.splitlines()
    keep = [i for i, s in enumerate(all_lines) if s.strip() and not s.lstrip().startswith("#")]
    if not keep:
        raise InputError("file holds no header and no data", path)
    return "\n".join(all_lines[i] for i in keep), keep


def _parse(body: str, keep: list[int], path: str, dtype) -> pd.DataFrame:
    try:
        return pd.read_csv(io.StringIO(body), dtype=dtype, keep_default_na=False,
                           na_values=[""] if dtype is not str else None,
                           skipinitialspace=True, skip_blank_lines=False)
    except pd.errors.ParserError as exc:
        m = re.search(r"line (\d+)", str(exc))
        line = keep[int(m.group(1)) - 1] + 1 if m and int(m.group(1)) - 1 < len(keep) else None
        raise InputError(f"row does not fit the header ({exc})", path, line) from None
    except pd.errors.EmptyDataError:
        raise InputError("file holds no header and no data", path) from None


def _check_header(columns, path: str, header_line: int) -> list[str]:
    cols = [str(c).strip() for c in columns]
    seen: set[str] = set()
    for c in cols:
        base = c.rsplit(".", 1)[0] if re.fullmatch(r".+\.\d+", c) else c
        if c in seen or (base != c and base in seen):
            raise InputError("column name appears twice", path, header_line, base)
        seen.add(c)
    return cols


def read_text_table(path: str | Path) -> tuple[pd.DataFrame, np.ndarray]:
    """Read a CSV file as text cells, skipping comment and blank lines.

    Returns
    -------
    table : DataFrame of str (columns as written, stripped)
    lines : ndarray of int
        The 1-based file line number of each table row.
    """
    path = str(path)
    body, keep = _body(path)
    table = _parse(body, keep, path, str)
    table.columns = _check_header(table.columns, path, keep[0] + 1)
    return table, np.asarray(keep[1:], dtype=np.int64) + 1


def _fast_numeric(body, keep, path, cols, numeric, required, found):
    """Parse numeric columns straight to float; None when any cell needs a closer look."""
    dtype = {c: (np.float64 if c in numeric else str) for c in cols}
    try:
        table = _parse(body, keep, path, dtype)
    except (ValueError, TypeError) as exc:
        if isinstance(exc, InputError):
            raise
        return None
    table.columns = cols
    required_cols = {found[q][0] for q in required}
    for c in numeric:
        v = table[c].to_numpy()
        if c in required_cols:
            if not np.isfinite(v).all():
                return None
        elif np.isinf(v).any():
            return None
        elif np.isnan(v).any():
            return None  # empty optional cells are fine but "nan" text is not: look closer
    return table


def to_number(cells: pd.Series, lines: np.ndarray, path: str, column: str,
              allow_empty: bool = False) -> np.ndarray:
    """Convert a text column to float, naming the first bad cell's line."""
    if cells.dtype.kind == "f":
        return cells.to_numpy(dtype=float)
    stripped = cells.str.strip()
    values = pd.to_numeric(stripped, errors="coerce").to_numpy(dtype=float)
    empty = (stripped == "").to_numpy()
    bad = np.isnan(values) & ~empty
    # "nan" is parsed as NaN by to_numeric: treat it as a bad number, and inf too.
    bad |= np.isinf(values)
    bad |= stripped.str.lower().isin(["nan", "-nan", "+nan"]).to_numpy()
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise InputError(f"'{cells.iloc[i]}' is not a finite number", path, int(lines[i]), column)
    if empty.any() and not allow_empty:
        i = int(np.flatnonzero(empty)[0])
        raise InputError("cell is empty (a truncated row?)", path, int(lines[i]), column)
    return values


def read_table(path: str | Path, spec: Spec) -> pd.DataFrame:
    """Read one CSV file into SI columns named by quantity.

    The returned frame has the text columns of ``spec`` as str, every quantity
    found as float in SI (temperatures in kelvin), and two bookkeeping columns:
    ``source`` (the file path) and ``line`` (the 1-based line number).
    """
    path = str(path)
    body, keep = _body(path)
    lines = np.asarray(keep[1:], dtype=np.int64) + 1
    header = pd.read_csv(io.StringIO(body.split("\n", 1)[0]), nrows=0, skipinitialspace=True)
    cols = _check_header(header.columns, path, keep[0] + 1)
    for name in spec.required_text:
        if name not in cols:
            raise InputError(f"missing required column '{name}' "
                             f"(columns present: {', '.join(cols)})", path, keep[0] + 1)
    required = set(spec.required)
    found = resolve_columns(cols, spec.quantities, path, required, keep[0] + 1)
    numeric = [col for col, _ in found.values()] + [c for c in spec.integer if c in cols]
    fast = _fast_numeric(body, keep, path, cols, numeric, required, found)
    if fast is not None:
        cells = fast
    else:  # something is off: reread as text to name the bad cell
        cells = _parse(body, keep, path, str)
        cells.columns = cols
    out: dict[str, object] = {}
    for name in spec.text:
        if name in cols:
            s = cells[name].astype(str).str.strip()
            if name in spec.required_text:
                empty = (s == "").to_numpy()
                if empty.any():
                    i = int(np.flatnonzero(empty)[0])
                    raise InputError(f"'{name}' is empty", path, int(lines[i]), name)
            out[name] = s.to_numpy(dtype=object)
    for name in spec.integer:
        if name in cols:
            v = to_number(cells[name], lines, path, name, allow_empty=True)
            frac = np.isfinite(v) & (v != np.round(v))
            if frac.any():
                i = int(np.flatnonzero(frac)[0])
                raise InputError(f"'{cells[name].iloc[i]}' is not a whole number", path,
                                 int(lines[i]), name)
            out[name] = v
    for quantity, (col, unit) in found.items():
        optional = quantity not in required
        v = to_number(cells[col], lines, path, col, allow_empty=optional)
        out[quantity] = v * unit.scale + unit.offset
    frame = pd.DataFrame(out)
    frame["source"] = path
    frame["line"] = lines
    return frame
