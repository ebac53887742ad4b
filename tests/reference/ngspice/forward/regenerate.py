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
from ngspice_tools import model_cards, options_lines  # noqa: E402

OUTPUT = "forward.txt"          # the file every deck writes with wrdata
CURRENT, VOLTAGE = "id", "vd"   # its vectors: diode current [A], terminal voltage [V]
HEADER = "device,current_A,voltage_V,temperature_C"
NUMBER = "%.10e"


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
    return Card(**ngspice_tools.diode_card(text, ("IS", "N", "RS", "EG", "XTI")))


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
        sweep = re.search(r"^\s*dc\s", "\n".join(ngspice_tools.control_lines(text)),
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
    temps = ngspice_tools.check_temperatures(result, netlist.name, card.TEMP, card.TNOM)
    temp_c = temps[-1][0]
    if version is None:
        version = ngspice_tools.version_label()
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
    return ngspice_tools.simulate_cases(
        out_dir, cases(folder), lambda case, version: simulate(case.netlist, version)).paths


def numbers(path: Path) -> np.ndarray:
    """The numeric columns of a CSV written here (current, voltage, temperature)."""
    return ngspice_tools.csv_numbers(path, HEADER)


def main(argv: list[str] | None = None) -> int:
    return ngspice_tools.regenerate_main(argv, doc=__doc__, folder=HERE, regenerate=regenerate,
                                         numbers=numbers)


if __name__ == "__main__":
    sys.exit(main())
