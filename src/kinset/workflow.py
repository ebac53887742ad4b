"""What the Snakemake workflow needs at parse time: the reel, its files and the jobs.

The Snakefile stays thin and asks this module which files exist, how they are
gathered into jobs, and which results to build. Inputs are listed when the
workflow is parsed, so a file that arrived since the last run is seen.
"""

from __future__ import annotations

import hashlib
import json
import re
import sys
import zlib
from dataclasses import dataclass, field
from pathlib import Path

from kinset import __version__
from kinset.extract import EXTRACTORS, SETTINGS_USED
from kinset.io.reel import Reel, load_reel

SAFE_NAME = re.compile(r"^[A-Za-z0-9][A-Za-z0-9._-]*$")
BUCKET_PATTERN = r"[A-Za-z0-9][A-Za-z0-9._-]*"


def bucket_of(name: str, n_files: int, max_jobs: int) -> str:
    """Stable job name for an input file.

    Up to ``max_jobs`` files in a folder: one job per file, named after it.
    Beyond: ``max_jobs`` buckets chosen by a CRC-32 of the file name, so a new
    file changes exactly one bucket and never reshuffles the others.
    """
    stem = Path(name).stem
    if n_files <= max_jobs:
        return stem if SAFE_NAME.match(stem) and not stem.startswith("bucket-") else \
            f"file-{zlib.crc32(name.encode()):08x}"
    return f"bucket-{zlib.crc32(name.encode()) % max_jobs:04d}"


@dataclass
class Plan:
    reel: Reel
    results: Path
    max_jobs: int
    buckets: dict[str, dict[str, list[str]]] = field(default_factory=dict)

    @property
    def out(self) -> Path:
        return self.results / self.reel.id

    @property
    def reel_yaml(self) -> str:
        return str(self.reel.folder / "reel.yaml")

    @property
    def datasets(self) -> list[str]:
        return [d for d in EXTRACTORS if self.buckets.get(d)]

    def bucket_files(self, dataset: str, bucket: str) -> list[str]:
        return self.buckets[dataset][bucket]

    def parsed(self, dataset: str) -> list[str]:
        return [str(self.out / "parsed" / dataset / f"{b}.npz")
                for b in sorted(self.buckets.get(dataset, {}))]

    def settings_digest(self, dataset: str) -> str:
        """Short digest of the reel settings an extraction uses (a rerun trigger)."""
        used = {k: self.reel.settings.get(k) for k in SETTINGS_USED[dataset]}
        text = json.dumps(used, sort_keys=True)
        return hashlib.sha256(text.encode()).hexdigest()[:16]

    def targets(self) -> list[str]:
        out = [str(self.out / f"{d}.csv") for d in self.datasets]
        out.append(str(self.out / "devices.csv"))
        return out


def make_plan(config: dict) -> Plan:
    """Build the plan from the validated workflow config."""
    reel = load_reel(config["reel"])
    plan = Plan(reel=reel, results=Path(config["results"]),
                max_jobs=int(config["max_jobs_per_dataset"]))
    for dataset in EXTRACTORS:
        files = reel.dataset_files(dataset)
        groups: dict[str, list[str]] = {}
        for f in files:
            groups.setdefault(bucket_of(f.name, len(files), plan.max_jobs), []).append(str(f))
        plan.buckets[dataset] = groups
    if not plan.datasets:
        from kinset.errors import InputError
        raise InputError("the reel folder holds no dataset files "
                         f"(expected CSV files in {', '.join(EXTRACTORS)}/)", reel.folder)
    return plan


PYTHON = sys.executable
VERSION = __version__
