"""``devices.csv``: every device seen in any dataset, one row each."""

from __future__ import annotations

import pandas as pd

# Columns every dataset table has; in devices.csv they are always prefixed by
# the dataset so the names do not depend on which datasets a reel carries.
SHARED = {"status", "note", "reason_code", "points", "position", "reference_temperature_C"}
ORDER = ("forward", "leakage", "capacitance", "recovery")


def merge_devices(tables: dict[str, pd.DataFrame]) -> pd.DataFrame:
    """Outer-join dataset tables on ``device``.

    Parameters
    ----------
    tables : dict
        dataset name -> its extraction table (each with a ``device`` column).

    Returns
    -------
    DataFrame
        ``device, position`` then each dataset's columns; a column whose name is
        shared between datasets (or in :data:`SHARED`) is prefixed ``<dataset>_``.
        ``datasets`` lists which datasets saw the device.
    """
    names = [d for d in ORDER if d in tables] + sorted(set(tables) - set(ORDER))
    counts: dict[str, int] = {}
    for d in names:
        for c in tables[d].columns:
            counts[c] = counts.get(c, 0) + 1
    merged: pd.DataFrame | None = None
    seen_in = {}
    for d in names:
        t = tables[d].copy()
        t["device"] = t["device"].astype(str)
        seen_in[d] = set(t["device"])
        t = t.rename(columns={c: f"{d}_{c}" for c in t.columns
                              if c != "device" and (c in SHARED or counts[c] > 1)})
        merged = t if merged is None else merged.merge(t, on="device", how="outer")
    if merged is None:
        return pd.DataFrame(columns=["device", "position", "datasets"])
    merged = merged.sort_values("device", kind="stable").reset_index(drop=True)
    position = pd.Series(pd.NA, index=merged.index, dtype="Float64")
    for d in names:
        col = f"{d}_position"
        if col in merged:
            position = position.fillna(merged[col].astype("Float64"))
    merged = merged.drop(columns=[f"{d}_position" for d in names if f"{d}_position" in merged])
    merged.insert(1, "position", position)
    merged.insert(2, "datasets", [";".join(d for d in names if dev in seen_in[d])
                                  for dev in merged["device"]])
    return merged
