"""Run a command and sample the summed resident memory of its whole process tree.

``os.wait4`` (what ``run.py`` and ``/usr/bin/time -v`` report) gives the largest single
process; a ``snakemake --cores 2`` run holds two jobs at once, and what must fit in the
machine is their sum. This samples ``/proc`` every ``--every`` seconds and records:

* the peak of the summed resident set of the command and every descendant, with the
  command lines that made it up at that moment;
* the wall time, the exit code, and a line per second-scale change in the job mix
  (``--trace``), so a long run's memory can be read against its log.

Usage::

    python benchmarks/tree_memory.py -o mem.json [--every 0.5] -- snakemake --cores 2 ...

Linux only (``/proc``). Sampling misses peaks shorter than the interval; the per-process
``wait4`` peak stays the bound for those.
"""
from __future__ import annotations

import argparse
import json
import os
import resource
import subprocess
import sys
import time
from pathlib import Path

PAGE = os.sysconf("SC_PAGE_SIZE")


def children(pid: int) -> list[int]:
    out = []
    try:
        for task in os.listdir(f"/proc/{pid}/task"):
            with open(f"/proc/{pid}/task/{task}/children") as fh:
                out.extend(int(c) for c in fh.read().split())
    except (FileNotFoundError, ProcessLookupError, PermissionError):
        pass
    return out


def tree(pid: int) -> list[int]:
    seen, todo = [], [pid]
    while todo:
        p = todo.pop()
        seen.append(p)
        todo.extend(children(p))
    return seen


def rss_bytes(pid: int) -> int:
    try:
        with open(f"/proc/{pid}/statm") as fh:
            return int(fh.read().split()[1]) * PAGE
    except (FileNotFoundError, ProcessLookupError, IndexError):
        return 0


def cmdline(pid: int) -> str:
    try:
        with open(f"/proc/{pid}/cmdline", "rb") as fh:
            return fh.read().replace(b"\0", b" ").decode(errors="replace").strip()[:300]
    except (FileNotFoundError, ProcessLookupError):
        return ""


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("-o", "--out", type=Path, required=True, help="JSON written at the end")
    ap.add_argument("--every", type=float, default=0.5, help="sampling interval [s]")
    ap.add_argument("--trace", type=Path, help="append one line per sample above 100 MB")
    ap.add_argument("cmd", nargs=argparse.REMAINDER, help="-- then the command")
    a = ap.parse_args()
    cmd = a.cmd[1:] if a.cmd[:1] == ["--"] else a.cmd
    if not cmd:
        ap.error("no command after --")
    t0 = time.monotonic()
    proc = subprocess.Popen(cmd)
    peak, peak_at, peak_procs = 0, 0.0, []
    trace = a.trace.open("a") if a.trace else None
    while proc.poll() is None:
        pids = tree(proc.pid)
        sizes = {p: rss_bytes(p) for p in pids}
        total = sum(sizes.values())
        now = time.monotonic() - t0
        if total > peak:
            peak, peak_at = total, now
            peak_procs = [{"MB": round(sizes[p] / 1e6, 1), "cmd": cmdline(p)}
                          for p in pids if sizes[p] > 20e6]
        if trace and total > 100e6:
            print(f"{now:9.1f} {total / 1e6:9.1f} MB  "
                  + " | ".join(cmdline(p)[-90:] for p in pids if sizes[p] > 100e6),
                  file=trace, flush=True)
        time.sleep(a.every)
    wall = time.monotonic() - t0
    usage = resource.getrusage(resource.RUSAGE_CHILDREN)   # poll() reaped the command
    result = {"cmd": cmd, "returncode": proc.returncode, "wall_s": round(wall, 1),
              "cpu_s": round(usage.ru_utime + usage.ru_stime, 1),
              "peak_tree_MB": round(peak / 1e6, 1), "peak_at_s": round(peak_at, 1),
              "largest_process_MB": round(usage.ru_maxrss * 1024 / 1e6, 1),
              "peak_processes": peak_procs, "every_s": a.every}
    a.out.write_text(json.dumps(result, indent=1) + "\n")
    print(f"tree_memory: {wall:.1f} s, peak {peak / 1e6:.0f} MB summed over the tree "
          f"at {peak_at:.0f} s, exit {proc.returncode}", file=sys.stderr)
    sys.exit(proc.returncode)


if __name__ == "__main__":
    main()
