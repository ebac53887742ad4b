"""What a report is made from: the match outputs, the extraction tables, the reel, the profile.

Every file read is fingerprinted (size, SHA-256) for the page's provenance section.
Nothing here depends on the time of day, on when a file was written or on the working
folder, so the same inputs always give the same report.
"""

from __future__ import annotations

import hashlib
import json
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from kinset.errors import InputError
from kinset.io.output import read_result
from kinset.io.profiles import shipped_profiles
from kinset.matching.profile import Profile, load_profile
from kinset.registry import TABLES

MATCH_FILES = ("sets.csv", "unmatched.csv", "values.csv", "summary.json")


@dataclass(frozen=True)
class InputFile:
    """One file the report read."""

    label: str        # shown on the page: the path relative to the results folder
    size: int         # [byte]
    sha256: str


@dataclass
class ReportInputs:
    results: Path
    match_folder: Path
    profile: Profile
    profile_text: str
    profile_label: str
    reel: dict
    tables: dict[str, pd.DataFrame]
    devices: pd.DataFrame
    sets: pd.DataFrame
    unmatched: pd.DataFrame
    summary: dict
    values: pd.DataFrame          # what the matcher compared (values.csv), by device
    files: list[InputFile] = field(default_factory=list)
    scan: pd.DataFrame | None = None   # tolerance_scan.csv, when the match wrote one

    @property
    def reel_id(self) -> str:
        return str(self.reel.get("reel") or self.results.name)

    def table(self, name: str) -> pd.DataFrame | None:
        return self.tables.get(name)

    def positions(self) -> dict[str, object]:
        """Pocket position of every device that has one (from devices.csv)."""
        if "position" not in self.devices:
            return {}
        d = self.devices.dropna(subset=["position"])
        return dict(zip(d["device"], d["position"]))


def rows_by_device(table: pd.DataFrame | None, devices=None) -> dict[str, dict]:
    """Each device's row of a per-device table as a dict (the first row if repeated);
    with ``devices``, only theirs (a dict per row of a 10,000-part table is costly)."""
    if table is None or not len(table):
        return {}
    t = table.drop_duplicates("device", keep="first")
    ids = t["device"].astype(str)
    if devices is not None:
        keep = ids.isin(set(devices)).to_numpy()
        t, ids = t[keep], ids[keep]
    # the same dicts as to_dict("records") (Python scalars), in half the time
    cols = list(t.columns)
    records = (dict(zip(cols, r)) for r in zip(*(t[c].tolist() for c in cols)))
    return dict(zip(ids, records))


def fingerprint(path: Path, label: str) -> InputFile:
    digest = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            digest.update(block)
    return InputFile(label, path.stat().st_size, digest.hexdigest())


def _label(path: Path, results: Path) -> str:
    try:
        return path.resolve().relative_to(results.resolve()).as_posix()
    except ValueError:
        return path.name


def _profile_label(profile: Profile) -> str:
    """How the page names the profile file: shipped ones by name, others by file name."""
    shipped = shipped_profiles().get(profile.name)
    if shipped is not None and Path(shipped).resolve() == profile.path.resolve():
        return f"kinset/applications/{profile.path.name} (shipped with kinset)"
    return profile.path.name


def _read_csv(path: Path, what: str, empty: tuple[str, ...] | None = None) -> pd.DataFrame:
    """A result table; a blank file is an empty table with the ``empty`` columns."""
    if empty is not None and not path.read_bytes().strip():
        return pd.DataFrame(columns=list(empty))
    try:
        return read_result(path)
    except (pd.errors.ParserError, pd.errors.EmptyDataError, UnicodeDecodeError) as exc:
        raise InputError(f"cannot read {what}: {exc}", path) from None


def _need(frame: pd.DataFrame, columns: tuple[str, ...], path: Path) -> None:
    missing = [c for c in columns if c not in frame.columns]
    if missing:
        raise InputError(f"missing column(s) {', '.join(missing)}", path)


def load_inputs(results: str | Path, application: str,
                match_folder: str | Path) -> ReportInputs:
    """Read everything one application's report needs.

    Parameters
    ----------
    results : path
        Folder of the extraction tables, ``devices.csv`` and ``reel.json``.
    application : str
        Shipped profile name or YAML path (as given to ``kinset match``).
    match_folder : path
        Folder holding that application's ``sets.csv``, ``unmatched.csv``, ``summary.json``.
    """
    results, match_folder = Path(results), Path(match_folder)
    if not results.is_dir():
        raise InputError("results folder does not exist", results)
    profile = load_profile(application)
    files: list[InputFile] = []

    def seen(path: Path) -> Path:
        files.append(fingerprint(path, _label(path, results)))
        return path

    for name in MATCH_FILES:
        if not (match_folder / name).is_file():
            raise InputError(f"no {name}: run 'kinset match' for this application first",
                             match_folder / name)
    sets = _read_csv(seen(match_folder / "sets.csv"), "sets.csv", ("set", "device", "position"))
    _need(sets, ("set", "device"), match_folder / "sets.csv")
    unmatched = _read_csv(seen(match_folder / "unmatched.csv"), "unmatched.csv",
                          ("device", "reason", "position", "stage"))
    _need(unmatched, ("device", "reason"), match_folder / "unmatched.csv")
    if "reason" in unmatched:
        unmatched["reason"] = unmatched["reason"].fillna("").astype(str)
    for col in ("stage", "position", "reason_code", "criterion"):
        if col not in unmatched:
            unmatched[col] = np.nan
    values = _read_csv(seen(match_folder / "values.csv"), "values.csv", ("device",))
    _need(values, ("device",), match_folder / "values.csv")
    values["device"] = values["device"].astype(str)
    if "position" not in sets:
        sets["position"] = np.nan
    summary_path = seen(match_folder / "summary.json")
    try:
        summary = json.loads(summary_path.read_text(encoding="utf-8"))
    except (json.JSONDecodeError, UnicodeDecodeError) as exc:
        raise InputError(f"not valid JSON: {exc}", summary_path) from None

    tables = {}
    for name in TABLES:
        path = results / f"{name}.csv"
        if path.is_file():
            tables[name] = _read_csv(seen(path), f"{name}.csv")
    if (results / "devices.csv").is_file():
        devices = _read_csv(seen(results / "devices.csv"), "devices.csv")
    else:
        ids = sorted(set(sets["device"]) | set(unmatched["device"]))
        devices = pd.DataFrame({"device": ids})
    reel = {}
    if (results / "reel.json").is_file():
        path = seen(results / "reel.json")
        try:
            reel = json.loads(path.read_text(encoding="utf-8"))
        except (json.JSONDecodeError, UnicodeDecodeError) as exc:
            raise InputError(f"not valid JSON: {exc}", path) from None
    scan = None
    if (match_folder / "tolerance_scan.csv").is_file():
        scan = _read_csv(seen(match_folder / "tolerance_scan.csv"), "tolerance_scan.csv")
        _need(scan, ("criterion", "scale", "sets", "method"), match_folder / "tolerance_scan.csv")
    profile_text = profile.path.read_text(encoding="utf-8")
    files.append(fingerprint(profile.path, _profile_label(profile)))
    return ReportInputs(results=results, match_folder=match_folder, profile=profile,
                        profile_text=profile_text, profile_label=_profile_label(profile),
                        reel=reel, tables=tables, devices=devices, sets=sets,
                        unmatched=unmatched, summary=summary, values=values.set_index("device"),
                        files=files, scan=scan)

