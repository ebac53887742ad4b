"""The ledger: what was done with the reel's parts (``<reel>/ledger.csv``).

One row per part: ``device, application, set, state, date, note``. ``state`` is
``kept`` (its set has been pulled or built: kinset never changes it) or ``retired`` (the
part is gone and is never offered again). The file is an input like the measurements:
people may edit it by hand, so it is validated like every input, and every problem is
an error naming the file and the line. kinset writes it only when told to
(``kinset keep``, ``retire``, ``replace --apply``), atomically.
"""

from __future__ import annotations

import csv
import datetime as dt
import io
from dataclasses import dataclass
from pathlib import Path

from kinset.errors import InputError
from kinset.io.output import write_text

LEDGER_NAME = "ledger.csv"
COLUMNS = ("device", "application", "set", "state", "date", "note")
STATES = ("kept", "retired")


@dataclass(frozen=True)
class Entry:
    """One ledger row; ``line`` is its line in the file (0 for a row not yet written)."""

    device: str
    application: str
    set: int | None
    state: str
    date: str
    note: str = ""
    line: int = 0


@dataclass
class Ledger:
    """The rows of one reel's ledger, one per part."""

    path: Path
    entries: list[Entry]

    def by_device(self) -> dict[str, Entry]:
        return {e.device: e for e in self.entries}

    def kept_sets(self, application: str) -> dict[int, list[Entry]]:
        """The application's kept sets, by number: every row kept or retired in them."""
        out: dict[int, list[Entry]] = {}
        for e in self.entries:
            if e.application == application and e.set is not None:
                out.setdefault(e.set, []).append(e)
        return dict(sorted(out.items()))

    def highest_set(self, application: str) -> int:
        """The highest set number the ledger holds for ``application`` (0 if none)."""
        return max((e.set for e in self.entries
                    if e.application == application and e.set is not None), default=0)

    def with_rows(self, rows: list[Entry]) -> "Ledger":
        """This ledger with ``rows`` added, or replacing the rows of the same devices."""
        new = {e.device: e for e in rows}
        kept = [e for e in self.entries if e.device not in new]
        return Ledger(self.path, kept + rows)


def today() -> str:
    return dt.date.today().isoformat()


def _cell(row: dict, name: str) -> str:
    return (row.get(name) or "").strip()


def _entry(row: dict, line: int, path: Path) -> Entry:
    device = _cell(row, "device")
    if not device:
        raise InputError("empty device", path, line, "device")
    state = _cell(row, "state")
    if state not in STATES:
        raise InputError(f"state '{state}' is not one of {', '.join(STATES)}", path, line, "state")
    number = _cell(row, "set")
    application = _cell(row, "application")
    if number:
        if not number.isdigit() or int(number) < 1:
            raise InputError(f"set '{number}' is not a set number (1, 2, ...)", path, line, "set")
        if not application:
            raise InputError("a set number needs its application", path, line, "application")
    elif state == "kept":
        raise InputError("a kept part needs its application and set", path, line, "set")
    date = _cell(row, "date")
    try:
        dt.date.fromisoformat(date)
    except ValueError:
        raise InputError(f"date '{date}' is not a date (write YYYY-MM-DD)", path, line,
                         "date") from None
    return Entry(device, application, int(number) if number else None, state, date,
                 _cell(row, "note"), line)


def read_ledger(path: str | Path) -> Ledger:
    """Read and check ``ledger.csv``: columns, states, set numbers, dates, one row per part.

    A missing file is an empty ledger. Checks that need the reel (unknown devices, a
    set larger than its profile) are :func:`check_ledger`'s.
    """
    path = Path(path)
    if not path.is_file():
        return Ledger(path, [])
    raw = path.read_bytes()
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise InputError(f"byte 0x{raw[exc.start]:02x} is not valid UTF-8 text (save the file "
                         "as UTF-8)", path, raw.count(b"\n", 0, exc.start) + 1) from None
    lines = [(n, s) for n, s in enumerate(text.splitlines(), start=1)
             if s.strip() and not s.lstrip().startswith("#")]
    if not lines:
        return Ledger(path, [])
    header = next(csv.reader([lines[0][1]]))
    missing = [c for c in COLUMNS if c not in header]
    if missing:
        raise InputError(f"missing column(s) {', '.join(missing)} (a ledger has "
                         f"{', '.join(COLUMNS)})", path, lines[0][0])
    entries, seen = [], {}
    for n, s in lines[1:]:
        cells = next(csv.reader([s]))
        if len(cells) > len(header):
            raise InputError(f"{len(cells)} cells, the header has {len(header)}", path, n)
        e = _entry(dict(zip(header, cells)), n, path)
        if e.device in seen:
            raise InputError(f"device '{e.device}' is on line {seen[e.device]} already: a part "
                             "has one row", path, n, "device")
        seen[e.device] = n
        entries.append(e)
    return Ledger(path, entries)


def check_ledger(ledger: Ledger, devices: set[str], set_sizes: dict[str, int]) -> None:
    """Errors that need the reel: a device no input holds, a kept set larger than its
    application's set size (``set_sizes``: application -> size, for those known)."""
    for e in ledger.entries:
        if e.device not in devices:
            raise InputError(f"device '{e.device}' is in no input of this reel", ledger.path,
                             e.line, "device")
    for app, size in set_sizes.items():
        for number, rows in ledger.kept_sets(app).items():
            kept = [r for r in rows if r.state == "kept"]     # retired members are gone
            if len(kept) > size:
                raise InputError(f"{app} set {number} has {len(kept)} kept parts; its profile "
                                 f"makes sets of {size}", ledger.path,
                                 max(r.line for r in kept), "set")


def write_ledger(ledger: Ledger) -> None:
    """Write the ledger atomically, rows sorted by application, set and device."""
    order = sorted(ledger.entries, key=lambda e: (e.application, e.set or 0, e.device))
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(COLUMNS)
    for e in order:
        w.writerow([e.device, e.application, "" if e.set is None else e.set, e.state, e.date,
                    e.note])
    write_text(ledger.path, buf.getvalue())
