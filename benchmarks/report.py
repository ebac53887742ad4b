"""The report on a big reel: page size and time to write it.

    python benchmarks/report.py [--devices 10000] [--application audio_clipper_pair] [--keep DIR]

Writes a demo reel (``kinset demo``), extracts its four datasets, forms the sets of one
application (``kinset.matching.run.run_match`` when the set-forming core is installed,
else the stand-in grouping of ``tests/report_tools.py``), then times ``kinset report``
twice and prints the size of each output, the time, and whether the second run gave
the same bytes. Issue 6 asks for a 10,000-part page under 10 MB written in under a
minute. With ``--keep DIR`` the reel and its results stay in DIR and are reused.
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))

from kinset.report import write_report  # noqa: E402
from kinset.report.build import OUTPUTS  # noqa: E402


def _match(results: Path, application: str, out: Path) -> str:
    try:
        from kinset.matching.run import run_match
    except ImportError:
        from report_tools import stand_in_match
        stand_in_match(results, application, out)
        return "stand-in greedy grouping (the set-forming core is not installed)"
    run_match(results, application, out)
    return "kinset.matching.run.run_match"


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--devices", type=int, default=10000)
    ap.add_argument("--application", default="audio_clipper_pair")
    ap.add_argument("--keep", help="folder to keep (and reuse) the reel and its results in")
    args = ap.parse_args()
    base = Path(args.keep) if args.keep else Path(tempfile.mkdtemp(prefix="kinset-bench-"))
    results = base / "results"
    t0 = time.perf_counter()
    if not (results / "devices.csv").is_file():
        from report_tools import demo_results
        base.mkdir(parents=True, exist_ok=True)
        demo_results(base, devices=args.devices, markup_id=False)
        print(f"reel of {args.devices} parts written and extracted in "
              f"{time.perf_counter() - t0:.1f} s")
    name = Path(args.application).stem
    out = results / name
    t0 = time.perf_counter()
    how = _match(results, args.application, out)
    print(f"sets formed in {time.perf_counter() - t0:.1f} s by {how}")
    runs = []
    for _ in range(2):
        t0 = time.perf_counter()
        r = write_report(results, args.application, out)
        runs.append((time.perf_counter() - t0, {f: (out / f).read_bytes() for f in OUTPUTS}))
    print(f"{r.sets} sets, {r.placed} parts placed, {r.unmatched} not placed")
    for f in OUTPUTS:
        print(f"  {f:14s} {len(runs[0][1][f]) / 1e6:8.3f} MB")
    print(f"report written in {runs[0][0]:.1f} s and {runs[1][0]:.1f} s; second run "
          f"byte-identical: {runs[0][1] == runs[1][1]}")
    print(f"files in {out}")


if __name__ == "__main__":
    main()
