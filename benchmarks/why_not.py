"""Why not, per part: the cost of naming each unplaced part's blocking criterion.

    python benchmarks/why_not.py [--parts 10000] [--degree 15 3 0.3] [--seed 7]

On the generated reels of ``benchmarks/matching.py`` (7 correlated criteria, tolerances
set for a mean of ``--degree`` compatible neighbours per part) it forms pairs with
``form_sets`` (one match's set forming), then times what ``kinset match`` adds for the
parts left: ``blocking`` for the parts with no partner (nearest part and shortfall) and
the most-often-blocking count for parts with too few partners for a quad. A low degree
is a profile far too tight for its reel: almost every part is left with no partner.
Nothing here asserts: the figures are for the README and the issue notes.
"""

from __future__ import annotations

import argparse
import time

import numpy as np
from scipy.spatial import cKDTree

from kinset.matching.partners import blocking
from kinset.matching.sets import form_sets
from matching import generated_reel


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--parts", type=int, nargs="+", default=[10000])
    ap.add_argument("--degree", type=float, nargs="+", default=[15.0, 3.0, 0.3])
    ap.add_argument("--seed", type=int, default=7)
    args = ap.parse_args()
    print("| parts | mean degree | pairs: sets | pairs: time [s] | no partner | "
          "why-not time [s] | none within all but one | too few for a quad | count time [s] |")
    print("|---|---|---|---|---|---|---|---|---|")
    for parts in args.parts:
        for degree in args.degree:
            z = generated_reel(parts, degree, args.seed)
            t0 = time.perf_counter()
            res = form_sets(z, np.ones(z.shape[1]), 2)
            t_match = time.perf_counter() - t0
            nb = cKDTree(z).query_ball_point(z, r=1.0 + 1e-12, p=np.inf, return_length=True) - 1
            alone, few = np.flatnonzero(nb == 0), np.flatnonzero((nb > 0) & (nb < 3))
            t0 = time.perf_counter()
            b = blocking(z, alone)
            t_why = time.perf_counter() - t0
            t0 = time.perf_counter()
            blocking(z, few, nearest=False)
            t_few = time.perf_counter() - t0
            print(f"| {parts} | {degree:g} | {len(res.sets)} | {t_match:.1f} | {len(alone)} | "
                  f"{t_why:.2f} | {int((b.misses > 1).sum())} | {len(few)} | {t_few:.2f} |",
                  flush=True)


if __name__ == "__main__":
    main()
