"""Writing result tables: deterministic text, written atomically."""

from __future__ import annotations

import csv
import os
from pathlib import Path

import numpy as np
import pandas as pd


def write_csv(frame: pd.DataFrame, path: str | Path) -> None:
    """Write ``frame`` as CSV with 10 significant digits, replacing ``path`` atomically.

    The same frame always gives the same bytes, and a reader never sees a
    half-written file (the table is written beside it and renamed).
    """
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(path.name + ".tmp")
    columns = [_text(frame.iloc[:, j]) for j in range(frame.shape[1])]
    with open(tmp, "w", newline="", encoding="utf-8") as fh:
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
    os.replace(tmp, path)


def _quoted(cells: list[str]) -> list[str]:
    """Minimal CSV quoting, as the csv module does it (checked once per distinct text)."""
    special = {c for c in set(cells) if "," in c or '"' in c or "\n" in c}
    if not special:
        return cells
    return ['"' + c.replace('"', '""') + '"' if c in special else c for c in cells]


def _text(column: pd.Series) -> list[str]:
    """A column's cells as pandas' ``to_csv(float_format="%.10g")`` writes them."""
    v = column.to_numpy()
    if v.dtype.kind == "f":
        out = list(map("%.10g".__mod__, v.tolist()))
        for i in np.flatnonzero(np.isnan(v)):
            out[i] = ""
        return out
    if v.dtype.kind in "iub":
        return list(map(str, v.tolist()))
    missing = pd.isna(column).to_numpy()
    out = [str(x) for x in v.tolist()]
    for i in np.flatnonzero(missing):
        out[i] = ""
    return out


def read_result(path: str | Path) -> pd.DataFrame:
    """Read a result table written by :func:`write_csv` (device ids stay text)."""
    return pd.read_csv(path, dtype={"device": str, "status": str, "note": str},
                       keep_default_na=False, na_values=[""])
