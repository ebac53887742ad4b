"""Regenerate the forward reference data from the netlists in this folder.

Each ``<name>.cir`` here is a small ngspice deck with a known ``.model`` diode card;
it writes the diode's current and terminal voltage with ``wrdata forward.txt id vd``.
This script runs every deck in ngspice batch mode and writes ``<name>.csv`` in the
forward format of kinset's data contract (``device,current_A,voltage_V,temperature_C``,
``#`` comment lines naming the netlist and the card), so ``kinset.io.datasets.read_forward``
reads it directly. The device is named after the netlist.

    python tests/reference/ngspice/forward/regenerate.py            # rewrite the CSVs here
    python tests/reference/ngspice/forward/regenerate.py --out DIR  # write elsewhere
    python tests/reference/ngspice/forward/regenerate.py --check    # compare, write nothing

The committed CSVs were made with ngspice 39 (Debian package). The tests in
``tests/test_forward_ngspice.py`` rerun this when ngspice is present and require the
fresh data to equal the committed data, so the two cannot drift apart.

The temperature column is the analysis temperature ngspice reports
("Doing analysis at TEMP = ..."), checked against the deck's ``.options temp=``.
"""

from __future__ import annotations

import argparse
import re
import sys
import tempfile
from dataclasses import dataclass
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
TESTS = HERE.parents[2]
if str(TESTS) not in sys.path:
    sys.path.insert(0, str(TESTS))

import ngspice_tools  # noqa: E402  (tests/ngspice_tools.py)

OUTPUT = "forward.txt"          # the file every deck writes with wrdata
CURRENT, VOLTAGE = "id", "vd"   # its vectors: diode current [A], terminal voltage [V]
HEADER = "device,current_A,voltage_V,temperature_C"
NUMBER = "%.10e"

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


def _logical_lines(text: str) -> list[str]:
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
    return [s for s in _logical_lines(text) if s.lower().startswith(".model")]


def options_lines(text: str) -> list[str]:
    """The ``.options`` / ``.option`` lines of a netlist."""
    return [s for s in _logical_lines(text) if re.match(r"\.options?\b", s, re.IGNORECASE)]


def _assignments(text: str) -> dict[str, str]:
    return {k.upper(): v for k, v in re.findall(r"([A-Za-z]\w*)\s*=\s*([^\s=(),]+)", text)}


@dataclass(frozen=True)
class Card:
    """The diode card and conditions one netlist simulates (SPICE units: A, 1, ohm, eV, °C)."""

    IS: float
    N: float
    RS: float
    EG: float
    XTI: float
    TNOM: float
    TEMP: float


def card_of(text: str) -> Card:
    """Parse a netlist's single diode ``.model`` card and its ``.options`` temperatures.

    Every parameter the fit is compared with must be written in the card (no reliance
    on simulator defaults), and ``tnom`` and ``temp`` must both be set.
    """
    cards = model_cards(text)
    if len(cards) != 1:
        raise ValueError(f"expected one .model card, found {len(cards)}")
    m = re.match(r"\.model\s+\S+\s+D\s*\((.*)\)\s*$", cards[0], re.IGNORECASE)
    if not m:
        raise ValueError(f"not a diode card: {cards[0]}")
    par = _assignments(m.group(1))
    opt = _assignments(" ".join(s.split(None, 1)[1] if " " in s else "" for s in options_lines(text)))
    need = [k for k in ("IS", "N", "RS", "EG", "XTI") if k not in par]
    need += [k for k in ("TNOM", "TEMP") if k not in opt]
    if need:
        raise ValueError(f"netlist does not set {', '.join(need)} explicitly")
    return Card(**{k: spice_number(par[k]) for k in ("IS", "N", "RS", "EG", "XTI")},
                TNOM=spice_number(opt["TNOM"]), TEMP=spice_number(opt["TEMP"]))


@dataclass(frozen=True)
class Case:
    """One netlist and the CSV made from it."""

    name: str
    netlist: Path
    csv: Path
    card: Card
    sweep: bool          # a DC current sweep (True) or a single operating point


def cases(folder: Path = HERE) -> list[Case]:
    """Every netlist in ``folder``, sorted by name."""
    out = []
    for p in sorted(folder.glob("*.cir")):
        text = p.read_text()
        sweep = re.search(r"^\s*dc\s", "\n".join(ngspice_tools._control_lines(text)),
                          re.IGNORECASE | re.MULTILINE) is not None
        out.append(Case(p.stem, p, p.with_suffix(".csv"), card_of(text), sweep))
    return out


def simulate(netlist: Path, version: str | None = None) -> str:
    """Run one netlist and return the CSV text for it."""
    text = netlist.read_text()
    card = card_of(text)
    result = ngspice_tools.run_deck(text, ensure_format=False)
    table = result.table(OUTPUT)
    current, voltage = np.real(table[CURRENT]), np.real(table[VOLTAGE])
    temps = result.analysis_temperatures()
    if not temps:
        raise ngspice_tools.NgspiceError(f"{netlist.name}: ngspice reported no analysis")
    for temp, tnom in temps:
        if abs(temp - card.TEMP) > 1e-9 or abs(tnom - card.TNOM) > 1e-9:
            raise ngspice_tools.NgspiceError(
                f"{netlist.name}: ngspice ran at TEMP {temp} C, TNOM {tnom} C; the deck "
                f"asks for {card.TEMP} C, {card.TNOM} C")
    temp_c = temps[-1][0]
    if version is None:
        version = ngspice_tools.ngspice_version() or "ngspice (version unknown)"
    title = text.splitlines()[0].lstrip("* ").strip()
    lines = [
        f"# {title}",
        f"# simulated by {version}, batch mode, from netlist {netlist.name}",
        f"# model card: {model_cards(text)[0]}",
        f"# options: {'; '.join(options_lines(text))}",
        f"# analysis at TEMP = {temp_c:g} C, TNOM = {temps[-1][1]:g} C (as reported by ngspice)",
        f"# current_A: ngspice vector {CURRENT}, voltage_V: vector {VOLTAGE}",
        "# regenerate: python tests/reference/ngspice/forward/regenerate.py",
        HEADER,
    ]
    for i, v in zip(current, voltage):
        lines.append(f"{netlist.stem},{NUMBER % i},{NUMBER % v},{temp_c:g}")
    return "\n".join(lines) + "\n"


def regenerate(out_dir: Path = HERE, folder: Path = HERE) -> list[Path]:
    """Simulate every netlist in ``folder`` and write ``<name>.csv`` into ``out_dir``."""
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    version = ngspice_tools.ngspice_version() or "ngspice (version unknown)"
    written = []
    for case in cases(folder):
        target = out_dir / case.csv.name
        target.write_text(simulate(case.netlist, version))
        written.append(target)
    return written


def _numbers(path: Path) -> np.ndarray:
    rows = [s.split(",")[1:] for s in path.read_text().splitlines()
            if s.strip() and not s.startswith("#") and s != HEADER]
    return np.array(rows, dtype=float)


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n", 1)[0])
    ap.add_argument("--out", type=Path, default=HERE, help="folder for the CSVs (default: here)")
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
            old = HERE / p.name
            if not old.is_file():
                print(f"{p.name}: not committed")
                bad += 1
                continue
            a, b = _numbers(old), _numbers(p)
            same = a.shape == b.shape and np.allclose(a, b, rtol=1e-9, atol=0.0)
            print(f"{p.name}: {'same' if same else 'DIFFERS'}")
            bad += not same
    return 1 if bad else 0


if __name__ == "__main__":
    sys.exit(main())
