"""Run ngspice in batch mode and read the tables it writes.

The circuit step (``kinset circuit``) and the tests share this runner; the tests'
``tests/ngspice_tools.py`` re-exports it with a pytest marker beside it.

Behaviour of ngspice 39 (the Debian build) that shapes this module:

* ``ngspice -b deck.cir`` exits with status 1 when the deck holds a ``.control``
  block, even when every command succeeded. The exit status is therefore not
  trusted: a run is judged by its messages (``Error:`` lines, ignored model
  parameters, aborted analyses) and by whether every ``wrdata`` file appeared.
* ``wrdata`` writes 8 significant digits unless ``option numdgt=15`` is set, one
  scale column per vector unless ``set wr_singlescale`` is set, and no header
  unless ``set wr_vecnames`` is set. :func:`run_deck` adds the three settings at
  the top of the ``.control`` block when the deck does not set them itself.
* A complex vector (AC analysis) takes two columns, real and imaginary part,
  both headed by the vector's name; :func:`read_wrdata` joins them again.
* In a ``wrdata`` or ``let`` expression ``-i(V1)`` parses as a subtraction; negate
  with ``let`` first. A misspelt ``.model`` parameter is only a warning
  ("unrecognized parameter ... ignored"), which :func:`run_deck` turns into an error.
"""

from __future__ import annotations

import os
import re
import shutil
import subprocess
import tempfile
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from kinset.io.output import write_text

#: Environment variable naming an ngspice executable to use instead of the one on PATH.
NGSPICE_ENV = "KINSET_NGSPICE"

DECK_NAME = "deck.cir"

# Settings run_deck adds to a .control block that lacks them, so that every table
# can be read back with full precision and named columns.
_FORMAT_SETTINGS = (
    ("wr_singlescale", "set wr_singlescale"),
    ("wr_vecnames", "set wr_vecnames"),
    ("numdgt", "option numdgt=15"),
)

# Messages that mean the run did not do what the deck says. Matched per line,
# case-insensitively, on standard output and standard error together.
_FAILURE_PATTERNS = (
    r"^\s*error\b",
    r"unrecognized parameter",
    r"\baborted\b",
    r"timestep too small",
    r"singular matrix",
    r"stepping failed",
    r"no such vector",
    r"could not find",
    r"unknown (?:model|subckt|device|parameter)",
)
_FAILURE = re.compile("|".join(f"(?:{p})" for p in _FAILURE_PATTERNS), re.IGNORECASE)


class NgspiceError(RuntimeError):
    """ngspice could not be run, reported a failure, or did not write its tables."""


def find_ngspice() -> str | None:
    """Path of the ngspice executable: ``$KINSET_NGSPICE`` if set, else the one on PATH."""
    override = os.environ.get(NGSPICE_ENV)
    if override:
        return shutil.which(override) or (override if Path(override).is_file() else None)
    return shutil.which("ngspice")



def ngspice_version(executable: str | None = None) -> str:
    """The version line ngspice prints, e.g. ``ngspice-39``; empty if unknown."""
    exe = executable or find_ngspice()
    if exe is None:
        return ""
    try:
        out = subprocess.run([exe, "--version"], capture_output=True, text=True,
                             timeout=30, stdin=subprocess.DEVNULL)
    except (OSError, subprocess.TimeoutExpired):
        return ""
    m = re.search(r"ngspice-\S+", out.stdout + out.stderr)
    return m.group(0) if m else ""


@dataclass(frozen=True)
class Table:
    """One ``wrdata`` table: column names and a (rows × columns) array.

    The first column is the plot's scale (the swept quantity, time, frequency...).
    ``data`` is real unless a column is complex.
    """

    names: tuple[str, ...]
    data: np.ndarray

    def __getitem__(self, name: str) -> np.ndarray:
        """The column named ``name`` (ngspice's spelling, compared case-insensitively)."""
        low = [n.lower() for n in self.names]
        key = name.lower()
        if key not in low:
            raise KeyError(f"no column {name!r}; the table holds {', '.join(self.names)}")
        if low.count(key) > 1:
            raise KeyError(f"column name {name!r} appears more than once; index .data instead")
        return self.data[:, low.index(key)]

    def __contains__(self, name: str) -> bool:
        return name.lower() in (n.lower() for n in self.names)

    def __len__(self) -> int:
        return self.data.shape[0]

    @property
    def scale(self) -> np.ndarray:
        """The first column."""
        return self.data[:, 0]

    def as_dict(self) -> dict[str, np.ndarray]:
        """Columns by name (a later column wins if a name repeats)."""
        return {n: self.data[:, j] for j, n in enumerate(self.names)}


@dataclass
class RunResult:
    """What one batch run produced."""

    tables: dict[str, Table]
    stdout: str
    stderr: str
    returncode: int
    deck: str
    files: dict[str, bytes] = field(default_factory=dict)

    def table(self, name: str | None = None) -> Table:
        """The table written to file ``name``; the only table if ``name`` is None."""
        if name is None:
            if len(self.tables) != 1:
                raise KeyError(f"the deck wrote {len(self.tables)} tables "
                               f"({', '.join(self.tables)}); name one")
            return next(iter(self.tables.values()))
        return self.tables[name]

    def analysis_temperatures(self) -> list[tuple[float, float]]:
        """(TEMP, TNOM) in °C of every analysis, as ngspice reported them."""
        return [(float(a), float(b)) for a, b in re.findall(
            r"Doing analysis at TEMP\s*=\s*(\S+)\s+and TNOM\s*=\s*(\S+)", self.stdout)]


def read_wrdata(path: str | Path) -> Table:
    """Read a table written by ``wrdata`` with ``wr_vecnames`` and ``wr_singlescale`` set.

    Two adjacent columns with the same name are the real and imaginary parts of one
    complex vector and are joined into one complex column. Without a header line
    (``wr_vecnames`` unset) the columns are named ``c0, c1, ...``.
    """
    text = Path(path).read_text()
    lines = [s for s in text.splitlines() if s.strip()]
    if not lines:
        return Table((), np.empty((0, 0)))
    head = lines[0].split()
    try:
        [float(x) for x in head]
        names, body = None, lines
    except ValueError:
        names, body = head, lines[1:]
    rows = [[float(x) for x in s.split()] for s in body]
    width = len(names) if names is not None else (len(rows[0]) if rows else 0)
    for k, r in enumerate(rows):
        if len(r) != width:
            raise NgspiceError(f"{path}: row {k + 1} has {len(r)} numbers, the header {width}")
    data = np.array(rows, dtype=float).reshape(len(rows), width)
    if names is None:
        return Table(tuple(f"c{j}" for j in range(width)), data)
    out_names, cols, j = [], [], 0
    while j < width:
        if j + 1 < width and names[j + 1] == names[j]:
            out_names.append(names[j])
            cols.append(data[:, j] + 1j * data[:, j + 1])
            j += 2
        else:
            out_names.append(names[j])
            cols.append(data[:, j])
            j += 1
    arr = np.column_stack(cols) if cols else np.empty((len(rows), 0))
    return Table(tuple(out_names), arr)


def control_lines(deck: str) -> list[str]:
    inside, out = False, []
    for line in deck.splitlines():
        s = line.strip()
        if s.lower().startswith(".control"):
            inside = True
        elif s.lower().startswith(".endc"):
            inside = False
        elif inside:
            out.append(s)
    return out


def wrdata_files(deck: str) -> list[str]:
    """File names the deck's ``.control`` block writes with ``wrdata``, in order, once each."""
    names: list[str] = []
    for s in control_lines(deck):
        m = re.match(r"wrdata\s+(\S+)", s, re.IGNORECASE)
        if m and m.group(1) not in names:
            names.append(m.group(1))
    return names


def with_format_settings(deck: str) -> str:
    """The deck with ``wr_singlescale``, ``wr_vecnames`` and ``numdgt=15`` ensured.

    Settings the deck already makes are left as they are; missing ones are added
    right after ``.control``. A deck without a ``.control`` block is returned as is.
    """
    control = " ".join(control_lines(deck)).lower()
    missing = [cmd for key, cmd in _FORMAT_SETTINGS if key not in control]
    if not missing:
        return deck
    out, done = [], False
    for line in deck.splitlines():
        out.append(line)
        if not done and line.strip().lower().startswith(".control"):
            out.extend(missing)
            done = True
    return "\n".join(out) + "\n"


def run_deck(deck: str, *, workdir: str | Path | None = None, timeout: float = 60.0,
             executable: str | None = None, strict: bool = True,
             ensure_format: bool = True, extra_files: dict[str, str] | None = None,
             ) -> RunResult:
    """Run a deck in ngspice batch mode and return the tables it wrote.

    Parameters
    ----------
    deck : str
        The whole netlist, title line first, usually with a ``.control`` block that
        runs analyses and writes results with ``wrdata FILE vec ...``.
    workdir : path, optional
        Folder to run in (kept afterwards). Default: a temporary folder, removed.
    timeout : float
        Seconds before the run is abandoned.
    executable : str, optional
        ngspice to run; default :func:`find_ngspice`.
    strict : bool
        Raise :class:`NgspiceError` on any failure message (see ``_FAILURE_PATTERNS``);
        otherwise only a missing output file is an error.
    ensure_format : bool
        Add the ``wrdata`` format settings the deck lacks (:func:`with_format_settings`).
    extra_files : dict, optional
        Other files the deck reads (``.include``), name -> text, written beside it.

    Returns
    -------
    RunResult
        ``tables`` maps each ``wrdata`` file name to its :class:`Table`; ``files``
        holds the raw bytes of every file the run left in the folder.

    Notes
    -----
    ``-n`` keeps a user's ``.spiceinit`` out of the run, so results do not depend on
    the account that runs the tests. The exit status is not used (see module notes).
    """
    exe = executable or find_ngspice()
    if exe is None:
        raise NgspiceError("ngspice is not on PATH (Debian package ngspice)")
    if ensure_format:
        deck = with_format_settings(deck)
    expected = wrdata_files(deck)
    with tempfile.TemporaryDirectory(prefix="kinset-ngspice-") as tmp:
        folder = Path(workdir) if workdir is not None else Path(tmp)
        folder.mkdir(parents=True, exist_ok=True)
        for name in expected:
            (folder / name).unlink(missing_ok=True)
        for name, text in (extra_files or {}).items():
            write_text(folder / name, text)
        write_text(folder / DECK_NAME, deck)
        try:
            proc = subprocess.run([exe, "-b", "-n", DECK_NAME], cwd=folder,
                                  capture_output=True, text=True, timeout=timeout,
                                  stdin=subprocess.DEVNULL)
        except subprocess.TimeoutExpired as exc:
            raise NgspiceError(f"ngspice did not finish within {timeout} s") from exc
        except OSError as exc:
            raise NgspiceError(f"cannot run {exe}: {exc}") from exc
        messages = proc.stdout + "\n" + proc.stderr
        problems = [s.strip() for s in messages.splitlines() if _FAILURE.search(s)]
        missing = [n for n in expected if not (folder / n).is_file()]

        def fail(what: str) -> NgspiceError:
            return NgspiceError(f"{what}\n--- ngspice stdout ---\n{proc.stdout}"
                                f"\n--- ngspice stderr ---\n{proc.stderr}")

        if proc.returncode not in (0, 1):
            raise fail(f"ngspice exited with status {proc.returncode}")
        if strict and problems:
            raise fail("ngspice reported: " + " | ".join(problems))
        if missing:
            raise fail("ngspice did not write " + ", ".join(missing))
        tables = {n: read_wrdata(folder / n) for n in expected}
        files = {p.name: p.read_bytes() for p in folder.iterdir()
                 if p.is_file() and p.name != DECK_NAME}
    return RunResult(tables=tables, stdout=proc.stdout, stderr=proc.stderr,
                     returncode=proc.returncode, deck=deck, files=files)
