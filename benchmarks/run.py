"""The scale benchmark: whole reels through kinset, against the I/O limit and the naive way.

    python benchmarks/run.py [--devices 1000 10000 100000] [--work DIR] [--reuse]
                             [--extras-up-to 10000] [--loop-sample 250] [--timeout 1800]

For each reel size it writes a production demo reel (``kinset demo --layout batches``:
every part on every station, batch files of 250 parts; ``--reuse`` keeps one already in
``WORK/<size>/reel``) and measures each step as a subprocess of the real command line
(``python -m kinset ...``): wall time and peak memory (``os.wait4``: the largest resident
set of the process and of any child it waited for; for snakemake that is the largest
single job or snakemake itself, not the sum of two jobs running at once). Rows:

* ``kinset demo``: writing the reel.
* ``kinset extract <dataset>`` on the raw files, and beneath it
  - its fixed cost: the same step on a reel of 20 parts (interpreter, imports,
    reel.yaml), fastest of 3, measured once per benchmark run (target ≤ 0.4 s); the
    same row is given for every other step below;
  - the I/O limit of its work: ``pandas.read_csv`` of its input files (Touchstone bodies
    through ``pandas.read_csv`` too) plus ``DataFrame.to_csv`` of the tables the step
    wrote (its own output tables read back, written again, timed in this process);
  - the ratio (step − fixed cost) / I/O limit (target ≤ 2×).
* ``kinset devices``.
* Per application, in the reel's order and as the workflow runs it (a later one gets
  ``--after`` the earlier ones, so it is offered their leftovers):
  - ``kinset match`` (set forming, tolerance scan, tables), with the sets, the proven
    bound and the method from its ``summary.json`` (target for pairs: exact; at 100,000
    parts, within 0.1 % of the bound);
  - set forming offered the whole reel: ``candidates`` + ``form_sets`` timed in a child
    process (as ``benchmarks/scan.py`` does), with sets, bound and method (targets at
    10,000 parts: pairs exact in ≤ 10 s; quads ≥ 99 % of the bound in ≤ 60 s);
  - ``kinset circuit`` (every set simulated in its reference circuit by ngspice);
  - ``kinset report`` (target ≤ 5 s at 10,000 parts).
* A per-part ``scipy.optimize.curve_fit`` loop on the forward data (read with pandas,
  fitted on the first ``--loop-sample`` parts, the fit time scaled to the reel), its
  accuracy against ``truth.csv`` beside kinset's, and the speed-up of kinset's read + fit
  over the loop's (target ≥ 20×): kinset's ``extract_forward`` timed in this process like
  the loop, its modules imported first, without start-up and without writing its tables;
  beside it, for the record, the speed-up over the whole step less its fixed cost.
* Sort-and-pair (sort on one forward voltage, take neighbours that fit every tolerance)
  against kinset's sets.
* ``snakemake --cores 2``: the full run (target ≤ 5× the summed ``pandas.read_csv`` time
  of the input files), a no-op rerun (target ≤ 3 s), a rerun after one new forward batch
  file (with the jobs it ran), and the job count of the one-file-per-part layout.
* The peak memory of any step or of the whole workflow (target < 8 GB): the largest
  process, and for the full run also the resident memory summed over its process tree
  (snakemake and the two jobs it runs at once), sampled every 0.5 s.

Every timed row also gets the log-log slope of its wall time between neighbouring sizes
(``log(t2/t1) / log(n2/n1)``: 1 is linear in the parts, 2 quadratic; start-up flattens
it at small sizes). ``--extras-up-to N`` skips, above N parts, the slow extras (the
curve_fit loop, sort-and-pair, whole-reel set forming, the new-file rerun and the
one-file-per-part plan); ``--timeout`` stops a match, circuit, report or set-forming
step that runs longer (recorded as stopped, its application then stays out of the
workflow runs). It prints one markdown table; each target is marked met or not met on
wall time, as the issue states it; where the same figure in CPU time passes, the mark
says so (a shared machine stretches wall time by other work, not CPU time).
Nothing here asserts: the figures are for the README and the issue notes.
"""


from __future__ import annotations

import argparse
import io
import json
import math
import os
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
sys.path.insert(0, str(HERE))
from forward_extract import curve_fit_points  # noqa: E402  (the per-part loop, shared)
from tree_memory import rss_bytes, tree  # noqa: E402

from kinset.demo import demo_parameters  # noqa: E402
from kinset.demo_production import (BATCH_PARTS, forward_files,  # noqa: E402
                                    production_parameters, write_production)
from kinset.extract import forward_settings  # noqa: E402
from kinset.registry import NAMES  # noqa: E402
from kinset.io.reel import load_reel  # noqa: E402
from kinset.matching.profile import load_profile  # noqa: E402
from kinset.matching.run import candidates, read_results  # noqa: E402
from kinset.matching.heuristics import sort_and_group  # noqa: E402
from kinset.matching.sets import form_sets  # noqa: E402

PY = sys.executable
ENV = dict(os.environ, PYTHONPATH=os.pathsep.join(
    [str(ROOT / "src")] + [p for p in os.environ.get("PYTHONPATH", "").split(os.pathsep) if p]))
SEED = 412


class Failed(RuntimeError):
    pass


TIMEOUT = None     # seconds a step may take (--timeout); None: no limit
WORKFLOW_TIMEOUT = None     # seconds the full snakemake run may take (--workflow-timeout)


class TimedOut(RuntimeError):
    def __init__(self, wall, peak, cpu):
        super().__init__(f"stopped after {wall:.0f} s")
        self.wall, self.peak, self.cpu = wall, peak, cpu


def _stopped(record) -> bool:
    return record is not None and record[-1] == "stopped"


def _cpu(usage) -> float:
    return usage.ru_utime + usage.ru_stime


def run(cmd: list, log: Path, timeout: float | None = None,
        tree_peak: list | None = None) -> tuple[float, float, float]:
    """Run ``cmd``; wall time [s], peak resident memory [MB] and CPU time (user + system)
    [s] of it and its children. With ``tree_peak`` (a list), the peak of the resident
    memory summed over the whole process tree, sampled every 0.5 s (``tree_memory.py``),
    is appended to it in MiB (the unit of the other peaks): for ``snakemake --cores 2``, two jobs at once."""
    log.parent.mkdir(parents=True, exist_ok=True)
    summed, sampled = 0, -1.0
    with open(log, "w") as out:
        t0 = time.perf_counter()
        proc = subprocess.Popen([str(c) for c in cmd], stdout=out, stderr=subprocess.STDOUT,
                                env=ENV, cwd=ROOT, start_new_session=True)
        while True:
            pid, status, usage = os.wait4(proc.pid, os.WNOHANG)
            wall = time.perf_counter() - t0
            if pid:
                break
            if tree_peak is not None and wall - sampled >= 0.5:
                summed, sampled = max(summed, sum(map(rss_bytes, tree(proc.pid)))), wall
            if timeout is not None and wall > timeout:
                os.killpg(proc.pid, 9)          # this step's own process group only
                _, status, usage = os.wait4(proc.pid, 0)
                proc.returncode = -9
                raise TimedOut(wall, usage.ru_maxrss / 1024, _cpu(usage))
            time.sleep(0.05)
    if tree_peak is not None:
        tree_peak.append(summed / 2**20)
    proc.returncode = os.waitstatus_to_exitcode(status)
    if proc.returncode:
        raise Failed(f"{' '.join(map(str, cmd))} failed ({proc.returncode}); see {log}")
    return wall, usage.ru_maxrss / 1024, _cpu(usage)


def timed(cmd: list, log: Path):
    """:func:`run`, with a step stopped at the time limit recorded as (wall, peak, 'stopped')."""
    try:
        return run(cmd, log, TIMEOUT)
    except TimedOut as exc:
        return exc.wall, exc.peak, exc.cpu, "stopped"


def kinset(*args) -> list:
    return [PY, "-m", "kinset", *args]


def raw_read(reel: Path, dataset: str) -> tuple[float, float]:
    """pandas.read_csv of a dataset's files, wall and CPU [s] (capacitance: with the
    Touchstone bodies)."""
    r = load_reel(reel)
    files = r.dataset_files(dataset)
    touchstone = []
    if dataset == "capacitance" and (reel / "capacitance" / "index.csv").is_file():
        files.append(reel / "capacitance" / "index.csv")
        touchstone = sorted((reel / "capacitance").glob("*.s1p"))
    t0, c0 = time.perf_counter(), time.process_time()
    for f in files:
        pd.read_csv(f, comment="#")
    for f in touchstone:
        data = f.read_bytes()
        body = data[data.index(b"\n", data.index(b"\n#") + 1) + 1:]
        pd.read_csv(io.BytesIO(body), sep=" ", header=None)
    return time.perf_counter() - t0, time.process_time() - c0


def curve_fit_baseline(reel: Path, steps: Path, sample: int) -> dict:
    """The per-part curve_fit loop on the first ``sample`` parts, against kinset's fit."""
    r = load_reel(reel)
    truth = pd.read_csv(reel / "truth.csv", comment="#", keep_default_na=False)
    chosen = set(truth["device"].iloc[:sample])
    t0, c0 = time.perf_counter(), time.process_time()
    points = pd.concat([pd.read_csv(f, comment="#") for f in r.dataset_files("forward")],
                       ignore_index=True)
    read, read_cpu = time.perf_counter() - t0, time.process_time() - c0
    points = points[points["device"].isin(chosen)]
    t0, c0 = time.perf_counter(), time.process_time()
    loop = curve_fit_points(points, forward_settings(r))
    fit, fit_cpu = time.perf_counter() - t0, time.process_time() - c0
    # kinset's own read + fit, timed the same way: in this process, its modules imported
    # first (as pandas and scipy are for the loop), no start-up and no tables written
    import kinset.fitting.forward  # noqa: F401
    import kinset.io.datasets  # noqa: F401
    import kinset.io.parsed  # noqa: F401
    from kinset.extract import extract_forward
    t0, c0 = time.perf_counter(), time.process_time()
    extract_forward(r, [])
    own, own_cpu = time.perf_counter() - t0, time.process_time() - c0
    ours = pd.read_csv(steps / "forward.csv")
    errors = {}
    for name, table in (("kinset", ours.rename(columns={"n": "n_fit"})), ("loop", loop)):
        m = truth.merge(table, on="device", suffixes=("", "_fit"))
        m = m[m["device"].isin(chosen)]
        errors[name] = {"IS": np.nanmedian(np.abs(m["is_A_fit"] / m["is_A"] - 1)),
                        "N": np.nanmedian(np.abs(m["n_fit"] / m["n"] - 1)),
                        "RS": np.nanmedian(np.abs(m["rs_ohm_fit"] / m["rs_ohm"] - 1)),
                        "failed": int(m["is_A_fit"].isna().sum())}
    return {"sample": len(chosen), "read": read, "fit": fit,
            "scaled": read + fit * len(truth) / len(chosen),
            "scaled_cpu": read_cpu + fit_cpu * len(truth) / len(chosen), "errors": errors,
            "kinset": own, "kinset_cpu": own_cpu}


def sort_and_pair(steps: Path, application: str) -> tuple[int, float]:
    """Sets that sorting on the first forward voltage and grouping neighbours forms."""
    tables, devices, reel = read_results(steps)
    profile = load_profile(application)
    c = candidates(tables, devices, profile, reel.get("accuracy"))
    key = next((j for j, d in enumerate(profile.dimensions)
                if d.quantity == "forward_voltage"), 0)
    t0 = time.perf_counter()
    found = sort_and_group(c.z, profile.set_size, key=key) if len(c.z) else []
    return len(found), time.perf_counter() - t0


def add_batch(reel: Path, devices: int) -> str:
    """One new forward batch file of the next part numbers, as the tester would write it."""
    width = max(3, len(str(devices)))
    first = -(-devices // BATCH_PARTS) * BATCH_PARTS + 1     # the next batch's first part
    p = demo_parameters(BATCH_PARTS, SEED + 1)
    p["position"] = first + np.arange(BATCH_PARTS)
    p["device"] = [f"D{x:0{width}d}" for x in p["position"]]
    p = production_parameters(p, SEED + 1)
    names = write_production(reel, p, SEED + 1, load_reel(reel).id, "batches",
                             stations=(forward_files,))
    return names[0]


def jobs(log: Path) -> dict[str, int]:
    """Job counts from a ``snakemake --dry-run --quiet rules`` log."""
    out = {}
    for line in log.read_text().splitlines():
        p = line.split()
        if len(p) == 2 and p[1].isdigit() and p[0] not in ("job", "total"):
            out[p[0]] = int(p[1])
    return out


def write_time(steps: Path, dataset: str, scratch: Path) -> tuple[float, float]:
    """``DataFrame.to_csv`` of the tables a step wrote (its table and side tables), wall
    and CPU [s]: read back with pandas, then written again, timed in this process."""
    scratch.mkdir(parents=True, exist_ok=True)
    tables = [steps / f"{dataset}.csv"] + sorted(steps.glob(f"{dataset}_*.csv"))
    frames = [pd.read_csv(t) for t in tables]
    t0, c0 = time.perf_counter(), time.process_time()
    for t, frame in zip(tables, frames):
        frame.to_csv(scratch / t.name, index=False)
    took = time.perf_counter() - t0, time.process_time() - c0
    shutil.rmtree(scratch)
    return took


def form_whole_reel(results: Path, application: str, out: Path) -> None:
    """(child process) Set forming on the whole reel, as benchmarks/scan.py: the offered
    parts once, then ``form_sets`` timed alone (wall and CPU), written to ``out`` (JSON)."""
    from kinset.matching.profile import load_profile as _load
    tables, devices, reel = read_results(results)
    p = _load(application)
    pool = candidates(tables, devices, p, reel.get("accuracy"))
    weights = np.asarray([d.weight for d in p.dimensions])
    wall, cpu = time.perf_counter(), time.process_time()
    found = form_sets(pool.z, weights, p.set_size, p.goal)
    wall, cpu = time.perf_counter() - wall, time.process_time() - cpu
    out.write_text(json.dumps({"offered": len(pool.devices), "sets": found.count,
                               "bound": found.upper_bound, "optimal": bool(found.optimal),
                               "method": found.method, "wall": wall, "cpu": cpu}))


def fixed_costs(work: Path) -> dict[str, tuple[float, float]]:
    """Each step on a reel of 20 parts, fastest of 3, wall and CPU [s]: what it pays
    before any work."""
    tiny, out, logs = work / "reel-20", work / "tiny", work / "logs-tiny"
    if not (tiny / "reel.yaml").is_file():
        run(kinset("demo", "--out", tiny, "--devices", 20, "--seed", SEED, "--layout",
                   "batches"), logs / "demo.log")
    apps = load_reel(tiny).settings["applications"]
    shutil.rmtree(out, ignore_errors=True)
    def fastest(cmd, name):
        runs = [run(cmd, logs / f"{name}.log") for _ in range(3)]
        return min(r[0] for r in runs), min(r[2] for r in runs)

    fixed = {f"extract {d}": fastest(kinset("extract", d, "--reel", tiny, "-o", out / f"{d}.csv"),
                                     f"extract_{d}") for d in NAMES}
    run(kinset("check-reel", "--reel", tiny, "-o", out / "reel.json"), logs / "reel.log")
    fixed["devices step"] = fastest(kinset("devices", "-o", out / "devices.csv",
                                           *[out / f"{d}.csv" for d in NAMES]), "devices")
    after: list = []
    for a in apps:
        fixed[f"match {a}"] = fastest(kinset("match", "--results", out, "--application", a,
                                             "-o", out / a, *after), f"match_{a}")
        after = after or ["--after"]
        after.append(out / a)
        for step in ("circuit", "report"):
            fixed[f"{step} {a}"] = fastest(kinset(step, "--results", out, "--application", a,
                                                  "-o", out / a), f"{step}_{a}")
    return fixed


def extraction(m: dict, reel: Path, steps: Path, logs: Path) -> None:
    for d in NAMES:
        m[f"extract {d}"] = run(kinset("extract", d, "--reel", reel, "-o", steps / f"{d}.csv"),
                                logs / f"extract_{d}.log")
        m[f"raw {d}"] = raw_read(reel, d)
        m[f"write {d}"] = write_time(steps, d, steps.parent / "to_csv")
        print(f"  {m['devices']}: extract {d} {m[f'extract {d}'][0]:.1f} s", file=sys.stderr)
    run(kinset("check-reel", "--reel", reel, "-o", steps / "reel.json"), logs / "reel.log")
    m["devices step"] = run(kinset("devices", "-o", steps / "devices.csv",
                                   *[steps / f"{d}.csv" for d in NAMES]), logs / "devices.log")


def matching(m: dict, steps: Path, logs: Path, extras: bool) -> None:
    """Each application as the workflow runs it (after the ones before it), its circuit
    and report; with ``extras``, set forming offered the whole reel and sort-and-pair."""
    after: list = []
    for a in m["applications"]:
        m[f"match {a}"] = timed(kinset("match", "--results", steps, "--application", a,
                                       "-o", steps / a, *after), logs / f"match_{a}.log")
        print(f"  {m['devices']}: match {a} {m[f'match {a}'][0]:.1f} s", file=sys.stderr)
        if extras:
            out = steps.parent / f"whole_{a}.json"
            m[f"whole {a}"] = timed([PY, __file__, "--form-sets", steps, a, out],
                                    logs / f"whole_{a}.log")
            if not _stopped(m[f"whole {a}"]):
                m[f"whole sets {a}"] = json.loads(out.read_text())
            m[f"by hand {a}"] = sort_and_pair(steps, a)
        if _stopped(m[f"match {a}"]):
            return          # stopped: the applications after it have no --after folder
        summary = json.loads((steps / a / "summary.json").read_text())
        m[f"sets {a}"] = (summary["sets"], summary["upper_bound"], summary["set_size"],
                          summary["method"], bool(summary["optimal"]))
        after = after or ["--after"]
        after.append(steps / a)
        for step in ("circuit", "report"):
            m[f"{step} {a}"] = timed(kinset(step, "--results", steps, "--application", a,
                                            "-o", steps / a) + (["--threads", "2"]
                                                                if step == "circuit" else []),
                                     logs / f"{step}_{a}.log")


def workflow(m: dict, reel: Path, work: Path, logs: Path, extras: bool) -> None:
    wf = work / "workflow"
    shutil.rmtree(wf, ignore_errors=True)
    apps = m["workflow applications"]
    smk = [PY, "-m", "snakemake", "-s", ROOT / "Snakefile", "--profile",
           ROOT / "profiles" / "default", "--directory", wf, "--cores", "2", "--config",
           f"reel={reel}", f"results={wf / 'results'}",
           f"application={','.join(apps) or m['applications'][0]}"]
    run(smk + ["--dry-run", "--quiet", "rules"], logs / "wf_plan.log")
    m["wf jobs"] = sum(jobs(logs / "wf_plan.log").values())
    summed: list = []
    try:
        m["wf full"] = run(smk, logs / "wf_full.log", WORKFLOW_TIMEOUT, summed)
        m["wf full summed MB"] = summed[0]
    except TimedOut as exc:
        m["wf full"] = (exc.wall, exc.peak, exc.cpu, "stopped")
        return
    print(f"  {m['devices']}: workflow {m['wf full'][0]:.1f} s", file=sys.stderr)
    m["wf noop"] = run(smk, logs / "wf_noop.log")
    if not extras:
        return
    new = add_batch(reel, m["devices"])
    try:
        run(smk + ["--dry-run", "--quiet", "rules"], logs / "wf_plan_new.log")
        m["wf new jobs"] = jobs(logs / "wf_plan_new.log")
        m["wf new"] = run(smk, logs / "wf_new.log")
    finally:
        (reel / new).unlink()           # the reel stays as written, for --reuse
    # The same reel as one file per part: the plan must stay in bucket jobs.
    per_part = work / "reel-per-part"
    shutil.rmtree(per_part, ignore_errors=True)
    run(kinset("demo", "--out", per_part, "--devices", m["devices"], "--seed", SEED,
               "--layout", "per-part"), logs / "demo_per_part.log")
    run([PY, "-m", "snakemake", "-s", ROOT / "Snakefile", "--directory", work / "wf-per-part",
         "--dry-run", "--quiet", "rules", "--config", f"reel={per_part}",
         f"results={work / 'wf-per-part' / 'results'}"], logs / "wf_plan_per_part.log")
    m["per-part files"] = sum(1 for f in per_part.rglob("*") if f.is_file())
    m["per-part jobs"] = jobs(logs / "wf_plan_per_part.log")
    shutil.rmtree(per_part)


def bench(devices: int, work: Path, sample: int, extras: bool, reuse: bool) -> dict:
    work.mkdir(parents=True, exist_ok=True)
    reel, steps, logs = work / "reel", work / "steps", work / "logs"
    m: dict = {"devices": devices}
    if not (reuse and (reel / "reel.yaml").is_file()):
        shutil.rmtree(reel, ignore_errors=True)
        m["demo"] = run(kinset("demo", "--out", reel, "--devices", devices, "--seed", SEED,
                               "--layout", "batches"), logs / "demo.log")
    shutil.rmtree(steps, ignore_errors=True)
    m["files"] = {d: len(load_reel(reel).dataset_files(d)) for d in NAMES}
    m["files"]["touchstone"] = len(list((reel / "capacitance").glob("*.s1p")))
    m["size_MB"] = sum(f.stat().st_size for f in reel.rglob("*") if f.is_file()) / 1e6
    m["applications"] = load_reel(reel).settings["applications"]
    extraction(m, reel, steps, logs)
    matching(m, steps, logs, extras)
    # The workflow runs the applications whose matching finished in time.
    m["workflow applications"] = [a for a in m["applications"]
                                  if f"match {a}" in m and not _stopped(m[f"match {a}"])]
    if extras:
        m["loop"] = curve_fit_baseline(reel, steps, sample)
        print(f"  {devices}: curve_fit loop done", file=sys.stderr)
    workflow(m, reel, work, logs, extras)
    return m


def _s(t: float) -> str:
    return f"{t:.2f} s" if t < 10 else f"{t:.1f} s" if t < 600 else f"{t / 60:.1f} min"


def _mark(ok: bool, cpu_ok: bool | None = None) -> str:
    """Met or not on wall time; where the same ratio in CPU time passes, said beside (a
    shared machine stretches wall time with other work, not CPU time)."""
    return "met" if ok else "**not met**" + (" (met in CPU time)" if cpu_ok else "")


def _pair(x) -> str:
    """wall (CPU) of an in-process timing or a fixed cost."""
    return f"{_s(x[0])} ({_s(x[1])} CPU)"


def _short(method: str) -> str:
    """A method's name without its details (summary.json gives them in full)."""
    return method.split(" (")[0].split(";")[0]


def _slopes(sizes: list[int], times: list) -> list[str]:
    """log-log slope of time against parts between neighbouring sizes ('≥' past a stop)."""
    out = []
    for (n1, t1), (n2, t2) in zip(zip(sizes, times), zip(sizes[1:], times[1:])):
        if not t1 or not t2:
            out.append("")
            continue
        k = math.log(t2[0] / t1[0]) / math.log(n2 / n1)
        out.append(f"{'≥ ' if _stopped(t2) else ''}{k:.2f}")
    return out


class Table:
    """The markdown table: a column per size, the log-log slopes, the target, a mark per size."""

    def __init__(self, results: list[dict]):
        self.results = results
        self.sizes = [r["devices"] for r in results]
        pairs = [f"slope {a:,}→{b:,}" for a, b in zip(self.sizes, self.sizes[1:])]
        self.lines = ["| step | " + " | ".join(f"{n:,} parts" for n in self.sizes) + " | "
                      + "".join(f"{p} | " for p in pairs) + "target | "
                      + " | ".join(f"{n:,}" for n in self.sizes) + " |",
                      "|" + "---|" * (2 + 2 * len(self.sizes) + len(pairs))]

    def row(self, name, cells, target="", marks=None, times=None):
        marks = marks or [""] * len(self.sizes)
        slopes = _slopes(self.sizes, times) if times else [""] * (len(self.sizes) - 1)
        self.lines.append(f"| {name} | " + " | ".join(cells) + " | "
                          + "".join(f"{x} | " for x in slopes) + f"{target} | "
                          + " | ".join(marks) + " |")

    def times(self, key) -> list:
        return [r.get(key) for r in self.results]

    def step(self, name, key, target="", marks=None):
        """A step's wall time and peak memory, with its slope."""
        cells = [("—" if r.get(key) is None else
                  f"{'> ' if _stopped(r[key]) else ''}{_s(r[key][0])} ({_s(r[key][2])} CPU), "
                  f"{r[key][1]:.0f} MB" + (" (stopped at the time limit)" if _stopped(r[key])
                                           else ""))
                 for r in self.results]
        self.row(name, cells, target, marks, self.times(key))

    def fixed(self, key):
        """The step's fixed cost (measured once per benchmark run, on 20 parts)."""
        got = [r["fixed"].get(key) for r in self.results]
        self.row("&nbsp;&nbsp;fixed cost (the same step on 20 parts)",
                 ["—" if x is None else _pair(x) for x in got], "≤ 0.4 s",
                 ["" if x is None else _mark(x[0] <= 0.4, x[1] <= 0.4) for x in got])


def _extraction_rows(t: Table) -> None:
    res = t.results
    t.row("reel: files (fwd/leak/C-V/recovery/Touchstone), size",
          [f"{r['files']['forward']}/{r['files']['leakage']}/{r['files']['capacitance']}/"
           f"{r['files']['recovery']}/{r['files']['touchstone']}, {r['size_MB']:.0f} MB"
           for r in res])
    t.step("`kinset demo` (writing the reel)", "demo")
    for d in NAMES:
        t.step(f"`kinset extract {d}` (raw files)", f"extract {d}")
        t.fixed(f"extract {d}")
        t.row("&nbsp;&nbsp;`pandas.read_csv` of its files",
              [_pair(r[f"raw {d}"]) for r in res])
        t.row("&nbsp;&nbsp;`DataFrame.to_csv` of the tables it wrote",
              [_pair(r[f"write {d}"]) for r in res])
        ratio = [[(r[f"extract {d}"][k] - r["fixed"][f"extract {d}"][j])
                  / (r[f"raw {d}"][j] + r[f"write {d}"][j]) for k, j in ((0, 0), (2, 1))]
                 for r in res]
        t.row("&nbsp;&nbsp;ratio (step − fixed) / (read_csv + to_csv): wall (CPU)",
              [f"{x:.1f}× ({c:.1f}×)" for x, c in ratio], "≤ 2×",
              [_mark(x <= 2, c <= 2) for x, c in ratio])
    t.step("`kinset devices`", "devices step")
    t.fixed("devices step")


def _sets_cell(x) -> str:
    count, bound = x[0], x[1]
    return f"{count:,} / {bound:,} ({100 * count / max(bound, 1):.2f} %), {_short(x[3])}"


def _application_rows(t: Table, a: str) -> None:
    res = t.results
    t.step(f"`kinset match` {a} (as the workflow runs it)", f"match {a}")
    t.fixed(f"match {a}")
    pairs = res[0].get(f"sets {a}", (0, 0, 2))[2] == 2
    got = [r.get(f"sets {a}") for r in res]
    t.row("&nbsp;&nbsp;sets / proven bound, method (summary.json)",
          ["—" if x is None else _sets_cell(x) for x in got],
          "pairs: exact (100k: within 0.1 %)" if pairs else "",
          ["" if x is None or not pairs else
           _mark(x[4] or x[0] >= (0.999 if r["devices"] >= 100000 else 1) * x[1])
           for x, r in zip(got, res)])
    whole = [r.get(f"whole sets {a}") for r in res]
    stopped = [_stopped(r.get(f"whole {a}")) for r in res]
    if any(stopped):
        t.row("&nbsp;&nbsp;set forming offered the whole reel (`form_sets`)",
              [f"stopped after {_s(r[f'whole {a}'][0])} ({_s(r[f'whole {a}'][2])} CPU)" if st
               else "" for r, st in zip(res, stopped)])
    if any(whole):
        limit, share = (10, 1.0) if pairs else (60, 0.99)
        t.row("&nbsp;&nbsp;set forming offered the whole reel (`form_sets`): sets / bound, "
              "time (CPU)",
              ["—" if w is None else f"{w['offered']:,} offered: "
               f"{_sets_cell((w['sets'], w['bound'], 0, w['method']))}, {_s(w['wall'])} "
               f"({_s(w['cpu'])} CPU)" for w in whole],
              f"10k: {'exact' if pairs else '≥ 99 % of bound'} in ≤ {limit} s",
              ["" if w is None or r["devices"] != 10000 else
               _mark(w["sets"] >= share * w["bound"] and w["wall"] <= limit)
               for w, r in zip(whole, res)],
              [None if w is None else (w["wall"],) for w in whole])
    t.step(f"`kinset circuit` {a} (ngspice, 2 threads)", f"circuit {a}")
    t.fixed(f"circuit {a}")
    t.step(f"`kinset report` {a}", f"report {a}", "≤ 5 s at 10k",
           [_mark(r[f"report {a}"][0] <= 5, r[f"report {a}"][2] <= 5)
            if r["devices"] == 10000 and f"report {a}" in r else "" for r in res])
    t.fixed(f"report {a}")
    hand = [r.get(f"by hand {a}") for r in res]
    if any(hand):
        t.row(f"&nbsp;&nbsp;sort-and-pair vs kinset (whole reel), {a}: sets",
              ["—" if h is None or r.get(f"whole sets {a}") is None else
               f"{h[0]:,} vs {r[f'whole sets {a}']['sets']:,}" for h, r in zip(hand, res)],
              "kinset more")


def _loop_rows(t: Table) -> None:
    res = [r for r in t.results]
    loops = [r.get("loop") for r in res]
    t.row("per-part `curve_fit` loop, forward (read + fit)",
          ["—" if x is None else f"{_s(x['scaled'])} (fit of {x['sample']} parts timed, scaled)"
           for x in loops])
    t.row("kinset's read + fit, forward (in-process: no start-up, no tables written)",
          ["—" if x is None or "kinset" not in x else f"{_s(x['kinset'])} "
           f"({_s(x['kinset_cpu'])} CPU)" for x in loops])
    own = [None if x is None or "kinset" not in x else
           (x["scaled"] / x["kinset"], x["scaled_cpu"] / x["kinset_cpu"]) for x in loops]
    t.row("&nbsp;&nbsp;speed-up: loop read + fit / kinset read + fit: wall (CPU)",
          ["—" if x is None else f"{x[0]:.0f}× ({x[1]:.0f}×)" for x in own], "≥ 20×",
          ["" if x is None else _mark(x[0] >= 20, x[1] >= 20) for x in own])
    speed = [None if x is None else
             [x[a] / (r["extract forward"][k] - r["fixed"]["extract forward"][j])
              for a, k, j in (("scaled", 0, 0), ("scaled_cpu", 2, 1))]
             for x, r in zip(loops, res)]
    t.row("&nbsp;&nbsp;speed-up: loop / (kinset extract forward − fixed; its tables' writing "
          "included): wall (CPU)",
          ["—" if x is None else f"{x[0]:.0f}× ({x[1]:.0f}×)" for x in speed])
    whole = ["—" if x is None else f"{x['scaled'] / r['extract forward'][0]:.0f}×"
             for x, r in zip(loops, res)]
    t.row("&nbsp;&nbsp;speed-up: loop / whole step (start-up included)", whole)
    for q in ("IS", "N", "RS"):
        e = [None if x is None else (x["errors"]["kinset"][q], x["errors"]["loop"][q])
             for x in loops]
        t.row(f"&nbsp;&nbsp;median error of {q} vs truth.csv: kinset / loop",
              ["—" if x is None else f"{x[0]:.1e} / {x[1]:.1e}" for x in e], "kinset ≤ loop",
              ["" if x is None else _mark(x[0] <= x[1]) for x in e])


def _workflow_rows(t: Table) -> None:
    res = t.results
    t.row("snakemake jobs planned (full run)", [str(r.get("wf jobs", "—")) for r in res])
    t.row("same reel, one file per part: files, jobs planned (dry run)",
          ["—" if "per-part jobs" not in r else
           f"{r['per-part files']:,} files: {sum(r['per-part jobs'].values())} jobs "
           f"({r['per-part jobs'].get('parse', 0)} parse)" for r in res],
          "hundreds at most", ["" if "per-part jobs" not in r else
                               _mark(sum(r["per-part jobs"].values()) < 1000) for r in res])
    t.row("applications in the workflow runs", [", ".join(r["workflow applications"])
                                               for r in res], "all")
    t.step("`snakemake --cores 2` full run", "wf full")
    read = [[sum(r[f"raw {d}"][j] for d in NAMES) for j in (0, 1)] for r in res]
    ratio = [None if "wf full" not in r else (r["wf full"][0] / x[0], r["wf full"][2] / x[1])
             for r, x in zip(res, read)]
    t.row("&nbsp;&nbsp;ratio full run / summed `pandas.read_csv` of its input files: "
          "wall (CPU)", [f"{_pair(x)} read; " + ("—" if y is None else
                                                  f"{y[0]:.1f}× ({y[1]:.1f}×)")
                         for x, y in zip(read, ratio)],
          "≤ 5× at 10k", [_mark(y[0] <= 5, y[1] <= 5) if y is not None and r["devices"] == 10000
                          else "" for y, r in zip(ratio, res)])
    noop = [r.get("wf noop") for r in res]
    t.row("no-op rerun", ["—" if x is None else f"{_s(x[0])} ({_s(x[2])} CPU)" for x in noop],
          "≤ 3 s at 10k",
          ["" if x is None or r["devices"] != 10000 else _mark(x[0] <= 3, x[2] <= 3)
           for x, r in zip(noop, res)], noop)
    expected = {"parse", "extract_forward", "devices", "match", "report", "all"}
    new = [r.get("wf new jobs") for r in res]
    t.row("rerun after one new forward batch file",
          ["—" if j is None else f"{_s(r['wf new'][0])}: "
           + ", ".join(f"{k} {v}" for k, v in j.items()) for j, r in zip(new, res)],
          "one parse, then forward, devices, match, report",
          ["" if j is None else _mark(set(j) == expected and j["parse"] == 1) for j in new])


def table(results: list[dict]) -> str:
    t = Table(results)
    _extraction_rows(t)
    for a in results[0]["applications"]:
        _application_rows(t, a)
    _loop_rows(t)
    _workflow_rows(t)
    steps = ("demo", "extract ", "devices step", "match ", "circuit ", "report ", "whole ",
             "wf ")
    peak = [max(v[1] for k, v in r.items() if k.startswith(steps) and isinstance(v, tuple))
            for r in results]
    stopped = [any(isinstance(v, tuple) and v[-1] == "stopped" for v in r.values())
               for r in results]
    t.row("peak memory, any step or the whole workflow (largest process)",
          [f"{x:.0f} MB" + (" (a stopped step included)" if st else "")
           for x, st in zip(peak, stopped)], "< 8 GB", [_mark(x < 8192) for x in peak])
    summed = [r.get("wf full summed MB") for r in results]
    t.row("peak memory of the full run, summed over the jobs running at once (sampled "
          "every 0.5 s)", ["—" if x is None else f"{x:.0f} MB" for x in summed], "< 8 GB",
          ["" if x is None else _mark(x < 8192) for x in summed])
    return "\n".join(t.lines)


def main() -> None:
    if sys.argv[1:2] == ["--form-sets"]:         # the child of the whole-reel set forming
        form_whole_reel(Path(sys.argv[2]), sys.argv[3], Path(sys.argv[4]))
        return
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--devices", type=int, nargs="+", default=[1000, 10000])
    ap.add_argument("--work", type=Path, help="folder for the reels and results (default: "
                    "a temporary folder, removed afterwards)")
    ap.add_argument("--reuse", action="store_true", help="keep a reel already written in "
                    "WORK/<size>/reel (same seed) instead of writing it again")
    ap.add_argument("--extras-up-to", type=int, default=10000, metavar="N",
                    help="above N parts, skip the curve_fit loop, sort-and-pair, whole-reel "
                    "set forming, the new-file rerun and the one-file-per-part plan")
    ap.add_argument("--loop-sample", type=int, default=250,
                    help="parts the curve_fit loop is timed on (scaled to the reel)")
    ap.add_argument("--timeout", type=float, default=1800,
                    help="seconds a match, circuit, report or set-forming step may take "
                    "before it is stopped and marked so; default 1800")
    ap.add_argument("--workflow-timeout", type=float, default=None,
                    help="seconds the full snakemake run may take (default: no limit)")
    args = ap.parse_args()
    global TIMEOUT, WORKFLOW_TIMEOUT
    TIMEOUT, WORKFLOW_TIMEOUT = args.timeout, args.workflow_timeout
    with tempfile.TemporaryDirectory(prefix="kinset-bench-") as tmp:
        base = args.work or Path(tmp)
        results = []
        for n in args.devices:
            print(f"reel of {n} parts in {base / str(n)}", file=sys.stderr)
            if not results:
                fixed = fixed_costs(base)
            results.append(bench(n, base / str(n), args.loop_sample,
                                 n <= args.extras_up_to, args.reuse))
            results[-1]["fixed"] = fixed
            (base / str(n) / "measurements.json").write_text(json.dumps(results[-1], indent=1))
            print(table(results[-1:]), file=sys.stderr)
        print(table(results))
        print()
        print(f"{os.cpu_count()} cores; wall-clock times of one run, CPU time (user + system, "
              f"children included) in brackets; Python {sys.version.split()[0]}")


if __name__ == "__main__":
    main()
