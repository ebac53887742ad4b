"""Run the ngspice reference simulator from tests and read what it writes.

kinset's physics is checked against an outside circuit simulator, ngspice (the
Debian package; the reference data in ``tests/reference/ngspice`` was made with
ngspice 39). This module finds the program, runs a deck in batch mode in a
temporary folder and returns every table the deck wrote with the ``wrdata``
command as numpy arrays.

Behaviour of ngspice 39 that shapes this module (measured on the Debian build):

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
* An operating point (``op``) has no sweep; ``wrdata`` then writes the plot's
  first vector in the scale column.
* In a ``wrdata`` or ``let`` expression ``-i(V1)`` parses as a subtraction; negate
  with ``let`` first (``let id = -i(V1)``, then ``wrdata out.txt id``). Likewise
  a misspelt ``.model`` parameter is only a warning ("unrecognized parameter ...
  ignored"), which :func:`run_deck` turns into an error.

Usage::

    from ngspice_tools import requires_ngspice, run_deck

    @requires_ngspice
    def test_something():
        result = run_deck(DECK)
        table = result.table("out.txt")
        v = table["v(a)"]

The module also reads netlists (:func:`spice_number`, :func:`model_cards`,
:func:`options_lines`, :func:`assignments`, :func:`diode_card`) and holds what the
``regenerate.py`` scripts of the folders in ``tests/reference/ngspice`` share: the
loop that simulates every deck of a folder and writes its CSV
(:func:`simulate_cases`), the numbers of a reference CSV (:func:`csv_numbers`), and
the command line with ``--out`` and ``--check`` that compares fresh data with the
committed data (:func:`regenerate_main`). Tests import such a script with
:func:`load_regenerate`.
"""

from __future__ import annotations

import argparse
import importlib.util
import os
import re
import shutil
import subprocess
import sys
import tempfile
from collections.abc import Callable, Iterable
from dataclasses import dataclass, field
from pathlib import Path
from types import ModuleType
from typing import Any

import numpy as np
import pytest

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


HAVE_NGSPICE = find_ngspice() is not None

#: Marks a test that needs ngspice and skips it when the program is absent.
requires_ngspice = pytest.mark.skipif(not HAVE_NGSPICE,
                                      reason="ngspice is not on PATH (Debian package ngspice)")


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


def _control_lines(deck: str) -> list[str]:
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
    for s in _control_lines(deck):
        m = re.match(r"wrdata\s+(\S+)", s, re.IGNORECASE)
        if m and m.group(1) not in names:
            names.append(m.group(1))
    return names


def with_format_settings(deck: str) -> str:
    """The deck with ``wr_singlescale``, ``wr_vecnames`` and ``numdgt=15`` ensured.

    Settings the deck already makes are left as they are; missing ones are added
    right after ``.control``. A deck without a ``.control`` block is returned as is.
    """
    control = " ".join(_control_lines(deck)).lower()
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
            (folder / name).write_text(text)
        (folder / DECK_NAME).write_text(deck)
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


# ---------------------------------------------------------------------------
# Netlists

# SPICE scale factors (case-insensitive; "meg" and "mil" before the single letters).
_SCALE = {"t": 1e12, "g": 1e9, "meg": 1e6, "k": 1e3, "mil": 25.4e-6, "m": 1e-3,
          "u": 1e-6, "n": 1e-9, "p": 1e-12, "f": 1e-15}
_NUM = re.compile(r"^([+-]?(?:\d+\.?\d*|\.\d+)(?:e[+-]?\d+)?)(meg|mil|[tgkmunpf])?",
                  re.IGNORECASE)


def spice_number(text: str) -> float:
    """A SPICE number: ``2.5e-9``, ``10``, ``4.7k``, ``1meg``; trailing letters are units."""
    m = _NUM.match(text.strip())
    if not m:
        raise ValueError(f"not a SPICE number: {text!r}")
    return float(m.group(1)) * _SCALE.get((m.group(2) or "").lower(), 1.0)


def netlist_lines(text: str) -> list[str]:
    """Netlist lines with ``+`` continuations joined and comments dropped."""
    out: list[str] = []
    for raw in text.splitlines():
        line = raw.split(";", 1)[0].rstrip()
        s = line.strip()
        if not s or s.startswith("*"):
            continue
        if s.startswith("+") and out:
            out[-1] += " " + s[1:].strip()
        else:
            out.append(s)
    return out


def model_cards(text: str) -> list[str]:
    """The ``.model`` lines of a netlist, continuations joined."""
    return [s for s in netlist_lines(text) if s.lower().startswith(".model")]


def options_lines(text: str) -> list[str]:
    """The ``.options`` / ``.option`` lines of a netlist."""
    return [s for s in netlist_lines(text) if re.match(r"\.options?\b", s, re.IGNORECASE)]


def assignments(text: str) -> dict[str, str]:
    """The ``name=value`` pairs in ``text``, names upper-cased, values as written."""
    return {k.upper(): v for k, v in re.findall(r"([A-Za-z]\w*)\s*=\s*([^\s=(),]+)", text)}


def diode_card(text: str, parameters: Iterable[str]) -> dict[str, float]:
    """The named parameters of a netlist's single diode card, and its TNOM and TEMP.

    Every name in ``parameters`` must be written in the ``.model ... D (...)`` card, and
    ``tnom`` and ``temp`` in ``.options`` (no reliance on simulator defaults); the values
    are returned as numbers, keyed by the upper-case names. Raises ``ValueError`` for
    another number of cards than one, a card that is not a diode's, or a missing value.
    """
    parameters = tuple(parameters)
    cards = model_cards(text)
    if len(cards) != 1:
        raise ValueError(f"expected one .model card, found {len(cards)}")
    m = re.match(r"\.model\s+\S+\s+D\s*\((.*)\)\s*$", cards[0], re.IGNORECASE)
    if not m:
        raise ValueError(f"not a diode card: {cards[0]}")
    par = assignments(m.group(1))
    opt = assignments(" ".join(s.split(None, 1)[1] if " " in s else ""
                               for s in options_lines(text)))
    need = [k for k in parameters if k not in par] + [k for k in ("TNOM", "TEMP") if k not in opt]
    if need:
        raise ValueError(f"netlist does not set {', '.join(need)} explicitly")
    return {**{k: spice_number(par[k]) for k in parameters},
            "TNOM": spice_number(opt["TNOM"]), "TEMP": spice_number(opt["TEMP"])}


# ---------------------------------------------------------------------------
# The regenerate.py scripts of tests/reference/ngspice

#: What the CSV comments name as the simulator when ngspice does not say its version.
UNKNOWN_VERSION = "ngspice (version unknown)"


def version_label(executable: str | None = None) -> str:
    """:func:`ngspice_version`, or :data:`UNKNOWN_VERSION` when it is unknown."""
    return ngspice_version(executable) or UNKNOWN_VERSION


def check_temperatures(result: RunResult, name: str, temp: float,
                       tnom: float) -> list[tuple[float, float]]:
    """Every analysis of ``result`` ran at ``temp`` and ``tnom`` [°C]; its (TEMP, TNOM) list.

    Raises :class:`NgspiceError` naming ``name`` when ngspice reported no analysis or
    one at another temperature (to 1e-9 °C).
    """
    temps = result.analysis_temperatures()
    if not temps:
        raise NgspiceError(f"{name}: ngspice reported no analysis")
    for t, tn in temps:
        if abs(t - temp) > 1e-9 or abs(tn - tnom) > 1e-9:
            raise NgspiceError(f"{name}: ngspice ran at TEMP {t} C, TNOM {tn} C; the deck "
                               f"asks for {temp} C, {tnom} C")
    return temps


def load_regenerate(folder: str | Path) -> ModuleType:
    """The ``regenerate.py`` of a reference folder, imported as a module, once per session.

    The module is named ``kinset_reference_ngspice_<folder name>_regenerate`` and entered
    in ``sys.modules`` before it runs (dataclasses look their module up there); a later
    call returns the same module. Importing it puts ``tests/`` on ``sys.path``.
    """
    folder = Path(folder)
    name = f"kinset_reference_ngspice_{folder.name}_regenerate"
    if name in sys.modules:
        return sys.modules[name]
    spec = importlib.util.spec_from_file_location(name, folder / "regenerate.py")
    if spec is None or spec.loader is None:
        raise ImportError(f"cannot import {folder / 'regenerate.py'}")
    module = importlib.util.module_from_spec(spec)
    sys.modules[name] = module
    try:
        spec.loader.exec_module(module)
    except BaseException:
        del sys.modules[name]
        raise
    return module


@dataclass
class Regenerated:
    """The files a regenerate script wrote into ``folder``, in the order written."""

    folder: Path
    version: str                                    # the simulator, as the CSVs name it
    paths: list[Path] = field(default_factory=list)
    rows: list[Any] = field(default_factory=list)   # per case, for a summary table

    def add(self, name: str, text: str) -> Path:
        """Write ``text`` to ``folder / name`` and list it."""
        path = self.folder / name
        path.write_text(text)
        self.paths.append(path)
        return path


def simulate_cases(out_dir: str | Path, cases: Iterable[Any],
                   simulate: Callable[[Any, str], Any]) -> Regenerated:
    """Simulate every case and write its CSV into ``out_dir`` (created if need be).

    ``simulate(case, version)`` returns the CSV text, written to
    ``out_dir / case.csv.name``, or a pair (CSV text, row): the rows are collected in
    ``rows`` for a summary table the caller writes with :meth:`Regenerated.add`.
    ``version`` is :func:`version_label`.
    """
    out = Regenerated(Path(out_dir), version_label())
    out.folder.mkdir(parents=True, exist_ok=True)
    for case in cases:
        made = simulate(case, out.version)
        if isinstance(made, tuple):
            made, row = made
            out.rows.append(row)
        out.add(case.csv.name, made)
    return out


def csv_numbers(path: str | Path, header: str | None = None) -> np.ndarray:
    """The numeric cells of a reference CSV, the first (device) column left out.

    Blank lines, ``#`` comments and the column header are skipped: the line equal to
    ``header`` if it is given, else every line that starts with ``device,``.
    """
    def is_header(s: str) -> bool:
        return s == header if header is not None else s.startswith("device,")

    rows = [s.split(",")[1:] for s in Path(path).read_text().splitlines()
            if s.strip() and not s.startswith("#") and not is_header(s)]
    return np.array(rows, dtype=float)


def regenerate_main(argv: list[str] | None, *, doc: str, folder: Path,
                    regenerate: Callable[[Path], list[Path]],
                    numbers: Callable[[Path], np.ndarray], equal_nan: bool = False) -> int:
    """The command line of a reference folder's ``regenerate.py``; the exit status.

    ``regenerate(out_dir)`` simulates the folder's netlists and returns the files it
    wrote into ``out_dir``. Without ``--check`` it writes into ``--out`` (default:
    ``folder``) and prints each path. With ``--check`` it writes into a temporary
    folder and compares every file with the committed file of that name in
    ``folder``: the same shape and ``numbers`` equal within a relative 1e-9 (NaN equal
    to NaN if ``equal_nan``). It prints ``<name>: same``, ``DIFFERS`` or ``not
    committed`` per file and returns 1 if any file is not the same, else 0.
    ``doc``'s first paragraph is the ``--help`` description.
    """
    ap = argparse.ArgumentParser(description=doc.split("\n\n", 1)[0])
    ap.add_argument("--out", type=Path, default=folder, help="folder for the CSVs (default: here)")
    ap.add_argument("--check", action="store_true",
                    help="simulate into a temporary folder and compare with the committed CSVs")
    args = ap.parse_args(argv)
    if not args.check:
        for p in regenerate(args.out):
            print(p)
        return 0
    with tempfile.TemporaryDirectory() as tmp:
        bad = 0
        for p in regenerate(Path(tmp)):
            old = Path(folder) / p.name
            if not old.is_file():
                print(f"{p.name}: not committed")
                bad += 1
                continue
            a, b = numbers(old), numbers(p)
            same = a.shape == b.shape and np.allclose(a, b, rtol=1e-9, atol=0.0,
                                                      equal_nan=equal_nan)
            print(f"{p.name}: {'same' if same else 'DIFFERS'}")
            bad += not same
    return 1 if bad else 0
