"""Keeping the ledger as sets are pulled and parts fail: keep, retire, replace.

These are what ``kinset keep``, ``kinset retire`` and ``kinset replace`` do. Each reads
the ledger, checks what it is asked against the newest match outputs, and writes the
ledger once, atomically; nothing else in it changes.
"""

from __future__ import annotations

import json
import re
from pathlib import Path

import pandas as pd

from kinset.errors import InputError
from kinset.io.ledger import LEDGER_NAME, Entry, Ledger, read_ledger, today, write_ledger
from kinset.io.output import read_result
from kinset.io.reel import results_owner

_RANGE = re.compile(r"^\s*(\d+)\s*(?:-\s*(\d+)\s*)?$")


def parse_sets(text: str) -> list[int]:
    """``"1-20,25"`` -> [1, 2, ..., 20, 25]."""
    numbers: list[int] = []
    for part in text.split(","):
        m = _RANGE.match(part)
        if not m or (m[2] and int(m[2]) < int(m[1])):
            raise InputError(f"'{part.strip()}' is not a set number or a range such as 1-20",
                             column="--sets")
        numbers += range(int(m[1]), int(m[2] or m[1]) + 1)
    return sorted(set(numbers))


def ledger_of(results: str | Path, reel: str | Path | None = None) -> Path:
    """The ledger of the reel folder the results came from (or of ``reel`` when given)."""
    folder = Path(reel) if reel is not None else results_owner(results)
    if folder is None:
        raise InputError("this results folder does not say which reel folder it came from "
                         "(run the workflow on the reel, or give --reel)", results)
    if not (folder / "reel.yaml").is_file():
        raise InputError("not a reel folder (no reel.yaml)", folder)
    return folder / LEDGER_NAME


def current_sets(results: str | Path, application: str) -> pd.DataFrame:
    """The application's sets.csv in a results folder."""
    path = Path(results) / application / "sets.csv"
    if not path.is_file():
        raise InputError(f"no sets of {application} here: run the workflow (or kinset match) "
                         "first", path)
    sets = read_result(path) if path.read_bytes().strip() else pd.DataFrame(
        columns=["set", "device", "state"])
    return sets.astype({"device": str})


def keep(results: str | Path, application: str, numbers: list[int], note: str = "",
         reel: str | Path | None = None) -> tuple[Ledger, list[int]]:
    """Write the named sets, as currently formed, into the ledger as kept.

    Sets already kept are left as they are. Returns the ledger and the sets newly kept.
    """
    sets = current_sets(results, application)
    book = read_ledger(ledger_of(results, reel))
    missing = sorted(set(numbers) - set(sets["set"].astype(int)))
    if missing:
        raise InputError(f"{application} has no set {', '.join(map(str, missing))} now "
                         f"(its sets: {_ranges(sorted(set(sets['set'].astype(int))))})",
                         Path(results) / application / "sets.csv")
    known = book.by_device()
    rows, newly = [], []
    for number in numbers:
        members = sets.loc[sets["set"].astype(int) == number, "device"].tolist()
        if all(d in known for d in members):
            continue
        clash = [d for d in members if d in known]
        if clash:
            e = known[clash[0]]
            raise InputError(f"{application} set {number}: part {e.device} is already in the "
                             f"ledger ({e.state}, {e.application or 'no application'} set "
                             f"{e.set}); rerun the workflow before keeping", book.path, e.line)
        rows += [Entry(d, application, number, "kept", today(), note) for d in members]
        newly.append(number)
    book = book.with_rows(rows)
    if rows:
        write_ledger(book)
    return book, newly


def retire(reel: str | Path, device: str, note: str = "") -> Entry:
    """Mark a part as gone: never offered again; a kept set it was in becomes broken."""
    book = read_ledger(Path(reel) / LEDGER_NAME)
    old = book.by_device().get(device)
    entry = Entry(device, old.application if old else "", old.set if old else None,
                  "retired", today(), note or (old.note if old else ""))
    write_ledger(book.with_rows([entry]))
    return entry


def _ranges(numbers: list[int]) -> str:
    out, start = [], None
    for i, n in enumerate(numbers):
        start = n if start is None else start
        if i + 1 == len(numbers) or numbers[i + 1] != n + 1:
            out.append(str(start) if start == n else f"{start}-{n}")
            start = None
    return ",".join(out) or "none"


def free_parts(results: str | Path, application: str, book: Ledger,
               devices: list[str]) -> list[str]:
    """Parts ``application`` may take: not kept, not retired, not placed by an application
    before it in the reel's list (parts in new sets of this or later applications are free:
    nobody has pulled them)."""
    order = [Path(item).stem for item in _reel_applications(results)]
    earlier = order[:order.index(application)] if application in order else []
    taken = set(book.by_device())
    for name in earlier:
        if (Path(results) / name / "sets.csv").is_file():
            taken |= set(current_sets(results, name)["device"])
    return [d for d in devices if d not in taken]


def replacement(results: str | Path, application: str, number: int, device: str,
                top: int = 10, reel: str | Path | None = None):
    """Free parts that make set ``number`` valid again with its members other than
    ``device``, best first: (table, remaining members, ledger)."""
    from kinset.matching.partners import partner_table
    from kinset.matching.profile import load_profile
    from kinset.matching.run import read_results
    book = read_ledger(ledger_of(results, reel))
    sets = current_sets(results, application)
    members = set(sets.loc[sets["set"].astype(int) == number, "device"])
    members |= {e.device for e in book.kept_sets(application).get(number, [])}
    if device not in members:
        raise InputError(f"{device} is not in {application} set {number} (its members: "
                         f"{', '.join(sorted(members)) or 'none'})", column="--device")
    retired = {e.device for e in book.entries if e.state == "retired"}
    remaining = sorted(members - {device} - retired)
    if not remaining:
        raise InputError(f"{application} set {number} has no member left to match against")
    tables, devices, settings = read_results(results)
    profile = as_matched(results, application, load_profile(_profile_of(results, application)))
    if len(remaining) >= profile.set_size:
        raise InputError(f"{application} set {number} is whole without {device} (its members: "
                         f"{', '.join(remaining)}); nothing to replace", column="--device")
    free = free_parts(results, application, book, devices)
    table = partner_table(tables, devices, profile, remaining, settings.get("accuracy"), top,
                          size=profile.set_size, available=free, within_only=True)
    return table, remaining, book


def apply_replacement(book: Ledger, application: str, number: int, device: str,
                      remaining: list[str], table: pd.DataFrame, note: str = "") -> str:
    """Retire ``device`` and keep the best valid replacement in set ``number`` (with the
    set's other members, which are kept too): one atomic write. Returns the new part."""
    valid = table[table["within"].astype(bool)]
    if not len(valid):
        raise InputError(f"no free part makes {application} set {number} valid again; the "
                         "ledger is unchanged")
    new = [d.strip() for d in str(valid.iloc[0]["device"]).split(",")]
    old = book.by_device().get(device)
    rows = [Entry(device, application, number, "retired", today(),
                  note or (old.note if old else ""))]
    rows += [Entry(d, application, number, "kept", today(), note) for d in remaining + new
             if d not in book.by_device() or book.by_device()[d].state != "kept"]
    write_ledger(book.with_rows(rows))
    return ", ".join(new)


def as_matched(results: str | Path, application: str, profile):
    """``profile`` with the screens its last match skipped (``summary.json``'s
    ``unscreened``: waived, and no data in the reel) waived again, so that partners and
    replacements are judged as the sets were formed; still only while the reel has no
    data for them (:func:`kinset.matching.run.candidates`)."""
    path = Path(results) / Path(application).stem / "summary.json"
    if not path.is_file():
        return profile
    try:
        skipped = json.loads(path.read_text(encoding="utf-8")).get("unscreened") or []
    except (json.JSONDecodeError, UnicodeDecodeError) as exc:
        raise InputError(f"not valid JSON: {exc}", path) from None
    quantities = [s.quantity for s in profile.screens if s.name in skipped]
    return profile.waiving(quantities, f"{path} unscreened") if quantities else profile


def _profile_of(results: str | Path, application: str) -> str:
    """The profile an application name stands for: the reel's own YAML of that name (from
    reel.yaml's list, relative to the reel folder), else the shipped profile."""
    owner = results_owner(results)
    for item in _reel_applications(results):
        if Path(item).stem == application and item.endswith((".yaml", ".yml")) and owner:
            return str(owner / item)
    return application


def unplaced_parts(results: str | Path, devices: list[str]) -> list[str]:
    """Parts in no application's sets of a results folder and not in the ledger."""
    placed = set()
    for sets in Path(results).glob("*/sets.csv"):
        if sets.read_bytes().strip():
            placed |= set(read_result(sets)["device"].astype(str))
    owner = results_owner(results)
    if owner is not None:
        placed |= set(read_ledger(owner / LEDGER_NAME).by_device())
    return [d for d in devices if d not in placed]


def _reel_applications(results: str | Path) -> list[str]:
    """The profiles of reel.yaml's applications, in priority order (from reel.json)."""
    settings = Path(results) / "reel.json"
    if not settings.is_file():
        return []
    entries = json.loads(settings.read_text(encoding="utf-8")).get("applications", [])
    return [e["profile"] if isinstance(e, dict) else e for e in entries]
