"""Regenerate the capacitance reference data from the netlists in this folder.

Each ``<name>.cir`` here is a small ngspice deck: one diode per reverse bias, each held
at its DC bias by a source ``Vb<k>`` that also carries a 1 V AC signal, and a single AC
analysis at 1 MHz. The deck writes the capacitance of diode ``k`` as vector ``c<k>``
(imaginary part of the AC current over 2·pi·f) with ``wrdata cv.txt c0 c1 ...``. This
script runs every deck in ngspice batch mode and writes ``<name>.csv`` in the C–V format
of kinset's data contract (``device,reverse_voltage_V,capacitance_F,frequency_Hz,
temperature_C``, ``#`` comment lines naming the netlist and the card), so
``kinset.io.datasets.read_capacitance`` reads it directly. The device is named after the
netlist; each row's bias is the DC value of ``Vb<k>`` in the netlist.

    python tests/reference/ngspice/capacitance/regenerate.py            # rewrite the CSVs here
    python tests/reference/ngspice/capacitance/regenerate.py --out DIR  # write elsewhere
    python tests/reference/ngspice/capacitance/regenerate.py --check    # compare, write nothing

The committed CSVs were made with ngspice 39 (Debian package). ``tests/test_capacitance_ngspice.py``
reruns this when ngspice is present and requires the fresh data to equal the committed data.
"""

from __future__ import annotations

import argparse
import importlib.util
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


def _forward_helpers():
    """The netlist helpers of the forward reference script (SPICE numbers, cards, options)."""
    name = "kinset_reference_ngspice_forward_regenerate"
    if name not in sys.modules:
        spec = importlib.util.spec_from_file_location(name, HERE.parent / "forward" / "regenerate.py")
        module = importlib.util.module_from_spec(spec)
        sys.modules[name] = module
        spec.loader.exec_module(module)
    return sys.modules[name]


_fwd = _forward_helpers()
spice_number, model_cards, options_lines = _fwd.spice_number, _fwd.model_cards, _fwd.options_lines
_assignments, _logical_lines = _fwd._assignments, _fwd._logical_lines

OUTPUT = "cv.txt"           # the file every deck writes with wrdata
HEADER = "device,reverse_voltage_V,capacitance_F,frequency_Hz,temperature_C"
NUMBER = "%.10e"
_BIAS = re.compile(r"^Vb(\d+)\s+\S+\s+\S+\s+DC\s+(\S+)\s+AC\s+1\s*$", re.IGNORECASE)


@dataclass(frozen=True)
class Card:
    """The junction-capacitance card and conditions of one netlist (SPICE units: F, V, 1, °C)."""

    CJO: float
    VJ: float
    M: float
    TNOM: float
    TEMP: float


def card_of(text: str) -> Card:
    """The netlist's single diode card; CJO, VJ, M, tnom and temp must all be written."""
    cards = model_cards(text)
    if len(cards) != 1:
        raise ValueError(f"expected one .model card, found {len(cards)}")
    m = re.match(r"\.model\s+\S+\s+D\s*\((.*)\)\s*$", cards[0], re.IGNORECASE)
    if not m:
        raise ValueError(f"not a diode card: {cards[0]}")
    par = _assignments(m.group(1))
    opt = _assignments(" ".join(s.split(None, 1)[1] if " " in s else "" for s in options_lines(text)))
    need = [k for k in ("CJO", "VJ", "M") if k not in par] + \
        [k for k in ("TNOM", "TEMP") if k not in opt]
    if need:
        raise ValueError(f"netlist does not set {', '.join(need)} explicitly")
    return Card(**{k: spice_number(par[k]) for k in ("CJO", "VJ", "M")},
                TNOM=spice_number(opt["TNOM"]), TEMP=spice_number(opt["TEMP"]))


def biases_of(text: str) -> list[float]:
    """DC reverse bias of ``Vb0, Vb1, ...`` [V], in the order of k."""
    found = {}
    for line in _logical_lines(text):
        m = _BIAS.match(line)
        if m:
            found[int(m.group(1))] = spice_number(m.group(2))
    if sorted(found) != list(range(len(found))) or not found:
        raise ValueError("bias sources must be Vb0, Vb1, ... 'Vb<k> k<k> 0 DC <V> AC 1'")
    return [found[k] for k in range(len(found))]


@dataclass(frozen=True)
class Case:
    """One netlist and the CSV made from it."""

    name: str
    netlist: Path
    csv: Path
    card: Card
    biases: tuple[float, ...]


def cases(folder: Path = HERE) -> list[Case]:
    """Every netlist in ``folder``, sorted by name."""
    out = []
    for p in sorted(folder.glob("*.cir")):
        text = p.read_text()
        out.append(Case(p.stem, p, p.with_suffix(".csv"), card_of(text), tuple(biases_of(text))))
    return out


def simulate(netlist: Path, version: str | None = None) -> str:
    """Run one netlist and return the CSV text for it."""
    text = netlist.read_text()
    card = card_of(text)
    biases = biases_of(text)
    result = ngspice_tools.run_deck(text, ensure_format=False)
    table = result.table(OUTPUT)
    if len(table) != 1:
        raise ngspice_tools.NgspiceError(f"{netlist.name}: expected one AC point, got {len(table)}")
    freq = float(np.real(table.scale[0]))
    caps = [float(np.real(table[f"c{k}"][0])) for k in range(len(biases))]
    temps = result.analysis_temperatures()
    if not temps or any(abs(t - card.TEMP) > 1e-9 or abs(n - card.TNOM) > 1e-9 for t, n in temps):
        raise ngspice_tools.NgspiceError(f"{netlist.name}: ngspice ran at {temps}; the deck asks "
                                         f"for TEMP {card.TEMP} C, TNOM {card.TNOM} C")
    if version is None:
        version = ngspice_tools.ngspice_version() or "ngspice (version unknown)"
    title = text.splitlines()[0].lstrip("* ").strip()
    lines = [
        f"# {title}",
        f"# simulated by {version}, batch mode, AC analysis at {freq:g} Hz, from netlist {netlist.name}",
        f"# model card: {model_cards(text)[0]}",
        f"# options: {'; '.join(options_lines(text))}",
        f"# analysis at TEMP = {temps[-1][0]:g} C, TNOM = {temps[-1][1]:g} C (as reported by ngspice)",
        "# capacitance_F: ngspice vector c<k> = imag(i(Vm<k>)) / (2 pi f) for the diode held at Vb<k>",
        "# regenerate: python tests/reference/ngspice/capacitance/regenerate.py",
        HEADER,
    ]
    for v, c in zip(biases, caps):
        lines.append(f"{netlist.stem},{v:g},{NUMBER % c},{freq:g},{temps[-1][0]:g}")
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


def numbers(path: Path) -> np.ndarray:
    """The numeric columns of a CSV written here (bias, capacitance, frequency, temperature)."""
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
            a, b = numbers(old), numbers(p)
            same = a.shape == b.shape and np.allclose(a, b, rtol=1e-9, atol=0.0)
            print(f"{p.name}: {'same' if same else 'DIFFERS'}")
            bad += not same
    return 1 if bad else 0


if __name__ == "__main__":
    sys.exit(main())
