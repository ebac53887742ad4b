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
from kinset.io.output import atomic_output
from kinset.registry import dataset as dataset_record


_COLUMNS = "__columns__"      # the column names in order (files written since text codes)


def save_parsed(frame: pd.DataFrame, path: str | Path) -> None:
    """Write a parsed table atomically (a half-written file is never seen).

    A text column (device, source, ...) is stored as integer codes and its distinct
    values: a recovery file of 500,000 samples of 250 devices holds 250 names, not
    500,000 copies (which cost ~50 bytes each as Python strings once loaded).
    """
    arrays = {_COLUMNS: np.asarray(list(map(str, frame.columns)), dtype=str)}
    for col in map(str, frame.columns):
        values = frame[col].to_numpy()
        if values.dtype == object or values.dtype.kind in "OUT":
            codes, uniques = pd.factorize(values)
            text = np.asarray(uniques, dtype=object).astype(str)
            if (codes < 0).any():           # a missing cell reads as text, as astype(str) did
                codes = np.where(codes < 0, len(text), codes)
                text = np.append(text, str(np.nan))
            arrays[f"{col}.codes"] = codes.astype(np.int32)
            arrays[f"{col}.text"] = text
        else:
            arrays[col] = values
    with atomic_output(path, binary=True) as fh:
        np.savez(fh, **arrays)


def load_parsed(path: str | Path) -> pd.DataFrame:
    with np.load(path, allow_pickle=False) as data:
        if _COLUMNS not in data.files:          # written before text codes: plain arrays
            return pd.DataFrame({k: data[k] for k in data.files})
        out = {}
        for col in data[_COLUMNS].tolist():
            if col in data.files:
                out[col] = data[col]
            else:   # each distinct text once; the rows refer to it
                out[col] = data[f"{col}.text"].astype(object)[data[f"{col}.codes"]]
        return pd.DataFrame(out)


def read_inputs(dataset: str, files: list[str | Path]) -> pd.DataFrame:
    """Read raw CSV files or parsed ``.npz`` files of one dataset into one table."""
    reader = dataset_record(dataset).read
    frames = []
    for f in files:
        f = str(f)
        frames.append(load_parsed(f) if f.endswith(".npz") else reader(f))
    if not frames:
        raise InputError(f"no {dataset} files given")
    frames = [f for f in frames if len(f)] or frames[:1]
    return pd.concat(frames, ignore_index=True)
