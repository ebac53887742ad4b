"""Extraction per dataset: readings in, one row per device out.

This is what ``kinset extract`` and the workflow rules call. It wires readers
(``kinset.io``) to fits (``kinset.fitting``); neither knows about the other.
"""

from __future__ import annotations

from pathlib import Path

import pandas as pd

from kinset.errors import InputError
from kinset.fitting.forward import ForwardSettings, fit_forward
from kinset.io.parsed import read_inputs
from kinset.io.reel import Reel

# Settings of reel.yaml each extraction depends on (the workflow reruns a step
# only when these change, not when an unrelated key such as 'part' is edited).
SETTINGS_USED = {
    "forward": ("reference_temperature_C", "ambient_temperature_C", "material", "eg_eV",
                "xti", "thermal_resistance_K_per_W"),
}

EXTRACTORS = ("forward",)


def forward_settings(reel: Reel) -> ForwardSettings:
    return ForwardSettings(
        reference_temperature=reel.reference_temperature,
        ambient_temperature=reel.ambient_temperature,
        activation_energy=reel.eg,
        xti=reel.xti,
        thermal_resistance=reel.settings["thermal_resistance_K_per_W"],
    )


def extract_forward(reel: Reel, files: list[str | Path]) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Fit every device in the given forward files (raw CSV or parsed ``.npz``).

    Returns the per-device table (``forward.csv``) and the readings table.
    """
    if not files:
        files = reel.dataset_files("forward")
    if not files:
        raise InputError("no forward files found", reel.folder / "forward")
    points = read_inputs("forward", files)
    return fit_forward(points, forward_settings(reel))
