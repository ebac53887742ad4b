"""The ``kinset`` command line. The workflow rules call these same commands."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

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
    n = len(args.files)
    _progress(f"{args.dataset}: reading and fitting " + (
        f"{n} file{'' if n == 1 else 's'}" if n else f"the files in {reel.folder / args.dataset}"))
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
    from kinset.io.reel import OWNER_NAME, check_owner, owner_text
    reel = load_reel(args.reel)
    text = json.dumps(reel.settings, indent=2, sort_keys=True) + "\n"
    if args.output:     # the validated settings, for matching and the report
        results = Path(args.output).parent
        check_owner(results, reel.folder, reel.id)
        write_text(args.output, text)
        write_text(results / OWNER_NAME, owner_text(results, reel.folder))
    print(f"{reel.folder / 'reel.yaml'}: valid (reel id {reel.id})", file=sys.stderr)
    from kinset.matching.profile import load_profile
    for app in reel.applications:
        _print_warnings(load_profile(app.profile, reel.folder))


def _print_warnings(profile) -> None:
    """A profile's warnings (tolerances outside their plausible range) on stderr."""
    for warning in profile.warnings:
        print(f"{profile.path}: warning: {warning}", file=sys.stderr)


def _progress(text: str) -> None:
    """A long command's progress line, on stderr at once (stdout stays the command's output)."""
    print(text, file=sys.stderr, flush=True)


def _cmd_match(args) -> None:
    from kinset.matching.run import run_match
    from kinset.matching.summary import summary_line
    from kinset.matching.scan import scan_line
    names = [a.strip() for a in args.application.split(",") if a.strip()]
    waive = tuple(q.strip() for q in (args.waive_screens or "").split(",") if q.strip())
    after = list(args.after or [])
    for name in names:      # in the order given: each after the ones before it
        out = Path(args.output) if len(names) == 1 else Path(args.output) / Path(name).stem
        result = run_match(args.results, name, out, args.ledger, after, args.sets_wanted,
                           waive, _progress, scan=not args.no_scan)
        after.append(out)
        _print_warnings(result.profile)
        print(summary_line(result.summary), file=sys.stderr)
        if not args.no_scan:
            print(scan_line(result.summary), file=sys.stderr)


def _cmd_keep(args) -> None:
    from kinset.matching.upkeep import keep, parse_sets
    book, newly = keep(args.results, args.application, parse_sets(args.sets), args.note or "",
                       args.reel)
    print(f"{book.path}: kept {args.application} set(s) {', '.join(map(str, newly)) or 'none'}"
          + ("" if newly else " (already kept)"), file=sys.stderr)


def _cmd_retire(args) -> None:
    from kinset.matching.upkeep import retire
    e = retire(args.reel, args.device, args.note or "")
    where = f" ({e.application} set {e.set} is now broken)" if e.set else ""
    print(f"{Path(args.reel) / 'ledger.csv'}: {e.device} retired{where}", file=sys.stderr)


def _cmd_replace(args) -> None:
    from kinset.matching.upkeep import apply_replacement, replacement
    table, remaining, book = replacement(args.results, args.application, args.set, args.device,
                                         args.top, args.reel)
    if not len(table):
        print(f"no free part makes {args.application} set {args.set} valid with "
              f"{', '.join(remaining)}", file=sys.stderr)
    else:
        _print_table(f"free parts that make {args.application} set {args.set} valid with "
                     f"{', '.join(remaining)}:", table)
    if args.apply:
        new = apply_replacement(book, args.application, args.set, args.device, remaining,
                                table, args.note or "")
        print(f"{book.path}: {args.device} retired, {new} kept in {args.application} set "
              f"{args.set}; rerun the workflow to see the set checked", file=sys.stderr)


def _print_table(title: str, table) -> None:
    import pandas as pd
    with pd.option_context("display.width", 200, "display.max_columns", 50):
        print(title)
        print(table.to_string(index=False, float_format=lambda v: f"{v:.4g}"))


def _cmd_partners(args) -> None:
    from kinset.matching.partners import partner_table, partner_view
    from kinset.matching.profile import load_profile
    from kinset.matching.run import read_results
    from kinset.matching.upkeep import as_matched, unplaced_parts
    tables, devices, reel = read_results(args.results)
    first = next(iter(reel.get("applications", [])), None)
    application = args.application or (first["profile"] if isinstance(first, dict) else first)
    if application is None:
        raise InputError("give --application (the reel lists no applications)")
    free = None if args.all else unplaced_parts(args.results, devices) + [args.device]
    profile = as_matched(args.results, application, load_profile(application))
    table = partner_table(tables, devices, profile, args.device,
                          reel.get("accuracy"), args.top, available=free)
    print(f"best {'' if args.all else 'free '}partners for {args.device} under {profile.name}:")
    print(partner_view(table, profile, args.device))
    if not len(table) and not args.all:
        print("(only parts in no set and not in the ledger are offered; --all lists every "
              "part)", file=sys.stderr)


def _cmd_report(args) -> None:
    from kinset.report import write_report
    r = write_report(args.results, args.application, args.output, args.match,
                     progress=_progress)
    print(f"report: {r.sets} sets, {r.placed} parts placed, {r.unmatched} not placed; "
          f"{r.folder / 'report.html'} ({r.page_bytes} bytes)", file=sys.stderr)


def _cmd_circuit(args) -> None:
    from kinset.circuit.run import run_circuit
    from kinset.circuit.summary import summary_line
    result = run_circuit(args.results, args.application, args.output, args.threads,
                         args.models, progress=_progress)
    print(summary_line(result), file=sys.stderr)      # with the note (no ngspice, no circuit)


def _circuit_parser(sub) -> None:
    """kinset circuit: every set simulated in its application's reference circuit."""
    c = sub.add_parser("circuit", help="simulate every set in its application's reference "
                       "circuit (ngspice); writes circuit.csv")
    c.add_argument("--results", required=True, help="folder holding the extraction tables")
    c.add_argument("--application", required=True, help="shipped profile name or YAML path")
    c.add_argument("-o", "--output", help="folder of the application's sets.csv "
                   "(default: RESULTS/<application>); circuit.csv is written there")
    c.add_argument("--threads", type=int, default=1, help="simulator runs at once (default 1)")
    c.add_argument("--models", help="a models.lib to take the cards from (default: made from "
                   "the extraction tables as the report makes models.lib)")
    c.set_defaults(func=_cmd_circuit)


def _cmd_demo(args) -> None:
    from kinset.demo import write_demo
    try:
        out = write_demo(Path(args.out), devices=args.devices, seed=args.seed,
                         layout=args.layout, kind=args.kind)
    except (FileExistsError, ValueError) as exc:
        raise InputError(f"{exc}", args.out) from None
    print(f"demo reel written to {out}", file=sys.stderr)


def _demo_parser(sub) -> None:
    """kinset demo: a synthetic reel folder of either kind."""
    m = sub.add_parser("demo", help="write a synthetic reel folder")
    m.add_argument("--out", required=True)
    m.add_argument("--kind", choices=["switching", "rf"], default="switching",
                   help="switching: silicon switching diodes (data_demo/); rf: small-signal "
                   "RF Schottky diodes for mixer quads and detector pairs (data_demo_rf/)")
    m.add_argument("--devices", type=int, default=None,
                   help="default 240 (switching), 320 (rf)")
    m.add_argument("--seed", type=int, default=None, help="default 412 (switching), 917 (rf)")
    m.add_argument("--layout", choices=["workshop", "batches", "per-part"],
                   help="workshop: a small reel of mixed instruments and formats; batches: "
                   "every part on every station at production point counts, in batch files "
                   "of 250 part numbers; per-part: the same, one file per part and station "
                   "(default: workshop up to 240 devices, batches above)")
    m.set_defaults(func=_cmd_demo)


def _ledger_parsers(sub) -> None:
    """keep, retire, replace: the commands that write the reel's ledger.csv."""
    kp = sub.add_parser("keep", help="record sets as pulled or built (the reel's ledger.csv)")
    kp.add_argument("--results", required=True, help="the reel's results folder")
    kp.add_argument("--application", required=True)
    kp.add_argument("--sets", required=True, help="set numbers, e.g. 1-20,25")
    kp.add_argument("--note", help="recorded with each part")
    kp.add_argument("--reel", help="the reel folder (default: the one the results came from)")
    kp.set_defaults(func=_cmd_keep)

    rt = sub.add_parser("retire", help="record a part as gone (damaged, lost, used elsewhere)")
    rt.add_argument("--reel", required=True, help="the reel folder (its ledger.csv)")
    rt.add_argument("--device", required=True)
    rt.add_argument("--note", help="why, for the record")
    rt.set_defaults(func=_cmd_retire)

    rp = sub.add_parser("replace", help="free parts that make a set valid again without one "
                        "of its parts")
    rp.add_argument("--results", required=True, help="the reel's results folder")
    rp.add_argument("--application", required=True)
    rp.add_argument("--set", required=True, type=int)
    rp.add_argument("--device", required=True, help="the part to replace")
    rp.add_argument("--apply", action="store_true", help="retire it and keep the best "
                    "replacement in its place (one write of the ledger)")
    rp.add_argument("--top", type=int, default=10)
    rp.add_argument("--note", help="recorded with the change")
    rp.add_argument("--reel", help="the reel folder (default: the one the results came from)")
    rp.set_defaults(func=_cmd_replace)


class _Version(argparse.Action):
    """``--version``, looked up only when asked (see ``kinset.__getattr__``)."""

    def __init__(self, option_strings, dest=argparse.SUPPRESS, **kwargs):
        super().__init__(option_strings, dest, nargs=0, default=argparse.SUPPRESS,
                         help="show the program's version number and exit")

    def __call__(self, parser, namespace, values, option_string=None):
        from kinset import __version__
        print(f"kinset {__version__}")
        parser.exit()


def build_parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(prog="kinset", description="Characterise a reel of diodes "
                                "and form matched sets.")
    p.add_argument("--version", action=_Version)
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

    a = sub.add_parser("match", help="form the matched sets of one application, or of several "
                       "in priority order")
    a.add_argument("--results", required=True, help="folder holding the extraction tables")
    a.add_argument("--application", required=True, help="shipped profile name or YAML path; "
                   "several, comma-separated, are served in that order (a part goes to one)")
    a.add_argument("-o", "--output", required=True, help="output folder (sets.csv, "
                   "unmatched.csv, ...); for several applications, one folder each inside it")
    a.add_argument("--ledger", help="the reel's ledger.csv (default: the one of the reel "
                   "folder the results came from)")
    a.add_argument("--after", nargs="+", help="match folders of applications served before "
                   "this one: their parts are not offered")
    a.add_argument("--sets-wanted", type=int, help="stop at this many sets (kept ones count)")
    a.add_argument("--no-scan", action="store_true", help="skip tolerance_scan.csv")
    a.add_argument("--waive-screens", metavar="QUANTITY[,...]", help="screened quantities "
                   "(e.g. reverse_current) whose screens are skipped while the reel has no "
                   "data for them at all; every set formed so is marked unscreened "
                   "(as the profile key waive_screens)")
    a.set_defaults(func=_cmd_match)

    _ledger_parsers(sub)

    b = sub.add_parser("partners", help="best partners for one part (a replacement)")
    b.add_argument("--results", required=True)
    b.add_argument("--device", required=True)
    b.add_argument("--application", help="profile (default: the reel's first application)")
    b.add_argument("--top", type=int, default=10)
    b.add_argument("--all", action="store_true", help="also parts kept, retired or placed in "
                   "a set (default: only parts in no set and not in the ledger)")
    b.set_defaults(func=_cmd_partners)

    o = sub.add_parser("report", help="one application's report.html, models.lib, pick_list.csv")
    o.add_argument("--results", required=True, help="folder holding the extraction tables")
    o.add_argument("--application", required=True, help="shipped profile name or YAML path")
    o.add_argument("-o", "--output", required=True, help="output folder")
    o.add_argument("--match", help="folder of that application's sets.csv, unmatched.csv, "
                   "summary.json (default: the output folder)")
    o.set_defaults(func=_cmd_report)

    _circuit_parser(sub)
    _demo_parser(sub)
    return p


def main(argv: list[str] | None = None) -> int:
    args = build_parser().parse_args(argv)
    try:
        args.func(args)
    except InputError as exc:
        print(f"kinset: error: {exc}", file=sys.stderr)
        return 2
    return 0
