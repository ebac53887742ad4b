"""Run the ngspice reference simulator from tests and read what it writes.

kinset's physics is checked against an outside circuit simulator, ngspice (the
Debian package; the reference data in ``tests/reference/ngspice`` was made with
ngspice 39). This module finds the program, runs a deck in batch mode in a
temporary folder and returns every table the deck wrote with the ``wrdata``
command as numpy arrays.

The runner itself (finding the program, running a deck, reading ``wrdata`` tables,
and the ngspice 39 behaviour that shapes it) is ``kinset.circuit.ngspice``: the
circuit step uses it too. This module adds the pytest marker and the netlist readers.

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
import re
import sys
import tempfile
from collections.abc import Callable, Iterable
from dataclasses import dataclass, field
from pathlib import Path
from types import ModuleType
from typing import Any

import numpy as np
import pytest

# The runner lives in the package (the circuit step uses it too).
from kinset.circuit.ngspice import (DECK_NAME, NGSPICE_ENV, NgspiceError,  # noqa: F401,E402
                                    RunResult, Table, control_lines, find_ngspice,
                                    ngspice_version,
                                    read_wrdata, run_deck, with_format_settings,
                                    wrdata_files)

HAVE_NGSPICE = find_ngspice() is not None

#: Marks a test that needs ngspice and skips it when the program is absent.
requires_ngspice = pytest.mark.skipif(not HAVE_NGSPICE,
                                      reason="ngspice is not on PATH (Debian package ngspice)")


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
