"""Reading instrument CSV exports into SI tables.

A file may hold one device or many, in any column order; lines whose first
non-blank character is ``#`` are comments; units live in the column names
(``kinset.io.units``). Every problem raises :class:`kinset.errors.InputError`
naming the file and the line or column.
"""

from __future__ import annotations

import csv
import io
import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from kinset.errors import InputError
from kinset.io.units import resolve_columns, split_column

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


def _body(path: str) -> tuple[str | bytes, np.ndarray]:
    """The file without comment and blank lines, and the kept lines' 0-based indices.

    Comment and blank lines found only above the header and below the last data line
    (the usual layout of an export) are cut off without copying the body line by line.
    """
    try:
        raw = Path(path).read_bytes()
    except OSError as exc:
        raise InputError(f"cannot read file: {exc.strerror}", path) from None
    if raw.startswith(b"\xef\xbb\xbf"):
        raw = raw[3:]
    if not raw.isascii():   # ASCII is valid UTF-8: only other text needs the check
        _decode(raw, path)
    fast = _plain_body(raw)
    if fast is not None:
        return fast
    data = np.frombuffer(raw, dtype=np.uint8)
    newlines = np.flatnonzero(data == 10)
    n_lines = len(newlines) + (0 if raw.endswith(b"\n") else 1)
    if not raw:
        n_lines = 0
    starts = np.concatenate([[0], newlines + 1])[:n_lines]
    first_char = np.append(data, np.uint8(10))[starts]
    indented = (first_char == 32) | (first_char == 9)
    if indented.any():   # rare: look past leading blanks the slow way
        for i in np.flatnonzero(indented):
            end = newlines[i] if i < len(newlines) else len(raw)
            stripped = raw[starts[i]:end].lstrip(b" \t")
            first_char[i] = stripped[0] if stripped else 10
    skipped = np.flatnonzero((first_char == 35) | (first_char == 10) | (first_char == 13))
    kept_mask = np.ones(n_lines, dtype=bool)
    kept_mask[skipped] = False
    kept = np.flatnonzero(kept_mask)
    if not len(kept):
        raise InputError("file holds no header and no data", path)
    first, last = kept[0], kept[-1]
    if len(kept) == last - first + 1:       # nothing skipped between header and last row
        start = 0 if first == 0 else newlines[first - 1] + 1
        end = newlines[last] if last < len(newlines) else len(raw)
        return raw[start:end], kept
    lines = raw.decode("utf-8").splitlines()
    return "\n".join(lines[i] for i in kept), kept


_LINE_START = np.frombuffer(b"#\n\r \t", dtype=np.uint8)   # a line that is not plain data


def _plain_body(raw: bytes) -> tuple[bytes, np.ndarray] | None:
    """The usual export: comments and blank lines only above the header. Then the body
    is one slice and its lines are numbered without scanning them one by one; ``None``
    when any line below the header may be a comment, blank or indented."""
    pos, line = 0, 0
    while pos < len(raw):            # the comment lines above the header (a few)
        nl = raw.find(b"\n", pos)
        end = len(raw) if nl < 0 else nl
        head = raw[pos:end].lstrip(b" \t")
        if head.rstrip(b"\r") and not head.startswith(b"#"):
            break
        pos, line = end + 1, line + 1
    else:
        return None
    stop = len(raw)
    while stop > pos and raw[stop - 1] in (10, 13):     # (rstrip would copy the file)
        stop -= 1
    stop += raw[stop:stop + 1] == b"\r"     # the last line keeps its own CR, as below
    data = np.frombuffer(raw, dtype=np.uint8, count=stop - pos, offset=pos) if stop > pos else \
        np.zeros(0, dtype=np.uint8)
    newlines = np.flatnonzero(data == 10)
    if np.isin(data[newlines + 1], _LINE_START).any():   # '#', blank or indented below
        return None
    return raw[pos:stop], np.arange(line, line + len(newlines) + 1, dtype=np.int64)


def _first_line(body: str | bytes) -> str:
    end = body.find(b"\n" if isinstance(body, bytes) else "\n")
    head = body if end < 0 else body[:end]
    return head.decode("utf-8") if isinstance(head, bytes) else head


def _decode(raw: bytes, path: str) -> str:
    try:
        return raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        line = raw.count(b"\n", 0, exc.start) + 1
        raise InputError(f"byte 0x{raw[exc.start]:02x} is not valid UTF-8 text "
                         f"(save the file as UTF-8)", path, line) from None


def _parse(body: str, keep: list[int], path: str, dtype, numeric=(), names=None
           ) -> pd.DataFrame:
    """pandas' C parser on the kept lines; only numeric columns read '' as missing.

    With ``names`` (the header already read) blanks after a comma are left to the
    number parser, which skips them, and to the stripping of text cells: skipping
    them in the tokenizer costs a third of the parse.
    """
    header = dict(names=names, header=0) if names else dict(skipinitialspace=True)
    try:
        source = io.BytesIO(body) if isinstance(body, bytes) else io.StringIO(body)
        table = pd.read_csv(source, dtype=dtype, keep_default_na=False,
                            na_values={c: [""] for c in numeric},
                            skip_blank_lines=False, **header)
    except pd.errors.ParserError as exc:
        m = re.search(r"line (\d+)", str(exc))
        line = int(keep[int(m.group(1)) - 1]) + 1 if m and int(m.group(1)) - 1 < len(keep) else None
        raise InputError(f"row does not fit the header ({exc})", path, line) from None
    except pd.errors.EmptyDataError:
        raise InputError("file holds no header and no data", path) from None
    if not isinstance(table.index, pd.RangeIndex):
        # pandas took the first column as an index: data rows have more fields than the header.
        text_body = body.decode("utf-8") if isinstance(body, bytes) else body
        header_fields = _first_line(text_body).count(",")
        for row, text in enumerate(text_body.split("\n")[1:]):
            if text.count(",") > header_fields:
                raise InputError(f"row has more fields than the header "
                                 f"({text.count(',') + 1} > {header_fields + 1})", path,
                                 int(keep[row + 1]) + 1)
    return table


def _header_names(line: str) -> list[str]:
    """The column names of a header line, as pandas names them (an empty name becomes
    'Unnamed: <i>'), without starting its parser for one line (~3 ms a file)."""
    names = next(csv.reader([line], skipinitialspace=True), [])
    return [c if c.strip() else f"Unnamed: {i}" for i, c in enumerate(names)]


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
    table.columns = _check_header(table.columns, path, int(keep[0]) + 1)
    return table, keep[1:].astype(np.int64) + 1


def _fast_numeric(body, keep, path, cols, numeric, required, found):
    """Parse numeric columns straight to float; None when any cell needs a closer look."""
    dtype = {c: (np.float64 if c in numeric else "category") for c in cols}
    try:
        table = _parse(body, keep, path, dtype, numeric, names=cols)
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


def _stripped_text(column: pd.Series) -> np.ndarray:
    """Text cells without surrounding blanks, as an object array.

    A categorical column (the fast path) is stripped once per distinct value.
    """
    if isinstance(column.dtype, pd.CategoricalDtype):
        cats = column.cat.categories.to_numpy(dtype=object)
        stripped = np.array([str(c).strip() for c in cats] + [""], dtype=object)
        codes = column.cat.codes.to_numpy()
        return stripped[np.where(codes >= 0, codes, len(cats))]
    return column.astype(str).str.strip().to_numpy(dtype=object)


def _choose(specs: list[Spec], cols: list[str]) -> Spec:
    present = {parts[0] for c in cols if (parts := split_column(c))}
    for spec in specs:
        if spec.required <= present:
            return spec
    return specs[0]


def read_table(path: str | Path, spec: Spec | list[Spec]) -> pd.DataFrame:
    """Read one CSV file into SI columns named by quantity.

    ``spec`` may list alternative forms of a table: the first whose required
    quantities all appear in the header is used (the first one when none fits,
    so that the error names what is missing).

    The returned frame has the text columns of ``spec`` as str, every quantity
    found as float in SI (temperatures in kelvin), and two bookkeeping columns:
    ``source`` (the file path) and ``line`` (the 1-based line number).
    """
    path = str(path)
    body, keep = _body(path)
    lines = keep[1:].astype(np.int64) + 1
    cols = _check_header(_header_names(_first_line(body)), path, int(keep[0]) + 1)
    if isinstance(spec, list):
        spec = _choose(spec, cols)
    for name in spec.required_text:
        if name not in cols:
            raise InputError(f"missing required column '{name}' "
                             f"(columns present: {', '.join(cols)})", path, int(keep[0]) + 1)
    required = set(spec.required)
    found = resolve_columns(cols, spec.quantities, path, required, int(keep[0]) + 1)
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
            s = _stripped_text(cells[name])
            if name in spec.required_text:
                empty = s == ""
                if empty.any():
                    i = int(np.flatnonzero(empty)[0])
                    raise InputError(f"'{name}' is empty", path, int(lines[i]), name)
            out[name] = s
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
    out["line"] = lines
    frame = pd.DataFrame(out)
    frame["source"] = path
    return frame
