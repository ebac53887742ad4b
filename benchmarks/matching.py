"""Set forming on generated reels: time, sets formed, the proven bound, and sorting by hand.

    python benchmarks/matching.py [--parts 1000 10000] [--sizes 2 4] [--degree 15] [--seed 7]

Each reel has 7 correlated criteria from a latent factor model (3 factors, as process
variation drives forward voltage, capacitance and leakage together, plus independent
measurement scatter). Every criterion's tolerance is the same multiple of its spread,
chosen so that a part has on average ``--degree`` compatible neighbours (the spread of
degrees across the reel then runs from none at the fringes to ~10x in the core).

For each reel and set size it times ``form_sets(goal="most_sets")`` and prints the sets
formed, the proven upper bound, the share of the bound reached, whether the count is
proven optimal, and what sorting by the first criterion and grouping neighbours that
fit (by hand) forms. Targets: pairs exact at 10,000 parts within 60 s (within 0.1 % of
the proven bound where a component exceeds ``BLOSSOM_MAX_DEVICES``: a 100,000-part pool);
quads within 2 % of the bound within 300 s (on 2 cores). CPU seconds are printed beside
the wall time (the machine is shared).
"""

from __future__ import annotations

import argparse
import time

import numpy as np
from scipy.spatial import cKDTree

from kinset.matching.graph import compatibility
from kinset.matching.heuristics import sort_and_group
from kinset.matching.sets import BLOSSOM_MAX_DEVICES, form_sets

CRITERIA = 7


def generated_reel(parts: int, degree: float, seed: int) -> np.ndarray:
    """Criteria divided by their tolerances [1], shape (parts, 7)."""
    rng = np.random.default_rng(seed)
    loadings = rng.normal(0.0, 1.0, (CRITERIA, 3))
    x = rng.normal(0.0, 1.0, (parts, 3)) @ loadings.T + rng.normal(0.0, 0.3, (parts, CRITERIA))
    x /= x.std(axis=0)
    # Mean degree D at tolerance t: the number of directed neighbour pairs within t is
    # D * parts, so t is the (D * parts)-th smallest directed Chebyshev distance
    # (taken from each part's 8 D nearest, enough unless a part has more within t).
    k = int(min(parts - 1, 8 * degree)) + 1
    dist, _ = cKDTree(x).query(x, k=k, p=np.inf)
    d = np.sort(dist[:, 1:].ravel())
    return x / d[int(degree * parts)]


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--parts", type=int, nargs="+", default=[1000, 10000])
    ap.add_argument("--sizes", type=int, nargs="+", default=[2, 4])
    ap.add_argument("--degree", type=float, default=15.0)
    ap.add_argument("--seed", type=int, default=7)
    args = ap.parse_args()

    head = (f"{'parts':>6} {'set':>3} {'nbrs':>5} {'time s':>7} {'sets':>6} {'bound':>6} "
            f"{'of bound':>8} {'optimal':>7} {'by hand':>7}  target")
    rows = []
    for parts in args.parts:
        values = generated_reel(parts, args.degree, args.seed)
        nbrs = 2 * len(compatibility(values)) / parts
        for size in args.sizes:
            t0, c0 = time.perf_counter(), time.process_time()
            result = form_sets(values, np.ones(CRITERIA), size)
            took, cpu = time.perf_counter() - t0, time.process_time() - c0
            by_hand = len(sort_and_group(values, size, key=0))
            share = result.count / result.upper_bound if result.upper_bound else 1.0
            if size == 2 and parts > BLOSSOM_MAX_DEVICES:
                met = share >= 0.999
                target = "within 0.1 % of bound"
            elif size == 2:
                met = result.optimal and took <= 60.0
                target = "exact within 60 s"
            else:
                met = share >= 0.98 and took <= 300.0
                target = "within 2 % of bound within 300 s"
            rows.append((f"{parts:>6} {size:>3} {nbrs:>5.1f} {took:>7.1f} {result.count:>6} "
                         f"{result.upper_bound:>6} {100 * share:>7.2f}% {str(result.optimal):>7} "
                         f"{by_hand:>7}  {target}: {'met' if met else 'NOT met'} ({cpu:.1f} s CPU)",
                         result.method))
            print(rows[-1][0], flush=True)
    print()
    print(head)
    for line, _ in rows:
        print(line)
    print()
    for (line, method) in rows:
        print(f"{line.split()[0]:>6} parts, sets of {line.split()[1]}: {method}")


if __name__ == "__main__":
    main()
