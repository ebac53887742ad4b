"""The tolerance scan against the match it explains, on one results folder.

    python benchmarks/scan.py --results results/<reel> [--application NAME ...]

For each application (default: the reel's own, from ``reel.json``) it builds the offered
parts once (:func:`kinset.matching.run.candidates`, no ledger, no earlier application),
then times, in this process, the set forming (:func:`kinset.matching.sets.form_sets`) and
the whole scan (:func:`kinset.matching.scan.tolerance_scan`, every criterion at every
scale) on the same parts, with the process's CPU time beside the wall time (a shared
machine inflates the wall time, not the CPU time). Issue 16 asked that the scan cost no
more than one match. It prints one markdown table; nothing here asserts.
"""

from __future__ import annotations

import argparse
import json
import time
from pathlib import Path

import numpy as np

from kinset.matching.profile import load_profile
from kinset.matching.run import candidates, read_results
from kinset.matching.scan import tolerance_scan
from kinset.matching.sets import form_sets


def timed(call):
    """(result, wall [s], CPU [s]) of ``call()``."""
    wall, cpu = time.perf_counter(), time.process_time()
    out = call()
    return out, time.perf_counter() - wall, time.process_time() - cpu


def one(tables, devices, accuracy, application: str) -> str:
    p = load_profile(application)
    pool = candidates(tables, devices, p, accuracy)
    weights = np.asarray([d.weight for d in p.dimensions])
    found, mw, mc = timed(lambda: form_sets(pool.z, weights, p.set_size, p.goal))
    scan, sw, sc = timed(lambda: tolerance_scan(pool, p, found.count))
    return (f"| {application} | {len(pool.devices):,} | {found.count:,} | {mw:.1f} s ({mc:.1f} s CPU) "
            f"| {sw:.1f} s ({sc:.1f} s CPU) | {scan.method} | {sc / max(mc, 1e-9):.2f} |")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--results", required=True, help="a results folder (results/<reel>)")
    ap.add_argument("--application", nargs="*", help="profiles (default: the reel's own)")
    args = ap.parse_args()
    tables, devices, reel = read_results(args.results)
    apps = args.application or json.loads(
        (Path(args.results) / "reel.json").read_text()).get("applications", [])
    print("| application | parts offered | sets | set forming | whole scan | scan method "
          "| scan / match (CPU) |")
    print("|---|---|---|---|---|---|---|")
    for app in apps:
        print(one(tables, devices, reel.get("accuracy"), app), flush=True)


if __name__ == "__main__":
    main()
