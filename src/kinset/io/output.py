"""Writing result tables: deterministic text, written atomically."""

from __future__ import annotations

import csv
import os
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import IO, TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:
    import pandas as pd
# pandas is imported where a table is written or read, not at import: the workflow's
# Snakefile imports this module (through the ledger) on every run, a no-op rerun too,
# and pandas is most of that start-up (issue 18).


@contextmanager
def atomic_output(path: str | Path, binary: bool = False,
                  encoding: str = "utf-8", durable: bool = True) -> Iterator[IO]:
    """Open a file that replaces ``path`` only once it is completely written.

    The data goes to a temporary file beside ``path`` (same folder, so the final
    rename stays on one file system), is flushed to disk and then renamed onto
    ``path`` in one step (``os.replace``, atomic on POSIX). A reader, or a rerun
    after the process was killed, sees the old file or the whole new one, never a
    part. On an error the temporary file is removed and ``path`` is left as it was.
    Every file kinset writes goes through here.

    ``durable=False`` skips the flush to disk (``os.fsync``), never the rename: for files
    that are made again at will, like a synthetic demo reel, whose 100,000-part layout is
    some 32,000 small files and spent most of its wall time waiting on fsync (issue 18).
    """
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(f".{path.name}.{os.getpid()}.tmp")
    try:
        with open(tmp, "wb") if binary else open(tmp, "w", encoding=encoding, newline="\n") as fh:
            yield fh
            fh.flush()
            if durable:
                os.fsync(fh.fileno())
        os.replace(tmp, path)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise


def write_text(path: str | Path, text: str, encoding: str = "utf-8") -> None:
    """Write ``text`` to ``path`` atomically (see :func:`atomic_output`), newlines as ``\\n``."""
    with atomic_output(path, encoding=encoding) as fh:
        fh.write(text)


def write_csv(frame: pd.DataFrame, path: str | Path) -> None:
    """Write ``frame`` as CSV with 10 significant digits, replacing ``path`` atomically.

    The same frame always gives the same bytes, and a reader never sees a
    half-written file (see :func:`atomic_output`).
    """
    columns = [_text(frame.iloc[:, j]) for j in range(frame.shape[1])]
    with atomic_output(path) as fh:
        # What pandas' to_csv writes (its csv writer, minimal quoting), made column by
        # column: pandas formats floats one cell at a time, ~3x slower on big tables.
        w = csv.writer(fh, lineterminator="\n")
        w.writerow([str(c) for c in frame.columns])
        if len(columns) == 1:         # a lone empty cell is quoted: leave that to csv
            w.writerows(zip(*columns))
        elif len(frame):
            text = [c if frame.dtypes.iloc[j].kind in "fiub" else _quoted(c)
                    for j, c in enumerate(columns)]
            fh.write("\n".join(map(",".join, zip(*text))))
            fh.write("\n")


def _quoted(cells: list[str]) -> list[str]:
    """Minimal CSV quoting, as the csv module does it (checked once per distinct text)."""
    special = {c for c in set(cells) if "," in c or '"' in c or "\n" in c}
    if not special:
        return cells
    return ['"' + c.replace('"', '""') + '"' if c in special else c for c in cells]


# A column at least this long, with at most a quarter as many distinct values as cells,
# is formatted one distinct value at a time (a reel's 400,000 forward readings hold 40
# currents, 10,000 device ids, one source file per 10,000 rows).
_DISTINCT_FROM = 1000


def _distinct_text(values: np.ndarray, fmt) -> list[str] | None:
    """The cells as ``fmt`` gives them, formatted once per distinct value ('' for a
    missing one); None when the column is short or its values mostly differ."""
    if len(values) < _DISTINCT_FROM:
        return None
    import pandas as pd
    codes, distinct = pd.factorize(values)
    if len(distinct) * 4 > len(values):
        return None
    text = [fmt(x) for x in distinct.tolist()] + [""]      # code -1: missing
    return np.asarray(text, dtype=object)[codes].tolist()


def _text(column: pd.Series) -> list[str]:
    """A column's cells as pandas' ``to_csv(float_format="%.10g")`` writes them."""
    import pandas as pd
    v = column.to_numpy()
    if v.dtype.kind == "f":
        # factorize counts 0.0 and -0.0 as one value, which print differently
        signed_zero = bool((np.signbit(v) & (v == 0)).any())
        out = None if signed_zero else _distinct_text(v, "%.10g".__mod__)
        if out is None:
            out = list(map("%.10g".__mod__, v.tolist()))
            for i in np.flatnonzero(np.isnan(v)):
                out[i] = ""
        return out
    if v.dtype.kind in "iub":
        return _distinct_text(v, str) or list(map(str, v.tolist()))
    # Text only (factorize counts 1, 1.0 and True as one value, which print differently)
    if pd.api.types.infer_dtype(v, skipna=True) == "string":
        out = _distinct_text(v, str)
        if out is not None:
            return out
    missing = pd.isna(column).to_numpy()
    out = [str(x) for x in v.tolist()]
    for i in np.flatnonzero(missing):
        out[i] = ""
    return out


def read_result(path: str | Path) -> pd.DataFrame:
    """Read a result table written by :func:`write_csv` (device ids stay text)."""
    import pandas as pd
    return pd.read_csv(path, dtype={"device": str, "status": str, "note": str},
                       keep_default_na=False, na_values=[""])
