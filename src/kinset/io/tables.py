"""Reading instrument CSV exports into SI tables.

A file may hold one device or many, in any column order; lines whose first
non-blank character is ``#`` are comments; units live in the column names
(``kinset.io.units``). Every problem raises :class:`kinset.errors.InputError`
naming the file and the line or column.

Fields are separated by commas. A file whose header holds no comma but semicolons
(or tabs) is read with that separator, as spreadsheets in decimal-comma locales
export; its numbers may then use decimal commas, as long as no number in the file
uses a decimal point (which would leave open what a comma means).
"""

from __future__ import annotations

import io
import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from kinset.errors import InputError
from kinset.io.units import resolve_columns, split_column

_COMMENT = re.compile(rb"^[ \t]*#", re.MULTILINE)
# Longest device id kept: ids name parts on a tape, in reports and SPICE model names;
# anything longer is a pasted cell or a broken export, not an id.
MAX_ID_LENGTH = 64
# Control characters (C0, DEL, C1): they never belong in an id or a file name and would
# garble reports and terminals.
_CONTROL = re.compile("[\x00-\x1f\x7f-\x9f]")
_UTF16 = (b"\xff\xfe", b"\xfe\xff")


@dataclass
class Spec:
    """What one kind of table holds.

    quantities : quantity -> dimension for the numeric columns kinset reads.
    required : the quantities that must be present.
    text : plain (unit-less) text columns, e.g. ``device``, ``fixture``.
    required_text : the text columns that must be present.
    integer : plain columns holding whole numbers (``position``).
    positive : quantities whose every reading must be above zero.
    named : quantities whose column name, as the header writes it, is kept beside the
        readings as the text column ``column_<quantity>`` (for notes that name it).
    """

    quantities: dict[str, str]
    required: set[str]
    text: tuple[str, ...] = ("device",)
    required_text: tuple[str, ...] = ("device",)
    integer: tuple[str, ...] = ()
    positive: tuple[str, ...] = ()
    named: tuple[str, ...] = ()


def _body(path: str) -> tuple[str | bytes, np.ndarray]:
    """The file without comment and blank lines, and the kept lines' 0-based indices.

    Comment and blank lines found only above the header and below the last data line
    (the usual layout of an export) are cut off without copying the body line by line.
    """
    try:
        raw = Path(path).read_bytes()
    except OSError as exc:
        raise InputError(f"cannot read file: {exc.strerror}", path) from None
    if raw.startswith(_UTF16):
        raise InputError("file is UTF-16 text (a spreadsheet's 'Unicode text' export); "
                         "save it as CSV in UTF-8", path, 1)
    if raw.startswith(b"\xef\xbb\xbf"):
        raw = raw[3:]
    if b"\r" in raw and raw.count(b"\r") != raw.count(b"\r\n"):
        # Lone CRs (old line ends, or mixed): line breaks, as an editor shows them.
        # pandas reads CR LF itself, so the usual Windows export is not copied.
        raw = raw.replace(b"\r\n", b"\n").replace(b"\r", b"\n")
    text = _decode(raw, path)
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
    lines = text.splitlines()
    return "\n".join(lines[i] for i in kept), kept


def _first_line(body: str | bytes) -> str:
    head = body.split(b"\n" if isinstance(body, bytes) else "\n", 1)[0]
    return head.decode("utf-8") if isinstance(head, bytes) else head


def _decode(raw: bytes, path: str) -> str:
    try:
        return raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        line = raw.count(b"\n", 0, exc.start) + 1
        raise InputError(f"byte 0x{raw[exc.start]:02x} is not valid UTF-8 text "
                         f"(save the file as UTF-8)", path, line) from None


def _quote_line(text: str, keep) -> int | None:
    """File line of the first kept line with an unclosed double quote."""
    for row, line in enumerate(text.split("\n")):
        if line.count('"') % 2:
            return int(keep[row]) + 1 if row < len(keep) else None
    return None


def _text(body: str | bytes) -> str:
    return body.decode("utf-8") if isinstance(body, bytes) else body


def _parse(body: str | bytes, keep, path: str, dtype, numeric=(), sep: str = ",",
           decimal: str = ".") -> pd.DataFrame:
    """pandas' C parser on the kept lines; only numeric columns read '' as missing."""
    hint = " (decimal commas? separate fields with ';' or write decimal points)" \
        if sep == "," else ""
    try:
        source = io.BytesIO(body) if isinstance(body, bytes) else io.StringIO(body)
        table = pd.read_csv(source, dtype=dtype, keep_default_na=False,
                            na_values={c: [""] for c in numeric}, sep=sep, decimal=decimal,
                            skipinitialspace=_initial_space(body),
                            skip_blank_lines=False)
    except pd.errors.ParserError as exc:
        if "EOF inside string" in str(exc):
            raise InputError("a double quote is never closed", path,
                             _quote_line(_text(body), keep)) from None
        m = re.search(r"line (\d+)", str(exc))
        line = int(keep[int(m.group(1)) - 1]) + 1 if m and int(m.group(1)) - 1 < len(keep) else None
        raise InputError(f"row does not fit the header ({exc}){hint}", path, line) from None
    except pd.errors.EmptyDataError:
        raise InputError("file holds no header and no data", path) from None
    if not isinstance(table.index, pd.RangeIndex):
        # pandas took the first column as an index: data rows have more fields than the header.
        text_body = _text(body)
        header_fields = _first_line(text_body).count(sep)
        for row, text in enumerate(text_body.split("\n")[1:]):
            if text.count(sep) > header_fields:
                raise InputError(f"row has more fields than the header "
                                 f"({text.count(sep) + 1} > {header_fields + 1}){hint}", path,
                                 int(keep[row + 1]) + 1)
    if len(table) != len(keep) - 1:
        # A quoted cell ran over a line break: the rows no longer match the file's lines.
        line = _quote_line(_text(body), keep)
        raise InputError("a quoted cell runs over a line break (every row must fit on one "
                         "line)", path, line)
    return table


def _initial_space(body: str | bytes) -> bool:
    """Whether a field may start with a blank: whether the body holds a blank at all
    (one byte search; a pair like ', ' took 40 ms on a recovery file).

    Without one, pandas' ``skipinitialspace`` changes nothing, and its parser is about a
    third faster without it (a reel's recovery files: ~1 s, issue 18).
    """
    return not isinstance(body, bytes) or b" " in body or b"\t" in body


def _check_header(columns, path: str, header_line: int) -> list[str]:
    cols = [str(c).strip() for c in columns]
    seen: set[str] = set()
    for c in cols:
        base = c.rsplit(".", 1)[0] if re.fullmatch(r".+\.\d+", c) else c
        if c in seen or (base != c and base in seen):
            raise InputError("column name appears twice", path, header_line, base)
        seen.add(c)
    return cols


def _separator(header: str) -> str:
    """The field separator, from the header line: ',' unless it holds none but ';' or tabs."""
    if "," in header:
        return ","
    for sep in (";", "\t"):
        if sep in header:
            return sep
    return ","


def _read_header(body, keep, path: str) -> tuple[list[str], str]:
    first = _first_line(body)
    sep = _separator(first)
    try:
        header = pd.read_csv(io.StringIO(first), nrows=0, sep=sep, skipinitialspace=True)
    except (pd.errors.ParserError, pd.errors.EmptyDataError) as exc:
        raise InputError(f"header line does not parse ({exc})", path, int(keep[0]) + 1) from None
    if len(keep) < 2:
        raise InputError("file holds a header but no data rows", path, int(keep[0]) + 1)
    return _check_header(header.columns, path, int(keep[0]) + 1), sep


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
    cols, sep = _read_header(body, keep, path)
    table = _parse(body, keep, path, str, sep=sep)
    table.columns = cols
    return table, keep[1:].astype(np.int64) + 1


def _fast_numeric(body, keep, path, cols, numeric, required, found, text):
    """Parse numeric columns straight to float; None when any cell needs a closer look."""
    dtype = {c: (np.float64 if c in numeric else "category") for c in cols}
    try:
        table = _parse(body, keep, path, dtype, numeric)
    except (ValueError, TypeError) as exc:
        if isinstance(exc, InputError):
            raise
        return None
    table.columns = cols
    for c in text:
        # pandas turns categories that all look like numbers into numbers ('001' and
        # '1.0' would both become 1.0, one part): such ids are read again as text.
        column = table[c] if c in cols else None
        if isinstance(getattr(column, "dtype", None), pd.CategoricalDtype) and \
                not pd.api.types.is_string_dtype(column.cat.categories):
            return None
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


def _decimal_commas(cells: pd.DataFrame, numeric: list[str], lines, path: str) -> None:
    """Turn decimal commas into points in a ';' or tab separated file, when unambiguous.

    Unambiguous means no numeric cell of the file holds a point: a file that mixes
    ``0,65`` and ``0.65``, or writes ``1.000,5``, could mean thousands separators.
    """
    comma = dot = None
    for c in numeric:
        col = cells[c].astype(str)
        has_comma = col.str.contains(",", regex=False).to_numpy()
        has_dot = col.str.contains(".", regex=False).to_numpy()
        both = has_comma & has_dot
        if both.any():
            i = int(np.flatnonzero(both)[0])
            raise InputError(f"'{col.iloc[i]}' holds both ',' and '.': a thousands separator "
                             f"cannot be told from a decimal mark; export numbers without "
                             f"thousands separators", path, int(lines[i]), c)
        if comma is None and has_comma.any():
            comma = (c, int(np.flatnonzero(has_comma)[0]))
        if dot is None and has_dot.any():
            dot = (c, int(np.flatnonzero(has_dot)[0]))
    if comma is None:
        return
    if dot is not None:
        raise InputError(f"numbers use decimal commas (line {int(lines[comma[1]])}, column "
                         f"'{comma[0]}') and decimal points (here) in the same file: which a "
                         f"comma means is ambiguous; use one decimal mark throughout", path,
                         int(lines[dot[1]]), dot[0])
    for c in numeric:
        cells[c] = cells[c].astype(str).str.replace(",", ".", regex=False)


def _check_text(values: np.ndarray, distinct, name: str, lines, path: str) -> None:
    """Refuse control characters in any text cell, and over-long device ids.

    ``distinct`` holds the column's distinct values, so a long file is checked once
    per id rather than once per row.
    """
    joined = "".join(distinct)
    too_long = name == "device" and max(map(len, distinct), default=0) > MAX_ID_LENGTH
    if not (too_long or _CONTROL.search(joined)):
        return
    bad = next(u for u in distinct if _CONTROL.search(u) or
               (name == "device" and len(u) > MAX_ID_LENGTH))
    i = int(np.flatnonzero(values == bad)[0])
    m = _CONTROL.search(bad)
    if m:
        raise InputError(f"'{name}' holds the control character U+{ord(m.group()):04X}; "
                         f"ids and names must be printable text", path, int(lines[i]), name)
    raise InputError(f"device id is {len(bad)} characters long, more than the "
                     f"{MAX_ID_LENGTH} kinset accepts ('{bad[:20]}...')", path,
                     int(lines[i]), name)


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
        cell = str(cells.iloc[i])
        hint = " (a decimal comma? write a decimal point)" if "," in cell else ""
        raise InputError(f"'{cell}' is not a finite number{hint}", path, int(lines[i]), column)
    if empty.any() and not allow_empty:
        i = int(np.flatnonzero(empty)[0])
        raise InputError("cell is empty (a truncated row?)", path, int(lines[i]), column)
    return values


def _stripped_text(column: pd.Series) -> tuple[np.ndarray, list[str]]:
    """Text cells without surrounding blanks, as an object array, and the distinct ones.

    A categorical column (the fast path) is stripped once per distinct value.
    """
    if isinstance(column.dtype, pd.CategoricalDtype):
        cats = column.cat.categories.to_numpy(dtype=object)
        stripped = np.array([str(c).strip() for c in cats] + [""], dtype=object)
        codes = column.cat.codes.to_numpy()
        return stripped[np.where(codes >= 0, codes, len(cats))], list(stripped)
    values = column.astype(str).str.strip().to_numpy(dtype=object)
    return values, list(pd.unique(values))


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
    cols, sep = _read_header(body, keep, path)
    if isinstance(spec, list):
        spec = _choose(spec, cols)
    for name in spec.required_text:
        if name not in cols:
            raise InputError(f"missing required column '{name}' "
                             f"(columns present: {', '.join(cols)})", path, int(keep[0]) + 1)
    required = set(spec.required)
    found = resolve_columns(cols, spec.quantities, path, required, int(keep[0]) + 1)
    numeric = [col for col, _ in found.values()] + [c for c in spec.integer if c in cols]
    fast = None
    if sep == ",":   # the fast path: commas and decimal points, as most exports write
        fast = _fast_numeric(body, keep, path, cols, numeric, required, found, spec.text)
    if fast is not None:
        cells = fast
    else:  # something is off, or another separator: reread as text to name the bad cell
        cells = _parse(body, keep, path, str, sep=sep)
        cells.columns = cols
        if sep != ",":
            _decimal_commas(cells, numeric, lines, path)
    out: dict[str, object] = {}
    for name in spec.text:
        if name in cols:
            s, distinct = _stripped_text(cells[name])
            if name in spec.required_text:
                empty = s == ""
                if empty.any():
                    i = int(np.flatnonzero(empty)[0])
                    raise InputError(f"'{name}' is empty", path, int(lines[i]), name)
            _check_text(s, distinct, name, lines, path)
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
        if quantity in spec.positive and (v <= 0).any():
            i = int(np.flatnonzero(v <= 0)[0])
            raise InputError(f"{quantity.replace('_', ' ')} must be positive (got "
                             f"{v[i]:g})", path, int(lines[i]), col)
        out[quantity] = v * unit.scale + unit.offset
    for quantity in spec.named:
        if quantity in found:
            out[f"column_{quantity}"] = pd.Categorical.from_codes(
                np.zeros(len(lines), dtype=np.int8), [found[quantity][0]])
    frame = pd.DataFrame(out)
    frame["source"] = path
    frame["line"] = lines
    return frame
