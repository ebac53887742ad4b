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


#: A numeric column is stored as runs when it has at most one run per this many rows.
RUN_FACTOR = 16


def _starts(values: np.ndarray) -> np.ndarray:
    """Where a run of bit-identical values starts (so -0.0, 0.0 and NaNs stay as they were)."""
    bits = values.view(f"u{values.itemsize}") if values.itemsize in (1, 2, 4, 8) else values
    return np.flatnonzero(np.r_[True, bits[1:] != bits[:-1]])


def _runs(arrays: dict, col: str, values: np.ndarray) -> None:
    """Store one numeric column whole, as runs of equal values, or (an integer column such
    as the file line) as runs of ``value - row``, whichever is shortest.

    A parsed recovery bucket of 10 million samples repeats each device's code and its
    test currents over 2,000 samples, and its line numbers count up by one: stored whole
    these took 720 MB of its 7 columns (issue 18, 100,000 parts), as runs a few MB.
    """
    n = len(values)
    if values.dtype.kind in "iu" and n:
        shifted = values.astype(np.int64) - np.arange(n, dtype=np.int64)
        starts = _starts(shifted)
        if len(starts) * RUN_FACTOR <= n and len(starts) < len(_starts(values)):
            arrays[f"{col}.stepruns"] = shifted[starts]
            arrays[f"{col}.ends"] = np.r_[starts[1:], n].astype(np.int64)
            arrays[f"{col}.dtype"] = np.asarray(values.dtype.str)
            return
    if values.dtype.kind in "biuf" and n:
        starts = _starts(values)
        if len(starts) * RUN_FACTOR <= n:
            arrays[f"{col}.runs"] = values[starts]
            arrays[f"{col}.ends"] = np.r_[starts[1:], n].astype(np.int64)
            return
    arrays[col] = values


def _unrun(data, col: str, key: str) -> np.ndarray:
    ends = data[f"{col}.ends"]
    lengths = np.diff(np.r_[0, ends])
    if key == "runs":
        return np.repeat(data[f"{col}.runs"], lengths)
    n = int(ends[-1])
    values = np.repeat(data[f"{col}.stepruns"], lengths) + np.arange(n, dtype=np.int64)
    return values.astype(np.dtype(str(data[f"{col}.dtype"])))


def save_parsed(frame: pd.DataFrame, path: str | Path) -> None:
    """Write a parsed table atomically (a half-written file is never seen).

    A text column (device, source, ...) is stored as integer codes and its distinct
    values: a recovery file of 500,000 samples of 250 devices holds 250 names, not
    500,000 copies (which cost ~50 bytes each as Python strings once loaded). A numeric
    column that repeats (codes, test conditions) or counts up (lines) is stored as runs
    (:func:`_runs`); :func:`load_parsed` gives back the same values bit for bit.
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
            _runs(arrays, f"{col}.codes", codes.astype(np.int32))
            arrays[f"{col}.text"] = text
        else:
            _runs(arrays, col, values)
    with atomic_output(path, binary=True) as fh:
        np.savez(fh, **arrays)


def _column(data, col: str) -> np.ndarray:
    if col in data.files:
        return data[col]
    for key in ("runs", "stepruns"):
        if f"{col}.{key}" in data.files:
            return _unrun(data, col, key)
    raise KeyError(col)


def load_parsed(path: str | Path) -> pd.DataFrame:
    with np.load(path, allow_pickle=False) as data:
        if _COLUMNS not in data.files:          # written before text codes: plain arrays
            return pd.DataFrame({k: data[k] for k in data.files})
        out = {}
        for col in data[_COLUMNS].tolist():
            if f"{col}.text" in data.files:     # each distinct text once; rows refer to it
                out[col] = data[f"{col}.text"].astype(object)[_column(data, f"{col}.codes")]
            else:
                out[col] = _column(data, col)
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
