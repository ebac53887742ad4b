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

import re
import sys
from dataclasses import dataclass
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
TESTS = HERE.parents[2]
if str(TESTS) not in sys.path:
    sys.path.insert(0, str(TESTS))

import ngspice_tools  # noqa: E402  (tests/ngspice_tools.py)
from ngspice_tools import model_cards, netlist_lines, options_lines, spice_number  # noqa: E402

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
    return Card(**ngspice_tools.diode_card(text, ("CJO", "VJ", "M")))


def biases_of(text: str) -> list[float]:
    """DC reverse bias of ``Vb0, Vb1, ...`` [V], in the order of k."""
    found = {}
    for line in netlist_lines(text):
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
        version = ngspice_tools.version_label()
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
    return ngspice_tools.simulate_cases(
        out_dir, cases(folder), lambda case, version: simulate(case.netlist, version)).paths


def numbers(path: Path) -> np.ndarray:
    """The numeric columns of a CSV written here (bias, capacitance, frequency, temperature)."""
    return ngspice_tools.csv_numbers(path, HEADER)


def main(argv: list[str] | None = None) -> int:
    return ngspice_tools.regenerate_main(argv, doc=__doc__, folder=HERE, regenerate=regenerate,
                                         numbers=numbers)


if __name__ == "__main__":
    sys.exit(main())
