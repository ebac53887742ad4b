"""The reel folder: reel.yaml and the dataset folders beside it."""

from __future__ import annotations

import os
from dataclasses import dataclass
from pathlib import Path, PureWindowsPath

from kinset.errors import InputError
from kinset.io.config import read_yaml, validate
from kinset.si import ZERO_CELSIUS
from kinset.io.profiles import is_profile_name, resolve_profile

# Defaults of the SPICE IS(T) law by junction material: EG [eV], XTI [1].
# From memory of the usual SPICE model values (silicon 1.11/3, Schottky barrier
# 0.69/2, germanium 0.67/3), as the issue that introduced them states.
MATERIAL_DEFAULTS = {
    "silicon": {"eg_eV": 1.11, "xti": 3.0},
    "schottky": {"eg_eV": 0.69, "xti": 2.0},
    "germanium": {"eg_eV": 0.67, "xti": 3.0},
}


def outside_reel(file: str, start: Path, reel: Path) -> str:
    """Why a path written in an input file is refused ('' when it stays inside the reel).

    ``file`` is relative to the folder ``start`` and must name something inside the
    reel folder ``reel``: absolute paths (POSIX or Windows, with a drive or a share)
    and ``..`` steps that climb out of the reel are refused. Backslashes count as
    separators, so a path written on Windows is judged the same way.
    """
    if not file:
        return "file name is empty"
    if os.path.isabs(file) or PureWindowsPath(file).is_absolute() or \
            PureWindowsPath(file).drive or file.startswith(("/", "\\")):
        return f"'{file}' is an absolute path; give it relative to {start}, inside the reel folder"
    target = os.path.normpath(os.path.join(start, file.replace("\\", "/")))
    rel = os.path.relpath(target, os.path.normpath(reel))
    if rel == os.pardir or rel.startswith(os.pardir + os.sep):
        return f"'{file}' lies outside the reel folder {reel}"
    return ""


@dataclass(frozen=True)
class Application:
    """One entry of reel.yaml's ``applications``: a profile and its optional quota."""

    profile: str                    # shipped name or YAML path relative to the reel folder
    sets_wanted: int | None = None  # stop at this many sets (kept ones count)


@dataclass(frozen=True)
class Reel:
    """A validated reel folder."""

    folder: Path
    settings: dict

    @property
    def id(self) -> str:
        return self.settings["reel"]

    @property
    def reference_temperature(self) -> float:
        """[K]"""
        return self.settings["reference_temperature_C"] + ZERO_CELSIUS

    @property
    def ambient_temperature(self) -> float:
        """Temperature of rows without one [K]."""
        t = self.settings["ambient_temperature_C"]
        return (self.settings["reference_temperature_C"] if t is None else t) + ZERO_CELSIUS

    @property
    def eg(self) -> float:
        """[eV]"""
        return self.settings["eg_eV"]

    @property
    def xti(self) -> float:
        """[1]"""
        return self.settings["xti"]

    @property
    def applications(self) -> list["Application"]:
        """reel.yaml's applications, in priority order."""
        return [Application(e["profile"], e.get("sets_wanted")) if isinstance(e, dict)
                else Application(e) for e in self.settings.get("applications", [])]

    def dataset_files(self, dataset: str) -> list[Path]:
        """The dataset's CSV files, sorted by name (Touchstone files come through the index)."""
        folder = self.folder / dataset
        if not folder.is_dir():
            return []
        skip = {"index.csv"} if dataset == "capacitance" else set()
        return sorted(p for p in folder.glob("*.csv") if p.name not in skip)


def load_reel(folder: str | Path) -> Reel:
    """Read and validate ``<folder>/reel.yaml``; fill defaults."""
    folder = Path(folder)
    path = folder / "reel.yaml"
    if not folder.is_dir():
        raise InputError("reel folder does not exist", folder)
    if not path.is_file():
        raise InputError("reel folder has no reel.yaml (see the README for its keys)", path)
    data, lines = read_yaml(path)
    if data is not None and not isinstance(data, dict):
        raise InputError("reel.yaml must be a mapping of keys to values", path, 1)
    settings = validate(data, "reel", path, lines)
    for i, entry in enumerate(settings.get("applications", [])):
        item = entry["profile"] if isinstance(entry, dict) else entry
        # A profile named by path travels with the reel: it must be inside it.
        # (Profiles from elsewhere are given on the command line.)
        reason = "" if is_profile_name(item) else outside_reel(item, folder, folder)
        if reason:
            raise InputError(f"{reason}; keep the profile inside the reel folder, or give it "
                             "with --config application=PATH", path,
                             lines.get(("applications", i)), f"applications.{i}")
        # A misspelt name is found here, with its line, not when the workflow starts.
        try:
            resolve_profile(item, folder, only_base=True)
        except InputError as e:
            raise InputError(e.message, path, lines.get(("applications", i)),
                             f"applications.{i}") from None
    if "reel" not in settings:
        name = folder.resolve().name
        settings["reel"] = name
    for key, value in MATERIAL_DEFAULTS[settings["material"]].items():
        if settings.get(key) is None:
            settings[key] = value
    return Reel(folder=folder, settings=settings)


# A results folder belongs to one reel folder: this file in it names the reel folder,
# relative to the results folder (so moving both together keeps them paired).
OWNER_NAME = "reel_folder.txt"


def results_owner(results: str | Path) -> Path | None:
    """The reel folder whose results ``results`` holds (None when it does not say)."""
    marker = Path(results) / OWNER_NAME
    if not marker.is_file():
        return None
    text = marker.read_text(encoding="utf-8").strip()
    return Path(os.path.normpath(Path(results) / text)) if text else None


def owner_text(results: str | Path, reel_folder: str | Path) -> str:
    """What :data:`OWNER_NAME` holds for ``reel_folder``."""
    return Path(os.path.relpath(os.path.abspath(reel_folder), os.path.abspath(results))).as_posix() + "\n"


def check_owner(results: str | Path, reel_folder: str | Path, reel_id: str) -> None:
    """Stop when ``results`` holds another reel folder's results under the same reel id."""
    owner = results_owner(results)
    if owner is None or (owner.exists() and os.path.samefile(owner, reel_folder)):
        return
    raise InputError(f"this results folder holds the results of the reel folder {owner}, "
                     f"which has the same reel id '{reel_id}' as {reel_folder}. Give this reel "
                     f"its own id ('reel:' in {Path(reel_folder) / 'reel.yaml'}) or its own "
                     f"results folder (--config results=PATH); if {owner} was moved to "
                     f"{reel_folder}, delete {Path(results) / OWNER_NAME}", results)
