"""Parsed readings kept between workflow steps.

Each input file is parsed once into SI arrays and stored as ``.npz`` (numpy's
archive, loaded with ``allow_pickle=False``, so nothing in it is ever executed).
The extraction step of a dataset then reads every parsed file of that dataset.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from kinset.errors import InputError
from kinset.io.datasets import READERS
from kinset.io.output import atomic_output


def save_parsed(frame: pd.DataFrame, path: str | Path) -> None:
    """Write a parsed table atomically (a half-written file is never seen)."""
    arrays = {}
    for col in frame.columns:
        values = frame[col].to_numpy()
        if values.dtype == object or values.dtype.kind in "OUT":
            values = values.astype(str)
        arrays[col] = values
    with atomic_output(path, binary=True) as fh:
        np.savez(fh, **arrays)


def load_parsed(path: str | Path) -> pd.DataFrame:
    with np.load(path, allow_pickle=False) as data:
        return pd.DataFrame({k: data[k] for k in data.files})


def read_inputs(dataset: str, files: list[str | Path]) -> pd.DataFrame:
    """Read raw CSV files or parsed ``.npz`` files of one dataset into one table."""
    reader = READERS[dataset]
    frames = []
    for f in files:
        f = str(f)
        frames.append(load_parsed(f) if f.endswith(".npz") else reader(f))
    if not frames:
        raise InputError(f"no {dataset} files given")
    frames = [f for f in frames if len(f)] or frames[:1]
    return pd.concat(frames, ignore_index=True)
