"""What the Snakemake workflow needs at parse time: the reel, its files and the jobs.

The Snakefile stays thin and asks this module which files exist, how they are
gathered into jobs, and which results to build. Inputs are listed when the
workflow is parsed, so a file that arrived since the last run is seen.
"""

from __future__ import annotations

import hashlib
import json
import os
import re
import shlex
import sys
import zlib
from dataclasses import dataclass, field
from pathlib import Path

from kinset import __version__
from kinset.errors import InputError
from kinset.io.ledger import LEDGER_NAME
from kinset.io.reel import Application, Reel, check_owner, load_reel
from kinset.registry import BY_NAME, NAMES
from kinset.io.profiles import resolve_profile

# What the report rule writes per application.
REPORT_OUTPUTS = ("report.html", "models.lib", "pick_list.csv")

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


#: A job's declared memory [MB] per MB of the raw files it handles (the ``mem_mb`` a
#: cluster reserves): for parsing a bucket here, for each extraction in its registry
#: record (``memory_per_mb``). Measured on the 100,000-part demo reel (issue 18,
#: ``/usr/bin/time -v``, MB of 10^6 bytes): parsing a 306 MB recovery bucket peaked at
#: 2,387 MB (7.8 per MB); recovery extraction, which holds one parsed bucket at a time,
#: at 2,424 MB for its largest bucket of 306 MB (7.9); forward extraction, which fits
#: every reading at once, at 1,857 MB for 152 MB (12.2); leakage at 925 MB for 92 MB
#: (10.0). About 15 % is added; a job never declares less than its rule's fixed floor.
PARSE_MEMORY_PER_MB = 9


def _raw_mb(files) -> float:
    total = 0
    for f in files:
        try:
            total += os.path.getsize(f)
        except OSError:         # gone since the plan was made: the job itself will say so
            pass
    return total / 1e6


@dataclass
class Plan:
    reel: Reel
    results: Path
    max_jobs: int
    buckets: dict[str, dict[str, list[str]]] = field(default_factory=dict)
    # output name -> profile path, in priority order; and each one's sets_wanted
    applications: dict[str, str] = field(default_factory=dict)
    sets_wanted: dict[str, int | None] = field(default_factory=dict)
    # VNA capacitance: job name -> {"devices", "files", "digest"} (see vna_groups), and
    # Touchstone files that capacitance/index.csv does not list.
    vna: dict[str, dict] = field(default_factory=dict)
    vna_unlisted: list[str] = field(default_factory=list)
    # screened quantities waived for every application (--config waive_screens=...)
    waive_screens: tuple[str, ...] = ()
    # output name -> its validated profile (kinset.matching.profile.Profile), waivers applied:
    # read when the plan is made, so a profile's typo stops the run before any job
    profiles: dict = field(default_factory=dict)

    @property
    def out(self) -> Path:
        return self.results / self.reel.id

    @property
    def reel_yaml(self) -> str:
        return str(self.reel.folder / "reel.yaml")

    @property
    def datasets(self) -> list[str]:
        return [d for d in NAMES if self.buckets.get(d)
                or (d == "capacitance" and (self.vna or self.vna_unlisted))]

    @property
    def vna_index(self) -> str:
        return str(self.reel.folder / "capacitance" / "index.csv")

    def vna_files(self, group: str) -> list[str]:
        return self.vna[group]["files"]

    def vna_devices(self, group: str) -> list[str]:
        return self.vna[group]["devices"]

    def vna_digest(self, group: str) -> str:
        return self.vna[group]["digest"]

    def touchstone_points(self) -> list[str]:
        """The capacitance points of the Touchstone files, one file per job of vna_groups."""
        return [str(self.out / "parsed" / "touchstone" / f"{g}.npz") for g in sorted(self.vna)]

    def bucket_files(self, dataset: str, bucket: str) -> list[str]:
        return self.buckets[dataset][bucket]

    def parse_memory_mb(self, dataset: str, bucket: str, floor: int = 1000) -> int:
        """Memory to declare for parsing one bucket (:data:`PARSE_MEMORY_PER_MB`)."""
        return int(max(floor, PARSE_MEMORY_PER_MB * _raw_mb(self.buckets[dataset][bucket])))

    def extract_memory_mb(self, dataset: str, floor: int = 2000) -> int:
        """Memory to declare for a dataset's extraction: by the size of its raw files, all
        of them or, for a step that streams its buckets, the largest bucket."""
        record = BY_NAME[dataset]
        sizes = [_raw_mb(files) for files in self.buckets.get(dataset, {}).values()]
        size = max(sizes, default=0) if record.one_bucket_at_a_time else sum(sizes)
        return int(max(floor, record.memory_per_mb * size))

    def parsed(self, dataset: str) -> list[str]:
        return [str(self.out / "parsed" / dataset / f"{b}.npz")
                for b in sorted(self.buckets.get(dataset, {}))]

    def settings_digest(self, dataset: str) -> str:
        """Short digest of the reel settings an extraction uses (a rerun trigger)."""
        used = {k: self.reel.settings.get(k) for k in BY_NAME[dataset].settings_used}
        text = json.dumps(used, sort_keys=True)
        return hashlib.sha256(text.encode()).hexdigest()[:16]

    def dataset_tables(self) -> list[str]:
        """The main table of each dataset the reel has (what devices.csv merges)."""
        return [str(self.out / f"{d}.csv") for d in self.datasets]

    def targets(self) -> list[str]:
        out = self.dataset_tables()
        out.append(str(self.out / "devices.csv"))
        out.append(str(self.out / "reel.json"))
        for name in self.applications:
            out += [str(self.out / name / f) for f in ("sets.csv", "unmatched.csv", "values.csv",
                                                   "summary.json", "circuit.csv")]
            out += [str(self.out / name / f) for f in REPORT_OUTPUTS]
        return out

    def tables(self) -> list[str]:
        """Every extraction table of the reel: each dataset's table and its side tables
        (what matching and the report read)."""
        return [str(self.out / f"{t}.csv") for d in self.datasets for t in BY_NAME[d].tables]

    def profile(self, application: str) -> str:
        return self.applications[application]

    def earlier(self, application: str) -> list[str]:
        """Match folders of the applications served before ``application``."""
        names = list(self.applications)
        return [str(self.out / n) for n in names[:names.index(application)]]

    def match_options(self, application: str) -> str:
        """The options of ``kinset match`` that order this application after the others."""
        options = ""
        if self.earlier(application):
            options += " --after " + " ".join(shlex.quote(f) for f in self.earlier(application))
        wanted = self.sets_wanted.get(application)
        if self.waive_screens:
            options += " --waive-screens " + shlex.quote(",".join(self.waive_screens))
        return options + (f" --sets-wanted {wanted}" if wanted is not None else "")

    def notices(self) -> list[str]:
        """For each application, what the reel lacks and how to proceed, and a profile made
        for another material than the reel's (said when the workflow starts;
        :mod:`kinset.matching.coverage`). A waiver of a match criterion
        is an error here, before any job runs."""
        from kinset.matching.coverage import gaps, misfits, notice, suit_notice
        out = []
        for name, profile in self.profiles.items():
            said = notice(name, [g.as_dict() for g in gaps(profile, set(self.datasets))])
            suits = suit_notice(name, misfits(profile, self.reel.settings.get("material")))
            out += [n.text() for n in (said, suits) if n is not None]
        return out

    def summary(self) -> list[str]:
        """What a finished run made: the results folder, then each application's one-line
        summary (:func:`kinset.matching.summary.summary_line` of its ``summary.json``), for the
        end of the terminal output. Applications not (yet) matched are left out; one whose
        summary is older than the reel's devices.csv or its profile (a run that asked for
        other targets) is marked out of date."""
        from kinset.matching.summary import summary_line
        lines = []
        for name, profile in self.applications.items():
            path = self.out / name / "summary.json"
            if not path.is_file():
                continue
            line = f"  {summary_line(json.loads(path.read_text(encoding='utf-8')))}"
            upstream = [p for p in (self.out / "devices.csv", Path(profile)) if p.is_file()]
            if any(p.stat().st_mtime > path.stat().st_mtime for p in upstream):
                line += " (out of date: from an earlier run)"
            lines.append(line)
            lines += self.circuit_line(name)
        if not lines:
            return []
        return [f"kinset: {self.out}/ (each application's report.html is in its folder):"] + lines

    def circuit_line(self, name: str) -> list[str]:
        """The application's circuit step in one line (:mod:`kinset.circuit.summary`), if any."""
        from kinset.circuit.summary import summary_line, written
        profile = self.profiles.get(name)
        result = written(self.out / name / "circuit.csv", getattr(profile, "circuit", None))
        return [f"    {summary_line(result)}"] if result is not None else []

    @property
    def ledger(self) -> str:
        return str(self.reel.folder / LEDGER_NAME)

    def ledger_inputs(self) -> list[str]:
        """The ledger, when the reel has one (kinset keep writes it; then matching reruns)."""
        return [self.ledger] if Path(self.ledger).is_file() else []


def make_plan(config: dict) -> Plan:
    """Build the plan from the validated workflow config."""
    reel = load_reel(config["reel"])
    plan = Plan(reel=reel, results=Path(config["results"]),
                max_jobs=int(config["max_jobs_per_dataset"]))
    waive = config.get("waive_screens") or ()
    waive = waive.split(",") if isinstance(waive, str) else waive
    plan.waive_screens = tuple(q.strip() for q in waive if q.strip())
    for dataset in NAMES:
        files = reel.dataset_files(dataset)
        groups: dict[str, list[str]] = {}
        for f in files:
            groups.setdefault(bucket_of(f.name, len(files), plan.max_jobs), []).append(str(f))
        plan.buckets[dataset] = groups
    plan.vna, plan.vna_unlisted = vna_groups(reel, plan.max_jobs)
    check_owner(plan.out, reel.folder, reel.id)
    wanted = config.get("application")
    from_reel = wanted is None         # reel.yaml's list: paths relative to the reel only
    if from_reel:
        wanted = reel.applications
    elif isinstance(wanted, str):
        wanted = [Application(w.strip()) for w in wanted.split(",") if w.strip()]
    for item in wanted:                # in priority order
        path = resolve_profile(item.profile, reel.folder, only_base=from_reel)
        name = path.stem
        if name in plan.applications:
            raise InputError(f"application '{name}' is listed twice", path)
        plan.applications[name] = str(path)
        plan.sets_wanted[name] = item.sets_wanted
        plan.profiles[name] = _checked_profile(path, plan.waive_screens)
    if not plan.datasets:
        raise InputError("the reel folder holds no dataset files "
                         f"(expected CSV files in {', '.join(NAMES)}/)", reel.folder)
    return plan


def _checked_profile(path: Path, waive: tuple[str, ...]):
    """The validated profile at ``path`` (an InputError names its file, line and key)."""
    from kinset.matching.profile import load_profile
    profile = load_profile(str(path))
    return profile.waiving(waive, "config waive_screens") if waive else profile


def check_config(config: dict) -> dict:
    """The workflow config (``--config``) validated, with its defaults filled in.

    A problem is one short InputError naming the key (and the nearest allowed key for
    a typo), instead of the whole schema.
    """
    from kinset.io.config import validate
    try:
        return validate(dict(config), "workflow", "--config")
    except InputError as error:
        key = error.column
        message = error.message if error.message.startswith("unknown key") or not key \
            else f"{key}: {error.message}"
        raise InputError(message, "--config") from None


def errors_in(logs) -> list[str]:
    """The ``kinset: error:`` lines of Snakemake's log file(s) (a path or a list of
    paths, as ``onerror`` is given them), each once, in order.

    With ``show-failed-logs`` (profiles/default) Snakemake copies a failed job's log into
    its own; the Snakefile's ``onerror`` repeats these lines as the run's last words.
    """
    found = []
    for log in [logs] if isinstance(logs, (str, Path)) else logs or []:
        try:
            text = Path(log).read_text(encoding="utf-8", errors="replace")
        except OSError:
            continue
        found += [line.strip() for line in text.splitlines()
                  if line.startswith("kinset: error:")]
    return list(dict.fromkeys(found))


def stopped(logs) -> str:
    """The last words of a failed run: its kinset errors (:func:`errors_in`), or where to look."""
    errors = errors_in(logs)
    if not errors:
        return "kinset: the run stopped: the failed job's log is printed above"
    return "\n".join(["kinset: the run stopped:"] + [f"  {e}" for e in errors])


def last_words(plans) -> None:
    """Print a finished run's results block (:meth:`Plans.summary`) on the terminal."""
    print("\n".join(plans.summary()), file=sys.stderr)


def when_nothing_to_do(say) -> None:
    """Call ``say()`` once if snakemake finds nothing to do. Such a run returns before its
    ``onsuccess`` hook, so a rerun to see the results would otherwise end on snakemake's
    own line alone. Watches snakemake's log for its nothing-to-be-done message; a version
    without that message or logger simply never calls ``say``."""
    import logging
    try:
        from snakemake.common import NOTHING_TO_BE_DONE_MSG
    except ImportError:
        return

    class Watch(logging.Handler):
        said = False

        def emit(self, record):
            if not self.said and record.getMessage() == NOTHING_TO_BE_DONE_MSG:
                self.said = True
                say()

    logging.getLogger("snakemake.logging").addHandler(Watch(logging.INFO))


# The demo reels a fresh clone runs when --config names no reel: the silicon switching
# diodes and the RF Schottky diodes. A default folder that does not exist is skipped (so
# the workflow runs with either one alone); a folder the user names must exist.
DEMO_REELS = ("data_demo", "data_demo_rf")


def reel_folders(config: dict) -> list[str]:
    """The reel folders of the workflow config: one path, several (a list, or
    comma-separated), or by default every demo reel folder present."""
    given = config.get("reel")
    if given is None:
        folders = [f for f in DEMO_REELS if Path(f).is_dir()]
        if not folders:
            raise InputError("no reel folder given and none of the demo reel folders "
                             f"({', '.join(DEMO_REELS)}) is here: give one with "
                             "--config reel=PATH", Path.cwd())
        return folders
    folders = given.split(",") if isinstance(given, str) else given
    folders = [str(f).strip() for f in folders if str(f).strip()]
    if not folders:
        raise InputError("config 'reel' names no folder: give one or several, "
                         "e.g. --config reel=PATH or reel=PATH1,PATH2", Path.cwd())
    return folders


def make_plans(config: dict) -> "Plans":
    """One plan per reel folder of the config, each with every other config key."""
    plans: dict[str, Plan] = {}
    for folder in reel_folders(config):
        plan = make_plan({**config, "reel": folder})
        if plan.reel.id in plans:
            other = plans[plan.reel.id].reel.folder
            if other.resolve() == plan.reel.folder.resolve():
                raise InputError(f"reel folder {folder} is listed twice in config 'reel'",
                                 plan.reel.folder)
            raise InputError(f"reel id '{plan.reel.id}' is given by two reel folders, {other} "
                             f"and {plan.reel.folder}: their results would share "
                             f"{plan.out}. Give each its own id ('reel:' in reel.yaml)",
                             plan.reel.folder / "reel.yaml")
        plans[plan.reel.id] = plan
    return Plans(plans, Path(config["results"]))


@dataclass
class Plans:
    """The plans of every reel of one workflow run, told apart by the ``{reel}`` wildcard.

    The rules were written for one plan (``PLAN.parsed("forward")``, ``PLAN.reel_yaml``)
    and stay so: an attribute of ``Plans`` that is not its own is that attribute of the
    job's reel's plan, as an input function of the wildcards (a method becomes a function
    taking the method's arguments and returning such an input function). Inside an input
    function, ``of(wildcards)`` is the job's reel's plan. Every output path starts with
    ``out`` (``<results>/{reel}``), so each reel keeps its own ``results/<reel id>/``.
    """
    by_id: dict[str, Plan]
    results: Path

    @property
    def out(self) -> str:
        """The output folder of every rule, with the ``{reel}`` wildcard."""
        return str(self.results).replace("{", "{{").replace("}", "}}") + "/{reel}"

    @property
    def reel_pattern(self) -> str:
        """The wildcard constraint of ``{reel}``: exactly the ids of this run's reels."""
        return "|".join(re.escape(i) for i in sorted(self.by_id, key=len, reverse=True))

    def of(self, wildcards) -> Plan:
        return self.by_id[wildcards.reel]

    def targets(self) -> list[str]:
        return [t for plan in self.by_id.values() for t in plan.targets()]

    def summary(self) -> list[str]:
        """Each reel's last words (:meth:`Plan.summary`), one block per reel."""
        return [line for plan in self.by_id.values() for line in plan.summary()]

    def notices(self) -> list[str]:
        """Each reel's notices; with several reels, each names its reel."""
        several = len(self.by_id) > 1
        return [f"reel {i}: {n}" if several else n
                for i, plan in self.by_id.items() for n in plan.notices()]

    def __getattr__(self, name: str):
        if name.startswith("_") or (not hasattr(Plan, name)
                                    and name not in Plan.__dataclass_fields__):
            raise AttributeError(name)
        if callable(getattr(Plan, name, None)):
            def bind(*args):
                return lambda wildcards: getattr(self.of(wildcards), name)(*args)
            return bind
        return lambda wildcards: getattr(self.of(wildcards), name)


# Touchstone files are small and many (one per device and bias). A job per device would
# pay a process start (~1 s) for a few milliseconds of reading, so devices go into this
# many stable buckets by a CRC-32 of their id: a new file reruns one bucket.
VNA_JOBS = 8


def vna_groups(reel: Reel, max_jobs: int) -> tuple[dict[str, dict], list[str]]:
    """Jobs that turn the Touchstone files of ``capacitance/index.csv`` into capacitance points.

    Devices are spread over ``min(VNA_JOBS, max_jobs)`` buckets by a CRC-32 of the
    device id (never by position), so a new file touches only its device's bucket.
    Each job lists as inputs its devices' files and the empty-fixture files they need
    (those that exist: a missing one is reported by the job), and a digest of its
    index rows, so an edited row reruns that job alone.

    Returns
    -------
    groups : dict
        job name -> ``{"devices": [...], "files": [...], "digest": str}``
    unlisted : list of str
        Touchstone files in the capacitance folder that the index does not name.
    """
    from kinset.io.touchstone import INDEX_NAME, match_opens, read_vna_index, unlisted_touchstone
    folder = reel.folder / "capacitance"
    path = folder / INDEX_NAME
    if not path.is_file():
        return {}, [str(p) for p in unlisted_touchstone(folder, None)]
    index = read_vna_index(path)
    open_row, _ = match_opens(index)
    records = index[["file", "device", "reverse_voltage", "fixture", "temperature"]].astype(str)
    records = records.to_numpy().tolist()
    paths = index["path"].tolist()
    n_jobs = max(1, min(VNA_JOBS, max_jobs))
    groups: dict[str, dict] = {}
    for i, (dev, is_open) in enumerate(zip(index["device"], index["is_open"])):
        if is_open:
            continue
        name = f"vna-{zlib.crc32(dev.encode()) % n_jobs:02d}"
        g = groups.setdefault(name, {"devices": set(), "rows": set()})
        g["devices"].add(dev)
        g["rows"].add(i)
        if open_row[i] >= 0:
            g["rows"].add(int(open_row[i]))
    for g in groups.values():
        used = sorted(g.pop("rows"))
        g["devices"] = sorted(g["devices"])
        g["files"] = sorted({paths[i] for i in used if Path(paths[i]).is_file()})
        text = json.dumps([records[i] for i in used])
        g["digest"] = hashlib.sha256(text.encode()).hexdigest()[:16]
    return groups, [str(p) for p in unlisted_touchstone(folder, index)]


VERSION = __version__


def rule_python(deployment_methods) -> str:
    """The interpreter the rules call ``-m kinset`` with.

    With ``--sdm conda`` Snakemake activates each rule's environment
    (``envs/kinset.yaml``) before its command, so the command must name that
    environment's ``python``, not the host interpreter's path. Without it, the host
    interpreter (``sys.executable``): kinset is installed there even when no virtual
    environment is activated in the shell.
    """
    names = {getattr(m, "name", str(m)).lower() for m in deployment_methods or ()}
    return "python" if "conda" in names else sys.executable
