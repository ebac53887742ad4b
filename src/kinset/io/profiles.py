"""Where an application profile is: a shipped name or a YAML path.

Reading a reel folder (its ``applications:`` list) and loading a profile both need
this, so it lives with the readers; :mod:`kinset.matching.profile` reads the file.
"""

from __future__ import annotations

from difflib import get_close_matches
from importlib import resources
from pathlib import Path

from kinset.errors import InputError


def shipped_profiles() -> dict[str, Path]:
    """Profiles that come with kinset, by name."""
    folder = resources.files("kinset") / "applications"
    return {Path(str(p)).stem: Path(str(p)) for p in folder.iterdir() if str(p).endswith(".yaml")}


def is_profile_name(item: str) -> bool:
    """A bare name (a shipped profile), not a path."""
    return not item.endswith((".yaml", ".yml")) and "/" not in item and "\\" not in item


def resolve_profile(name_or_path: str, base: Path | None = None, only_base: bool = False) -> Path:
    """Path of a profile given as a shipped name or a YAML path.

    A relative path is looked for under ``base`` first, then (unless ``only_base``:
    a path written in reel.yaml is relative to the reel folder alone) in the working
    folder.
    """
    shipped = shipped_profiles()
    if name_or_path in shipped:
        return shipped[name_or_path]
    p = Path(name_or_path)
    candidates = [base / p] if base is not None and not p.is_absolute() else []
    for candidate in candidates + ([] if only_base else [p]):
        if candidate.suffix in (".yaml", ".yml") and candidate.is_file():
            return candidate
    names = ", ".join(sorted(shipped))
    if is_profile_name(name_or_path):
        close = get_close_matches(name_or_path, sorted(shipped), n=1)
        hint = f"did you mean '{close[0]}'? " if close else ""
        raise InputError(f"no shipped application profile '{name_or_path}': {hint}the shipped "
                         f"ones are {names} (or give a YAML file)")
    where = " in the reel folder" if only_base else ""
    raise InputError(f"application profile '{name_or_path}' not found{where}: give a YAML "
                     f"file or one of {names}")
