"""``pick_list.csv``: the placed parts in tape order, so they are pulled in one pass.

One row per placed part: ``order`` (1, 2, ... along the tape), ``set`` (the bin
it goes into), ``device`` and ``position`` (the pocket number). Parts without a
position come last, by set, with an empty position.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

COLUMNS = ["order", "set", "device", "position"]


def _position_key(value) -> tuple:
    """Sort key of a pocket position: numbers by value, then text, then none."""
    if value is None or (isinstance(value, float) and not math.isfinite(value)):
        return (2, 0.0, "")
    try:
        return (0, float(value), "")
    except (TypeError, ValueError):
        text = str(value).strip()
        return (1, 0.0, text) if text else (2, 0.0, "")


def position_text(value) -> str:
    """A position as written on the page and in the list: '17', 'A12' or ''."""
    key = _position_key(value)
    if key[0] == 2:
        return ""
    if key[0] == 0:
        v = float(value)
        return str(int(v)) if v.is_integer() else f"{v:g}"
    return key[2]


def pick_list(sets: pd.DataFrame) -> pd.DataFrame:
    """The pick list of a sets table (``set, device, position`` columns): its new sets only
    (kept sets were pulled already and are listed apart)."""
    if "state" in sets:
        sets = sets[sets["state"].astype(str) != "kept"]
    if not len(sets):
        return pd.DataFrame(columns=COLUMNS)
    pos = sets["position"] if "position" in sets else pd.Series(np.nan, index=sets.index)
    keys = [_position_key(p) for p in pos]
    frame = pd.DataFrame({
        "_k0": [k[0] for k in keys], "_k1": [k[1] for k in keys], "_k2": [k[2] for k in keys],
        "set": sets["set"].astype(int).to_numpy(), "device": sets["device"].astype(str).to_numpy(),
        "position": [position_text(p) for p in pos],
    })
    frame = frame.sort_values(["_k0", "_k1", "_k2", "set", "device"], kind="stable")
    frame.insert(0, "order", np.arange(1, len(frame) + 1))
    return frame[COLUMNS].reset_index(drop=True)
