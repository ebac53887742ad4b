"""The scale benchmark: whole reels through kinset, against the I/O limit and the naive way.

    python benchmarks/run.py [--devices 1000 10000] [--work DIR] [--loop-sample 250]

For each reel size it writes a production demo reel (``kinset demo --layout batches``:
every part on every station, batch files of 250 parts) and measures, each as a
subprocess of the real command line (``python -m kinset ...``), wall time and peak
memory (``os.wait4``: the child's maximum resident set, its own children included):

* each extraction step on the raw files, ``devices``, ``match`` and ``report`` per
  application of the reel;
* ``pandas.read_csv`` of the same files in this process (the I/O limit; Touchstone
  bodies through ``pandas.read_csv`` too) and the ratio step / raw, where the step's
  time is counted without its fixed cost (the same step on a reel of 20 parts:
  interpreter, imports, reel.yaml);
* a per-part ``scipy.optimize.curve_fit`` loop on the forward data (read with pandas,
  fitted on the first ``--loop-sample`` parts, the fit time scaled to the reel), its
  accuracy against ``truth.csv`` beside kinset's, and the speed-up over kinset's step
  without its fixed cost (the loop is timed in-process, without start-up, too);
* sort-and-pair (sort on one forward voltage, take neighbours that fit every
  tolerance) against kinset's sets;
* ``snakemake --cores 2``: the full run, a no-op rerun, and a rerun after one new
  forward batch file (with the jobs it ran).

It prints one markdown table; each target is marked met or not met.
Nothing here asserts: the figures are for the README and the issue notes.
"""

from __future__ import annotations

import argparse
import io
import json
import os
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

from kinset.demo import demo_parameters  # noqa: E402
from kinset.demo_production import (BATCH_PARTS, forward_files,  # noqa: E402
                                    production_parameters, write_production)
from kinset.extract import forward_settings  # noqa: E402
from kinset.registry import NAMES  # noqa: E402
from kinset.io.reel import load_reel  # noqa: E402
from kinset.matching.profile import load_profile  # noqa: E402
from kinset.matching.run import candidates, read_results  # noqa: E402
from kinset.matching.heuristics import sort_and_group  # noqa: E402

PY = sys.executable
ENV = dict(os.environ, PYTHONPATH=os.pathsep.join(
    [str(ROOT / "src")] + [p for p in os.environ.get("PYTHONPATH", "").split(os.pathsep) if p]))
SEED = 412


class Failed(RuntimeError):
    pass


TIMEOUT = None     # seconds a step may take (--timeout); None: no limit


class TimedOut(RuntimeError):
    def __init__(self, wall, peak):
        super().__init__(f"stopped after {wall:.0f} s")
        self.wall, self.peak = wall, peak


def run(cmd: list, log: Path, timeout: float | None = None) -> tuple[float, float]:
    """Run ``cmd``; wall time [s] and peak resident memory [MB] of it and its children."""
    log.parent.mkdir(parents=True, exist_ok=True)
    with open(log, "w") as out:
        t0 = time.perf_counter()
        proc = subprocess.Popen([str(c) for c in cmd], stdout=out, stderr=subprocess.STDOUT,
                                env=ENV, cwd=ROOT, start_new_session=True)
        while True:
            pid, status, usage = os.wait4(proc.pid, os.WNOHANG)
            wall = time.perf_counter() - t0
            if pid:
                break
            if timeout is not None and wall > timeout:
                os.killpg(proc.pid, 9)          # this step's own process group only
                _, status, usage = os.wait4(proc.pid, 0)
                proc.returncode = -9
                raise TimedOut(wall, usage.ru_maxrss / 1024)
            time.sleep(0.05)
    proc.returncode = os.waitstatus_to_exitcode(status)
    if proc.returncode:
        raise Failed(f"{' '.join(map(str, cmd))} failed ({proc.returncode}); see {log}")
    return wall, usage.ru_maxrss / 1024


def timed(cmd: list, log: Path):
    """:func:`run`, with a step stopped at the time limit recorded as (wall, peak, 'stopped')."""
    try:
        return run(cmd, log, TIMEOUT)
    except TimedOut as exc:
        return exc.wall, exc.peak, "stopped"


def kinset(*args) -> list:
    return [PY, "-m", "kinset", *args]


def raw_read(reel: Path, dataset: str) -> float:
    """pandas.read_csv of a dataset's files [s] (capacitance: with the Touchstone bodies)."""
    r = load_reel(reel)
    files = r.dataset_files(dataset)
    touchstone = []
    if dataset == "capacitance" and (reel / "capacitance" / "index.csv").is_file():
        files.append(reel / "capacitance" / "index.csv")
        touchstone = sorted((reel / "capacitance").glob("*.s1p"))
    t0 = time.perf_counter()
    for f in files:
        pd.read_csv(f, comment="#")
    for f in touchstone:
        data = f.read_bytes()
        body = data[data.index(b"\n", data.index(b"\n#") + 1) + 1:]
        pd.read_csv(io.BytesIO(body), sep=" ", header=None)
    return time.perf_counter() - t0


def curve_fit_baseline(reel: Path, steps: Path, sample: int) -> dict:
    """The per-part curve_fit loop on the first ``sample`` parts, against kinset's fit."""
    r = load_reel(reel)
    truth = pd.read_csv(reel / "truth.csv", comment="#", keep_default_na=False)
    chosen = set(truth["device"].iloc[:sample])
    t0 = time.perf_counter()
    points = pd.concat([pd.read_csv(f, comment="#") for f in r.dataset_files("forward")],
                       ignore_index=True)
    read = time.perf_counter() - t0
    points = points[points["device"].isin(chosen)]
    t0 = time.perf_counter()
    loop = curve_fit_points(points, forward_settings(r))
    fit = time.perf_counter() - t0
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
            "scaled": read + fit * len(truth) / len(chosen), "errors": errors}


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


def bench(devices: int, work: Path, sample: int) -> dict:
    work.mkdir(parents=True, exist_ok=True)
    reel, steps, logs = work / "reel", work / "steps", work / "logs"
    m: dict = {"devices": devices}
    m["demo"] = run(kinset("demo", "--out", reel, "--devices", devices, "--seed", SEED,
                           "--layout", "batches"), logs / "demo.log")
    # The fixed cost of a step (interpreter, imports, reel.yaml): the same step on a reel of
    # 20 parts, fastest of 3.
    tiny = work / "reel-20"
    run(kinset("demo", "--out", tiny, "--devices", 20, "--seed", SEED, "--layout", "batches"),
        logs / "demo_tiny.log")
    m["fixed"] = {d: min(run(kinset("extract", d, "--reel", tiny, "-o", work / "tiny" / f"{d}.csv"),
                             logs / f"tiny_{d}.log")[0] for _ in range(3)) for d in NAMES}
    m["files"] = {d: len(load_reel(reel).dataset_files(d)) for d in NAMES}
    m["files"]["touchstone"] = len(list((reel / "capacitance").glob("*.s1p")))
    m["size_MB"] = sum(f.stat().st_size for f in reel.rglob("*") if f.is_file()) / 1e6
    for d in NAMES:
        m[f"extract {d}"] = run(kinset("extract", d, "--reel", reel, "-o", steps / f"{d}.csv"),
                                logs / f"extract_{d}.log")
        m[f"raw {d}"] = raw_read(reel, d)
        print(f"  {devices}: extract {d} {m[f'extract {d}'][0]:.1f} s", file=sys.stderr)
    run(kinset("check-reel", "--reel", reel, "-o", steps / "reel.json"), logs / "reel.log")
    m["devices step"] = run(kinset("devices", "-o", steps / "devices.csv",
                                   *[steps / f"{d}.csv" for d in NAMES]),
                            logs / "devices.log")
    apps = load_reel(reel).settings["applications"]
    m["applications"] = apps
    for a in apps:
        m[f"match {a}"] = timed(kinset("match", "--results", steps, "--application", a,
                                       "-o", steps / a), logs / f"match_{a}.log")
        print(f"  {devices}: match {a} {m[f'match {a}'][0]:.1f} s", file=sys.stderr)
        if len(m[f"match {a}"]) == 3:
            continue
        m[f"report {a}"] = run(kinset("report", "--results", steps, "--application", a,
                                      "-o", steps / a), logs / f"report_{a}.log")
        summary = json.loads((steps / a / "summary.json").read_text())
        m[f"sets {a}"] = (summary["sets"], summary["upper_bound"], summary["set_size"])
        m[f"by hand {a}"] = sort_and_pair(steps, a)
    # The workflow runs the applications whose matching finished in time.
    workflow_apps = [a for a in apps if len(m[f"match {a}"]) == 2]
    m["workflow applications"] = workflow_apps
    m["loop"] = curve_fit_baseline(reel, steps, sample)
    print(f"  {devices}: curve_fit loop done", file=sys.stderr)

    wf = work / "workflow"
    smk = [PY, "-m", "snakemake", "-s", ROOT / "Snakefile", "--profile",
           ROOT / "profiles" / "default", "--directory", wf, "--cores", "2", "--config",
           f"reel={reel}", f"results={wf / 'results'}",
           f"application={','.join(workflow_apps) or apps[0]}"]
    run(smk + ["--dry-run", "--quiet", "rules"], logs / "wf_plan.log")
    m["wf jobs"] = sum(jobs(logs / "wf_plan.log").values())
    m["wf full"] = run(smk, logs / "wf_full.log")
    print(f"  {devices}: workflow {m['wf full'][0]:.1f} s", file=sys.stderr)
    m["wf noop"] = run(smk, logs / "wf_noop.log")
    m["wf new file"] = add_batch(reel, devices)
    run(smk + ["--dry-run", "--quiet", "rules"], logs / "wf_plan_new.log")
    m["wf new jobs"] = jobs(logs / "wf_plan_new.log")
    m["wf new"] = run(smk, logs / "wf_new.log")

    # The same reel as one file per part: the plan must stay in bucket jobs.
    per_part = work / "reel-per-part"
    run(kinset("demo", "--out", per_part, "--devices", devices, "--seed", SEED,
               "--layout", "per-part"), logs / "demo_per_part.log")
    run([PY, "-m", "snakemake", "-s", ROOT / "Snakefile", "--directory", work / "wf-per-part",
         "--dry-run", "--quiet", "rules", "--config", f"reel={per_part}",
         f"results={work / 'wf-per-part' / 'results'}"], logs / "wf_plan_per_part.log")
    m["per-part files"] = sum(1 for f in per_part.rglob("*") if f.is_file())
    m["per-part jobs"] = jobs(logs / "wf_plan_per_part.log")
    return m


def _s(t: float) -> str:
    return f"{t:.2f} s" if t < 10 else f"{t:.1f} s" if t < 600 else f"{t / 60:.1f} min"


def _mark(ok: bool) -> str:
    return "met" if ok else "**not met**"


def table(results: list[dict]) -> str:
    sizes = [r["devices"] for r in results]
    head = "| step | " + " | ".join(f"{n:,} parts" for n in sizes) + " | target | " \
        + " | ".join(f"{n:,}" for n in sizes) + " |"
    lines = [head, "|" + "---|" * (2 + 2 * len(sizes))]

    def row(name, cells, target="", marks=None):
        marks = marks or [""] * len(sizes)
        lines.append(f"| {name} | " + " | ".join(cells) + f" | {target} | "
                     + " | ".join(marks) + " |")

    def wall_mem(key):
        return [("—" if key not in r else
                 f"{'> ' if len(r[key]) == 3 else ''}{_s(r[key][0])}, {r[key][1]:.0f} MB"
                 + (" (stopped at the time limit)" if len(r[key]) == 3 else ""))
                for r in results]

    def value(r, key, fmt):
        return fmt(r[key]) if key in r else "—"

    row("reel: files (fwd/leak/C-V/recovery/Touchstone), size",
        [f"{r['files']['forward']}/{r['files']['leakage']}/{r['files']['capacitance']}/"
         f"{r['files']['recovery']}/{r['files']['touchstone']}, {r['size_MB']:.0f} MB"
         for r in results])
    row("`kinset demo` (writing the reel)", wall_mem("demo"))
    for d in NAMES:
        row(f"`kinset extract {d}` (raw files)", wall_mem(f"extract {d}"))
        row("&nbsp;&nbsp;fixed cost (the same step on 20 parts)",
            [_s(r["fixed"][d]) for r in results])
        row("&nbsp;&nbsp;`pandas.read_csv` of its files", [_s(r[f"raw {d}"]) for r in results])
        ratio = [(r[f"extract {d}"][0] - r["fixed"][d]) / r[f"raw {d}"] for r in results]
        row("&nbsp;&nbsp;ratio (step − fixed) / read_csv", [f"{x:.1f}×" for x in ratio],
            "≤ 2×", [_mark(x <= 2) for x in ratio])
    row("`kinset devices`", wall_mem("devices step"))
    for a in results[0]["applications"]:
        row(f"`kinset match` {a}", wall_mem(f"match {a}"))
        # issue 18: one application's report at 10,000 parts in 5 s or less
        row(f"`kinset report` {a}", wall_mem(f"report {a}"), "≤ 5 s at 10k",
            [_mark(r[f"report {a}"][0] <= 5) if r["devices"] >= 10000 and f"report {a}" in r
             else "" for r in results])
    loops = [r["loop"] for r in results]
    row("per-part `curve_fit` loop, forward (read + fit)",
        [f"{_s(x['scaled'])} (fit of {x['sample']} parts timed, scaled)" for x in loops])
    speed = [x["scaled"] / (r["extract forward"][0] - r["fixed"]["forward"])
             for x, r in zip(loops, results)]
    row("&nbsp;&nbsp;speed-up: loop / (kinset extract forward − fixed)",
        [f"{x:.0f}×" for x in speed], "≥ 20×", [_mark(x >= 20) for x in speed])
    whole = [x["scaled"] / r["extract forward"][0] for x, r in zip(loops, results)]
    row("&nbsp;&nbsp;speed-up: loop / whole step (start-up included)",
        [f"{x:.0f}×" for x in whole])
    for q in ("IS", "N", "RS"):
        e = [(x["errors"]["kinset"][q], x["errors"]["loop"][q]) for x in loops]
        row(f"&nbsp;&nbsp;median error of {q} vs truth.csv: kinset / loop",
            [f"{a:.1e} / {b:.1e}" for a, b in e], "kinset ≤ loop", [_mark(a <= b) for a, b in e])
    for a in results[0]["applications"]:
        cells = [value(r, f"sets {a}", lambda x, r=r: f"{r[f'by hand {a}'][0]} vs {x[0]} "
                       f"(bound {x[1]})") for r in results]
        row(f"sort-and-pair vs kinset, {a}: sets", cells, "kinset more")
    row("snakemake jobs planned (full run)", [str(r["wf jobs"]) for r in results])
    row("same reel, one file per part: files, jobs planned (dry run)",
        [f"{r['per-part files']:,} files: {sum(r['per-part jobs'].values())} jobs "
         f"({r['per-part jobs'].get('parse', 0)} parse)" for r in results],
        "hundreds at most", [_mark(sum(r["per-part jobs"].values()) < 1000) for r in results])
    full = [r["wf full"] for r in results]
    row("applications in the workflow runs", [", ".join(r["workflow applications"])
                                               for r in results], "both")
    row("`snakemake --cores 2` full run", wall_mem("wf full"), "< 5 min at 10k",
        [_mark(w < 300) if r["devices"] >= 10000 else ("met" if w < 300 else "(10k target)")
         for (w, _), r in zip(full, results)])
    noop = [r["wf noop"][0] for r in results]
    row("no-op rerun", [_s(x) for x in noop], "< 10 s", [_mark(x < 10) for x in noop])
    expected = {"parse", "extract_forward", "devices", "match", "report", "all"}
    new_ok = [set(r["wf new jobs"]) == expected and r["wf new jobs"]["parse"] == 1
              for r in results]
    row("rerun after one new forward batch file",
        [f"{_s(r['wf new'][0])}: " + ", ".join(f"{k} {v}" for k, v in r["wf new jobs"].items())
         for r in results],
        "one parse, then forward, devices, match, report", [_mark(x) for x in new_ok])
    steps = ("extract ", "devices step", "match ", "report ", "wf full", "wf noop", "wf new")
    peak = [max(v[1] for k, v in r.items() if k.startswith(steps) and isinstance(v, tuple))
            for r in results]
    stopped = [any(isinstance(v, tuple) and v[-1] == "stopped" for v in r.values())
               for r in results]
    row("peak memory, any step or the whole workflow",
        [f"{x:.0f} MB" + (" (a stopped step included)" if st else "")
         for x, st in zip(peak, stopped)], "< 2 GB", [_mark(x < 2048) for x in peak])
    return "\n".join(lines)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--devices", type=int, nargs="+", default=[1000, 10000])
    ap.add_argument("--work", type=Path, help="folder for the reels and results (default: "
                    "a temporary folder, removed afterwards)")
    ap.add_argument("--loop-sample", type=int, default=250,
                    help="parts the curve_fit loop is timed on (scaled to the reel)")
    ap.add_argument("--timeout", type=float, default=900,
                    help="seconds a matching step may take before it is stopped and marked "
                    "so (its application then stays out of the workflow runs); default 900")
    args = ap.parse_args()
    global TIMEOUT
    TIMEOUT = args.timeout
    with tempfile.TemporaryDirectory(prefix="kinset-bench-") as tmp:
        base = args.work or Path(tmp)
        results = []
        for n in args.devices:
            print(f"reel of {n} parts in {base / str(n)}", file=sys.stderr)
            results.append(bench(n, base / str(n), args.loop_sample))
            (base / str(n) / "measurements.json").write_text(json.dumps(results[-1], indent=1))
            print(table(results[-1:]), file=sys.stderr)
        print(table(results))
        print()
        print(f"2 cores; times are wall clock of one run; {sys.version.split()[0]}")


if __name__ == "__main__":
    main()
