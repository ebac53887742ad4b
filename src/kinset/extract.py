"""Extraction per dataset: readings in, one row per device out.

This is what ``kinset extract`` and the workflow rules call. It wires readers
(``kinset.io``) to fits (``kinset.fitting``); neither knows about the other.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable

import pandas as pd

from kinset.errors import InputError
from kinset.fitting.forward import ForwardSettings, fit_forward
from kinset.io.parsed import read_inputs
from kinset.io.reel import Reel

# Settings of reel.yaml each extraction depends on (the workflow reruns a step
# only when these change, not when an unrelated key such as 'part' is edited).
SETTINGS_USED = {
    "forward": ("reference_temperature_C", "ambient_temperature_C", "material", "eg_eV",
                "xti", "thermal_resistance_K_per_W", "self_heating"),
}



@dataclass
class Extraction:
    """What one dataset's extraction gives: the per-device table and any side tables.

    ``table`` is written as ``<dataset>.csv``; each side table as
    ``<dataset>_<name>.csv`` beside it (e.g. ``forward_readings.csv``).
    """

    table: pd.DataFrame
    extras: dict[str, pd.DataFrame] = field(default_factory=dict)


def forward_settings(reel: Reel) -> ForwardSettings:
    return ForwardSettings(
        reference_temperature=reel.reference_temperature,
        ambient_temperature=reel.ambient_temperature,
        activation_energy=reel.eg,
        xti=reel.xti,
        thermal_resistance=reel.settings["thermal_resistance_K_per_W"],
        correct_self_heating=reel.settings["self_heating"] == "correct",
    )


def _inputs(reel: Reel, dataset: str, files: list[str | Path]) -> list[str | Path]:
    files = list(files) or reel.dataset_files(dataset)
    if not files:
        raise InputError(f"no {dataset} files found", reel.folder / dataset)
    return files


def extract_forward(reel: Reel, files: list[str | Path]) -> Extraction:
    """Fit every device in the given forward files (raw CSV or parsed ``.npz``).

    Gives ``forward.csv`` and the readings table ``forward_readings.csv``.
    """
    points = read_inputs("forward", _inputs(reel, "forward", files))
    table, readings = fit_forward(points, forward_settings(reel))
    return Extraction(table, {"readings": readings})


# Dataset -> its extraction. The CLI's `kinset extract <dataset>` and the workflow's
# datasets come from here; SETTINGS_USED above names the reel keys each one reads.
EXTRACTORS: dict[str, Callable[[Reel, list], Extraction]] = {
    "forward": extract_forward,
}
