"""Writing result tables: deterministic text, written atomically."""

from __future__ import annotations

import os
from pathlib import Path

import pandas as pd


def write_csv(frame: pd.DataFrame, path: str | Path) -> None:
    """Write ``frame`` as CSV with 10 significant digits, replacing ``path`` atomically.

    The same frame always gives the same bytes, and a reader never sees a
    half-written file (the table is written beside it and renamed).
    """
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(path.name + ".tmp")
    frame.to_csv(tmp, index=False, float_format="%.10g", lineterminator="\n")
    os.replace(tmp, path)


def read_result(path: str | Path) -> pd.DataFrame:
    """Read a result table written by :func:`write_csv` (device ids stay text)."""
    return pd.read_csv(path, dtype={"device": str, "status": str, "note": str},
                       keep_default_na=False, na_values=[""])
