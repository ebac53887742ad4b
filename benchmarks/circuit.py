"""The circuit step's cost: 1,000 sets of each circuit kind simulated with ngspice.

    python benchmarks/circuit.py [--sets 1000] [--threads 2] [--chunk 50] [--seed 5]

For every kind of ``kinset.circuit.kinds.KINDS`` whose module exists (others are
skipped and said so), ``--sets`` sets of invented diode cards (the RF demo reel's
median part, each parameter spread by a few per cent, seeded) are simulated, each beside
its reference (its first card repeated), as ``kinset circuit`` does it: chunks of
``--chunk`` circuits per deck, ``--threads`` decks at once. The target (issue 17) is
two minutes per kind on 2 cores. Nothing here asserts: the figures are for the README
and the issue notes. Prints one markdown row per kind.
"""

from __future__ import annotations

import argparse
import math
import time

import numpy as np

from kinset.circuit.kinds import KINDS, Circuit, kind_module
from kinset.circuit.ngspice import find_ngspice
from kinset.circuit.run import CHUNK, simulate

# The RF demo reel's median part (data_demo_rf/truth.csv), rounded.
BASE = {"IS": 3.0e-9, "N": 1.05, "RS": 6.0, "CJO": 0.8e-12, "VJ": 0.5, "M": 0.48}


def cards_and_circuits(positions: int, sets: int, seed: int):
    rng = np.random.default_rng(seed)
    cards, circuits = {}, []
    for s in range(sets):
        names = []
        for j in range(positions):
            name = f"b{s}p{j}"
            p = {k: v * math.exp(0.02 * rng.standard_normal()) for k, v in BASE.items()}
            cards[name] = (f".model {name} D(" + " ".join(f"{k}={v:.10g}" for k, v in p.items())
                           + " TNOM=25)")
            names.append(name)
        circuits += [Circuit(f"s{s}", tuple(names)), Circuit(f"r{s}", (names[0],) * positions)]
    return cards, circuits


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sets", type=int, default=1000)
    ap.add_argument("--threads", type=int, default=2)
    ap.add_argument("--chunk", type=int, default=CHUNK)
    ap.add_argument("--seed", type=int, default=5)
    args = ap.parse_args()
    if find_ngspice() is None:
        raise SystemExit("ngspice is not on PATH (Debian/Ubuntu: apt-get install ngspice)")
    print("| kind | sets | circuits (with references) | chunk | threads | wall time [s] | "
          "failed circuits |")
    print("|---|---|---|---|---|---|---|")
    for kind in KINDS:
        try:
            module = kind_module(kind)
        except ImportError:
            print(f"| {kind} | – | – | – | – | not in this version | – |")
            continue
        params = {k: v[0] for k, v in module.PARAMETERS.items()}
        cards, circuits = cards_and_circuits(module.POSITIONS, args.sets, args.seed)
        t0 = time.perf_counter()
        got = simulate(module, circuits, params, {k.lower(): v for k, v in cards.items()},
                       25.0, args.threads, args.chunk)
        wall = time.perf_counter() - t0
        failed = sum(not isinstance(v, dict) for v in got.values())
        print(f"| {kind} | {args.sets} | {len(circuits)} | {args.chunk} | {args.threads} | "
              f"{wall:.1f} | {failed} |", flush=True)


if __name__ == "__main__":
    main()
