"""Extraction per dataset: readings in, one row per device out.

This is what ``kinset extract`` and the workflow rules call. It wires readers
(``kinset.io``) to fits (``kinset.fitting``); neither knows about the other.
"""

from __future__ import annotations

import os
from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd

from kinset.errors import InputError
from kinset.io.parsed import read_inputs
from kinset.io.reel import Reel

@dataclass
class Extraction:
    """What one dataset's extraction gives: the per-device table and any side tables.

    ``table`` is written as ``<dataset>.csv``; each side table as
    ``<dataset>_<name>.csv`` beside it (e.g. ``forward_readings.csv``).
    """

    table: pd.DataFrame
    extras: dict[str, pd.DataFrame] = field(default_factory=dict)


def _reel_relative(reel: Reel, result: Extraction) -> Extraction:
    """``result`` with every ``source`` column naming its file relative to the reel folder.

    The tables then read ``forward/batch_a.csv`` however the reel folder was given
    (relative, absolute, another mount point), so the same reel gives the same bytes
    wherever it lies. A file outside the reel folder keeps the path it was given by.
    """
    root = os.path.abspath(reel.folder)

    def label(path: str) -> str:
        rel = os.path.relpath(os.path.abspath(path), root)
        outside = rel == os.pardir or rel.startswith(os.pardir + os.sep)
        return path if outside or not path else Path(rel).as_posix()

    for frame in [result.table, *result.extras.values()]:
        if "source" in frame.columns and len(frame):
            names = frame["source"].astype(str)
            mapping = {p: label(p) for p in names.unique()}
            frame["source"] = names.map(mapping)
    return result


def forward_settings(reel: Reel):
    """The forward fit's settings (:class:`kinset.fitting.forward.ForwardSettings`)."""
    # Imported here, as for the other datasets: the forward fit needs scipy.special and
    # scipy.constants, ~0.2 s of start-up the other steps would pay for nothing.
    from kinset.fitting.forward import ForwardSettings
    return ForwardSettings(
        reference_temperature=reel.reference_temperature,
        ambient_temperature=reel.ambient_temperature,
        activation_energy=reel.eg,
        xti=reel.xti,
        thermal_resistance=reel.settings["thermal_resistance_K_per_W"],
        correct_self_heating=reel.settings["self_heating"] == "correct",
        material=reel.settings["material"],
        voltage_floor=reel.settings["accuracy"]["voltage"]["offset_V"],
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
    from kinset.fitting.forward import fit_forward
    points = read_inputs("forward", _inputs(reel, "forward", files))
    table, readings = fit_forward(points, forward_settings(reel))
    return _reel_relative(reel, Extraction(table, {"readings": readings}))


def capacitance_settings(reel: Reel):
    """The C–V fit's settings from reel.yaml (:class:`kinset.fitting.capacitance.CapacitanceSettings`)."""
    from kinset.fitting.capacitance import CapacitanceSettings
    accuracy = reel.settings["accuracy"]["capacitance"]
    own = reel.settings["capacitance"]
    if not own["vj_range_V"][0] < own["vj_range_V"][1]:
        raise InputError("the lower bound of VJ must be below the upper bound",
                         reel.folder / "reel.yaml", column="capacitance.vj_range_V")
    return CapacitanceSettings(
        reference_temperature=reel.reference_temperature,
        ambient_temperature=reel.ambient_temperature,
        accuracy_gain=accuracy["gain"], accuracy_offset=accuracy["offset_F"],
        package_capacitance=own["package_capacitance"] == "fit",
        vj_range=tuple(own["vj_range_V"]),
    )


def touchstone_points(index: str | Path, devices: list[str] | None = None,
                      files: list[str | Path] | None = None) -> pd.DataFrame:
    """One capacitance point per Touchstone file that ``index.csv`` lists (for the given
    devices or files; default all), from a series R–L–C element fitted to its network:
    what ``kinset fit-touchstone`` stores."""
    from kinset.fitting.touchstone import fit_touchstone
    from kinset.io.touchstone import read_vna
    return fit_touchstone(read_vna(index, devices=devices, files=files))


def _capacitance_points(reel: Reel, files: list[str | Path]) -> pd.DataFrame:
    """C–V readings and VNA points from raw files, parsed files, or the whole reel."""
    from kinset.fitting.touchstone import fit_touchstone
    from kinset.io.datasets import read_capacitance
    from kinset.io.parsed import load_parsed
    from kinset.io.touchstone import (INDEX_NAME, TOUCHSTONE_NAME, read_vna_index,
                                      unlisted_measurements, unlisted_touchstone)
    folder = reel.folder / "capacitance"
    index = folder / INDEX_NAME
    frames: list[pd.DataFrame] = []
    touchstone: list[str] = []
    if not files:
        frames += [read_capacitance(f) for f in reel.dataset_files("capacitance")]
        if index.is_file():
            frames.append(touchstone_points(index))
        listed = read_vna_index(index) if index.is_file() else None
        frames.append(fit_touchstone(unlisted_measurements(unlisted_touchstone(folder, listed))))
        if not any(len(f) for f in frames):
            raise InputError("no capacitance files found (C–V tables, or Touchstone files "
                             "with index.csv)", folder)
    for f in map(str, files):
        if f.endswith(".npz"):
            frames.append(load_parsed(f))
        elif Path(f).name == INDEX_NAME:
            frames.append(touchstone_points(f))
        elif TOUCHSTONE_NAME.search(f):
            touchstone.append(f)
        else:
            frames.append(read_capacitance(f))
    if touchstone:   # through the reel's index; files it does not list are reported
        listed = read_vna_index(index) if index.is_file() else None
        named = set() if listed is None else set(listed["path"])
        if named:
            frames.append(touchstone_points(index, files=touchstone))
        frames.append(fit_touchstone(unlisted_measurements(
            [Path(f) for f in touchstone if os.path.normpath(f) not in named])))
    frames = [f for f in frames if len(f)] or frames[:1]
    return pd.concat(frames, ignore_index=True)


def extract_capacitance(reel: Reel, files: list[str | Path]) -> Extraction:
    """Fit CJO, VJ, M of every device with C–V table or VNA capacitance points.

    ``files`` may be C–V tables, ``index.csv`` (its Touchstone files are read), Touchstone
    files of the reel (looked up in its index) and parsed ``.npz`` files; none: the
    whole capacitance folder. Gives ``capacitance.csv`` and ``capacitance_points.csv``
    (every point, with whether it entered the fit and, for VNA points, the R–L–C fit).
    """
    from kinset.fitting.capacitance import fit_capacitance
    table, points = fit_capacitance(_capacitance_points(reel, list(files)),
                                    capacitance_settings(reel))
    return _reel_relative(reel, Extraction(table, {"points": points}))


def leakage_settings(reel: Reel):
    """The leakage fit's settings from reel.yaml (:class:`kinset.fitting.leakage.LeakageSettings`)."""
    from kinset.fitting.leakage import LeakageSettings, temperature_law
    eg, xti, n, law = temperature_law(reel.settings["material"], reel.eg, reel.xti)
    own = reel.settings["leakage"]
    accuracy = reel.settings["accuracy"]["current"]
    return LeakageSettings(
        reference_temperature=reel.reference_temperature,
        ambient_temperature=reel.ambient_temperature,
        report_voltages=tuple(float(v) for v in own["report_at_V"]),
        breakdown_current=own["breakdown_current_A"],
        activation_energy=eg, law_xti=xti, law_n=n, law=law,
        current_gain=accuracy["gain"], current_offset=accuracy["offset_A"],
    )


def extract_leakage(reel: Reel, files: list[str | Path]) -> Extraction:
    """Leakage at the report voltages, bv and the leakage model of every device.

    Gives ``leakage.csv``.
    """
    from kinset.fitting.leakage import fit_leakage
    points = read_inputs("leakage", _inputs(reel, "leakage", files))
    return _reel_relative(reel, Extraction(fit_leakage(points, leakage_settings(reel))))


def recovery_settings(reel: Reel):
    """The recovery analysis's settings (:class:`kinset.fitting.recovery.RecoverySettings`)."""
    from kinset.fitting.recovery import RecoverySettings
    own = reel.settings["recovery"]
    return RecoverySettings.from_end(own["forward_current_A"], own["reverse_current_A"],
                                     own["end"])


def extract_recovery(reel: Reel, files: list[str | Path]) -> Extraction:
    """trr, ta, tb, Irrm, Qrr, softness and TT of every device with a waveform.

    Gives ``recovery.csv``.
    """
    from kinset.fitting.recovery import fit_recovery
    # One file at a time: a reel's waveforms are the largest input (10,000 parts of 2,000
    # samples: 20 M rows), and each capture lies within one file.
    tables = (read_inputs("recovery", [f]) for f in _inputs(reel, "recovery", files))
    return _reel_relative(reel, Extraction(fit_recovery(tables, recovery_settings(reel))))
