"""The ``kinset`` command line. The workflow rules call these same commands."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from kinset import __version__
from kinset.errors import InputError
from kinset.extract import EXTRACTORS


def _cmd_parse(args) -> None:
    from kinset.io.datasets import READERS
    from kinset.io.parsed import save_parsed
    import pandas as pd
    frames = [READERS[args.dataset](f) for f in args.files]
    save_parsed(pd.concat(frames, ignore_index=True), args.output)


def _cmd_extract(args) -> None:
    from kinset.io.output import write_csv
    from kinset.io.reel import load_reel
    reel = load_reel(args.reel)
    result = EXTRACTORS[args.dataset](reel, args.files)
    out = Path(args.output)
    write_csv(result.table, out)
    for name, extra in result.extras.items():
        write_csv(extra, out.with_name(f"{out.stem}_{name}.csv"))
    counts = result.table["status"].value_counts().to_dict()
    print(f"{args.dataset}: {len(result.table)} devices, "
          + ", ".join(f"{counts.get(s, 0)} {s}" for s in ("ok", "warning", "rejected")),
          file=sys.stderr)


def _cmd_devices(args) -> None:
    from kinset.io.output import read_result, write_csv
    from kinset.merge import merge_devices
    tables = {Path(f).stem: read_result(f) for f in args.tables}
    write_csv(merge_devices(tables), args.output)


def _cmd_demo(args) -> None:
    from kinset.demo import write_demo
    try:
        out = write_demo(Path(args.out), devices=args.devices, seed=args.seed)
    except (FileExistsError, ValueError) as exc:
        raise InputError(f"{exc}", args.out) from None
    print(f"demo reel written to {out}", file=sys.stderr)


def build_parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(prog="kinset", description="Characterise a reel of diodes "
                                "and form matched sets.")
    p.add_argument("--version", action="version", version=f"kinset {__version__}")
    sub = p.add_subparsers(dest="command", required=True)

    e = sub.add_parser("extract", help="fit one dataset's model to every device")
    kinds = e.add_subparsers(dest="dataset", required=True)
    for dataset in EXTRACTORS:
        k = kinds.add_parser(dataset, help=f"extract the {dataset} dataset")
        k.add_argument("--reel", required=True, help="reel folder (with reel.yaml)")
        k.add_argument("-o", "--output", required=True, help="output table (CSV); side "
                       "tables such as the forward readings go beside it as <stem>_<name>.csv")
        k.add_argument("files", nargs="*", help="input files (default: every CSV in the "
                       "reel's dataset folder); parsed .npz files from 'kinset parse' too")
        k.set_defaults(func=_cmd_extract)

    r = sub.add_parser("parse", help="read input files into SI arrays (a workflow step)")
    r.add_argument("dataset", choices=["forward", "leakage", "capacitance", "recovery"])
    r.add_argument("-o", "--output", required=True, help="output .npz")
    r.add_argument("files", nargs="+")
    r.set_defaults(func=_cmd_parse)

    d = sub.add_parser("devices", help="merge dataset tables into devices.csv")
    d.add_argument("-o", "--output", required=True)
    d.add_argument("tables", nargs="+", help="dataset tables, named <dataset>.csv")
    d.set_defaults(func=_cmd_devices)

    m = sub.add_parser("demo", help="write a synthetic reel folder")
    m.add_argument("--out", required=True)
    m.add_argument("--devices", type=int, default=240)
    m.add_argument("--seed", type=int, default=412)
    m.set_defaults(func=_cmd_demo)
    return p


def main(argv: list[str] | None = None) -> int:
    args = build_parser().parse_args(argv)
    try:
        args.func(args)
    except InputError as exc:
        print(f"kinset: error: {exc}", file=sys.stderr)
        return 2
    return 0
