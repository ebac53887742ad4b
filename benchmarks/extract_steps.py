"""Extraction steps, one source tree against another: wall, CPU, peak memory, fixed cost.

    python benchmarks/extract_steps.py --reel REEL --tiny TINY [--before SRC] [--after SRC]
        [--repeat 3] [--reference RESULTS] [--work DIR]

Each ``kinset extract <dataset>`` runs as its own process (``python -m kinset ...``, the
command the workflow rules call) with ``PYTHONPATH`` set to a source tree's ``src``
folder: ``--after`` (default: this clone) and, if given, ``--before`` (say, an export of
the commit before a change: ``git archive <commit> src | tar -x -C DIR``). The runs of the
two trees alternate, so both see the same load on a shared machine; each figure is the
least of ``--repeat`` runs. CPU time is the child's user + system time (``os.wait4``),
which a busy machine inflates less than wall time; peak memory is its maximum resident set.

* every step on the whole reel ``--reel`` (its tables written under ``--work``);
* the fixed cost: the same step on ``--tiny``, a reel of 20 parts (``kinset demo
  --devices 20 --layout batches``): interpreter, imports, reel.yaml;
* with ``--reference`` (a results folder of the same reel, e.g. from the workflow), whether
  each table the step writes is byte-identical to the reference's.

It prints a markdown table. Nothing here asserts: the figures are for the issue notes.
"""

from __future__ import annotations

import argparse
import filecmp
import os
import subprocess
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
STEPS = ("forward", "leakage", "capacitance", "recovery")
# The tables each step writes beside its -o path (registry side tables)
WRITES = {"forward": ["forward.csv", "forward_readings.csv"], "leakage": ["leakage.csv"],
          "capacitance": ["capacitance.csv", "capacitance_points.csv"],
          "recovery": ["recovery.csv"]}


def run(src: Path, step: str, reel: Path, out: Path) -> tuple[float, float, float]:
    """One ``kinset extract`` run: wall [s], CPU (user + system) [s], peak memory [MB]."""
    out.mkdir(parents=True, exist_ok=True)
    env = dict(os.environ, PYTHONPATH=str(src))
    cmd = [sys.executable, "-m", "kinset", "extract", step, "--reel", str(reel),
           "-o", str(out / f"{step}.csv")]
    t0 = time.perf_counter()
    proc = subprocess.Popen(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, env=env)
    _, status, usage = os.wait4(proc.pid, 0)
    wall = time.perf_counter() - t0
    if os.waitstatus_to_exitcode(status):
        raise SystemExit(f"{' '.join(cmd)} failed: {proc.stderr.read().decode()[-2000:]}")
    proc.stderr.close()
    return wall, usage.ru_utime + usage.ru_stime, usage.ru_maxrss / 1024


def best(src: Path, step: str, reel: Path, out: Path, repeat: int) -> tuple[float, ...]:
    runs = [run(src, step, reel, out) for _ in range(repeat)]
    return tuple(min(r[i] for r in runs) for i in range(3))


def main(argv=None) -> None:
    p = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    p.add_argument("--reel", type=Path, required=True)
    p.add_argument("--tiny", type=Path, required=True, help="a 20-part reel (fixed cost)")
    p.add_argument("--before", type=Path, help="source tree to compare with (its src/)")
    p.add_argument("--after", type=Path, default=ROOT)
    p.add_argument("--repeat", type=int, default=3)
    p.add_argument("--reference", type=Path, help="results folder to compare bytes with")
    p.add_argument("--work", type=Path, default=Path("/tmp/kinset-extract-bench"))
    a = p.parse_args(argv)
    trees = {"after": a.after / "src"}
    if a.before:
        trees = {"before": a.before / "src", **trees}
    rows = []
    for step in STEPS:
        got = {}
        for name, src in trees.items():      # alternating, so both see the same load
            got[name] = best(src, step, a.reel, a.work / name, a.repeat) + \
                best(src, step, a.tiny, a.work / f"{name}-tiny", max(a.repeat, 3))[:2]
        same = ""
        if a.reference:
            same = "yes" if all(filecmp.cmp(a.work / "after" / f, a.reference / f, shallow=False)
                                for f in WRITES[step]) else "**no**"
        rows.append((step, got, same))
        print(f"  {step} done", file=sys.stderr)
    names = list(trees)
    head = ["step"] + [f"{n}: {k}" for n in names for k in
                       ("wall", "CPU", "peak", "fixed wall", "fixed CPU")] + ["same bytes"]
    print("| " + " | ".join(head) + " |")
    print("|" + "---|" * len(head))
    for step, got, same in rows:
        cells = [f"{got[n][0]:.2f} s | {got[n][1]:.2f} s | {got[n][2]:.0f} MB | "
                 f"{got[n][3]:.2f} s | {got[n][4]:.2f} s" for n in names]
        print(f"| {step} | " + " | ".join(cells) + f" | {same or '–'} |")


if __name__ == "__main__":
    main()
