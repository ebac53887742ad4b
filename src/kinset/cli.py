"""The ``kinset`` command line. The workflow rules call these same commands."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from kinset import __version__
from kinset.errors import InputError
# Only the dataset records here (they import nothing heavy): each command imports what it
# needs, so that a job that only parses files does not pay for importing the fits.
from kinset.registry import DATASETS, dataset


def _cmd_parse(args) -> None:
    from kinset.io.parsed import save_parsed
    import pandas as pd
    frames = [dataset(args.dataset).read(f) for f in args.files]
    save_parsed(pd.concat(frames, ignore_index=True), args.output)


def _cmd_fit_touchstone(args) -> None:
    """index.csv -> one capacitance point per Touchstone file (a series R–L–C fit each)."""
    from kinset.extract import touchstone_points
    from kinset.io.parsed import save_parsed
    save_parsed(touchstone_points(args.index, devices=args.devices), args.output)


def _cmd_extract(args) -> None:
    from kinset.io.output import write_csv
    from kinset.io.reel import load_reel
    reel = load_reel(args.reel)
    result = dataset(args.dataset).extract(reel, args.files)
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


def _cmd_check_reel(args) -> None:
    import json
    from kinset.io.output import write_text
    from kinset.io.reel import load_reel
    reel = load_reel(args.reel)
    text = json.dumps(reel.settings, indent=2, sort_keys=True) + "\n"
    if args.output:     # the validated settings, for matching and the report
        write_text(args.output, text)
    print(f"{reel.folder / 'reel.yaml'}: valid (reel id {reel.id})", file=sys.stderr)


def _cmd_match(args) -> None:
    from kinset.matching.run import run_match, summary_line
    result = run_match(args.results, args.application, args.output)
    print(summary_line(result.summary), file=sys.stderr)


def _cmd_partners(args) -> None:
    import pandas as pd
    from kinset.matching.profile import load_profile
    from kinset.matching.partners import partner_table
    from kinset.matching.run import read_results
    tables, devices, reel = read_results(args.results)
    application = args.application or next(iter(reel.get("applications", [])), None)
    if application is None:
        raise InputError("give --application (the reel lists no applications)")
    table = partner_table(tables, devices, load_profile(application), args.device,
                          reel.get("accuracy"), args.top)
    with pd.option_context("display.width", 200, "display.max_columns", 50):
        print(f"best partners for {args.device} under {application}:")
        print(table.to_string(index=False, float_format=lambda v: f"{v:.4g}"))


def _cmd_report(args) -> None:
    from kinset.report import write_report
    r = write_report(args.results, args.application, args.output, args.match)
    print(f"report: {r.sets} sets, {r.placed} parts placed, {r.unmatched} not placed; "
          f"{r.folder / 'report.html'} ({r.page_bytes} bytes)", file=sys.stderr)


def _cmd_demo(args) -> None:
    from kinset.demo import write_demo
    try:
        out = write_demo(Path(args.out), devices=args.devices, seed=args.seed,
                         layout=args.layout)
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
    for record in DATASETS:
        k = kinds.add_parser(record.name, help=f"extract the {record.label} dataset")
        k.add_argument("--reel", required=True, help="reel folder (with reel.yaml)")
        k.add_argument("-o", "--output", required=True, help="output table (CSV); side "
                       "tables such as the forward readings go beside it as <stem>_<name>.csv")
        k.add_argument("files", nargs="*", help="input files (default: every CSV in the "
                       "reel's dataset folder); parsed .npz files from 'kinset parse' too")
        k.set_defaults(func=_cmd_extract)

    r = sub.add_parser("parse", help="read input files into SI arrays (a workflow step)")
    r.add_argument("dataset", choices=[d.name for d in DATASETS])
    r.add_argument("-o", "--output", required=True, help="output .npz")
    r.add_argument("files", nargs="+")
    r.set_defaults(func=_cmd_parse)

    t = sub.add_parser("fit-touchstone", help="fit a series R–L–C element to each Touchstone "
                       "file an index lists: one capacitance point per file (a workflow step)")
    t.add_argument("-o", "--output", required=True, help="output .npz")
    t.add_argument("index", help="capacitance/index.csv of the reel")
    t.add_argument("--devices", nargs="+", help="only these devices' rows")
    t.set_defaults(func=_cmd_fit_touchstone)

    d = sub.add_parser("devices", help="merge dataset tables into devices.csv")
    d.add_argument("-o", "--output", required=True)
    d.add_argument("tables", nargs="+", help="dataset tables, named <dataset>.csv")
    d.set_defaults(func=_cmd_devices)

    v = sub.add_parser("check-reel", help="validate reel.yaml; optionally write its settings "
                       "with every default filled in (JSON)")
    v.add_argument("--reel", required=True)
    v.add_argument("-o", "--output", help="where to write the settings (JSON)")
    v.set_defaults(func=_cmd_check_reel)

    a = sub.add_parser("match", help="form the matched sets of one application")
    a.add_argument("--results", required=True, help="folder holding the extraction tables")
    a.add_argument("--application", required=True, help="shipped profile name or YAML path")
    a.add_argument("-o", "--output", required=True, help="output folder (sets.csv, unmatched.csv)")
    a.set_defaults(func=_cmd_match)

    b = sub.add_parser("partners", help="best partners for one part (a replacement)")
    b.add_argument("--results", required=True)
    b.add_argument("--device", required=True)
    b.add_argument("--application", help="profile (default: the reel's first application)")
    b.add_argument("--top", type=int, default=10)
    b.set_defaults(func=_cmd_partners)

    o = sub.add_parser("report", help="one application's report.html, models.lib, pick_list.csv")
    o.add_argument("--results", required=True, help="folder holding the extraction tables")
    o.add_argument("--application", required=True, help="shipped profile name or YAML path")
    o.add_argument("-o", "--output", required=True, help="output folder")
    o.add_argument("--match", help="folder of that application's sets.csv, unmatched.csv, "
                   "summary.json (default: the output folder)")
    o.set_defaults(func=_cmd_report)

    m = sub.add_parser("demo", help="write a synthetic reel folder")
    m.add_argument("--out", required=True)
    m.add_argument("--devices", type=int, default=240)
    m.add_argument("--seed", type=int, default=412)
    m.add_argument("--layout", choices=["workshop", "batches", "per-part"],
                   help="workshop: a small reel of mixed instruments and formats; batches: "
                   "every part on every station at production point counts, in batch files "
                   "of 250 part numbers; per-part: the same, one file per part and station "
                   "(default: workshop up to 240 devices, batches above)")
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
