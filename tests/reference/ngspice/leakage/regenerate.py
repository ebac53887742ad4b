"""Regenerate the leakage reference data from the netlists in this folder.

Each sweep netlist (every ``*.cir`` but ``bv_point.cir``) holds one diode card with a
shunt and breakdown, and runs three analyses in ngspice batch mode: a DC sweep of the
reverse voltage in 0.25 V steps (``sweep.txt``), the voltage at the breakdown current
(``breakdown.txt``) and the voltage at the source's current limit (``limit.txt``).
This script keeps the sweep readings listed on the netlist's ``*@ sweep_V`` line up to
the first one at or above the current limit, which it replaces by the compliance
reading (the voltage reached at the limit, the limit current) as a source-measure unit
reports it, and writes ``<name>.csv`` in kinset's leakage format
(``device,reverse_voltage_V,reverse_current_A,temperature_C``; the device is the
netlist's name). ``truth.csv`` gathers, per netlist, what ngspice says the answers are:
the current at exactly 20 V, the voltage at the breakdown current, the compliance
voltage, and the card.

``bv_point.cir`` holds a card at exactly VR = BV; it gives ``bv_point.csv``.

    python tests/reference/ngspice/leakage/regenerate.py            # rewrite the CSVs here
    python tests/reference/ngspice/leakage/regenerate.py --out DIR  # write elsewhere
    python tests/reference/ngspice/leakage/regenerate.py --check    # compare, write nothing

The committed CSVs were made with ngspice 39 (Debian package); ``tests/test_leakage_ngspice.py``
reruns this when ngspice is present and requires the fresh data to equal them.
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
from ngspice_tools import assignments as _assignments, spice_number  # noqa: E402

HEADER = "device,reverse_voltage_V,reverse_current_A,temperature_C"
REPORT_V = 20.0        # the voltage truth.csv reports the current at, as kinset does ...
BETWEEN_V = (2.5, 12.5, 32.5, 47.5)   # ... and voltages between readings, for the model
TRUTH_HEADER = ("device,temperature_C,ir_A_at_20V,bv_V,limit_V,limit_A,breakdown_A,gmin_S,"
                "rsh_ohm,IS,N,BV,IBV,NBV," + ",".join(f"ir_A_at_{v:g}V" for v in BETWEEN_V))
NUMBER = "%.10e"
STEP_V = 0.25          # the DC sweep's step in every netlist


def directives(text: str) -> dict[str, str]:
    """The ``*@ key = value`` lines of a netlist."""
    return {k: v.strip() for k, v in re.findall(r"^\*@\s*(\w+)\s*=\s*(.+)$", text, re.MULTILINE)}


def model_card(text: str) -> str:
    cards = [s.strip() for s in text.splitlines() if s.strip().lower().startswith(".model")]
    if len(cards) != 1:
        raise ValueError(f"expected one .model card, found {len(cards)}")
    return cards[0]


def options_line(text: str) -> str:
    return next(s.strip() for s in text.splitlines() if s.strip().lower().startswith(".options"))


@dataclass(frozen=True)
class Case:
    """One sweep netlist: its card and what the sweep keeps."""

    name: str
    netlist: Path
    csv: Path
    card: dict[str, float]
    temperature_C: float
    gmin: float
    rsh: float
    sweep_V: tuple[float, ...]
    limit_A: float
    breakdown_A: float


def case_of(netlist: Path) -> Case:
    text = netlist.read_text()
    d = directives(text)
    card = {k: spice_number(v) for k, v in _assignments(
        re.match(r"\.model\s+\S+\s+D\s*\((.*)\)", model_card(text), re.IGNORECASE).group(1)).items()}
    opt = {k: spice_number(v) for k, v in _assignments(options_line(text)).items()}
    rsh = spice_number(re.search(r"^Rsh\s+\S+\s+\S+\s+(\S+)", text, re.MULTILINE).group(1))
    limit, breakdown = float(d["limit_A"]), float(d["breakdown_A"])
    alters = [float(x) for x in re.findall(r"^alter\s+Ic\s*=\s*(\S+)", text, re.MULTILINE)]
    if alters != [breakdown, limit]:
        raise ValueError(f"{netlist.name}: 'alter Ic' values {alters} do not match the "
                         f"*@ breakdown_A and limit_A lines")
    for key in ("TNOM", "TEMP", "GMIN"):
        if key not in opt:
            raise ValueError(f"{netlist.name}: .options does not set {key.lower()}")
    sweep = tuple(float(x) for x in d["sweep_V"].split())
    return Case(netlist.stem, netlist, netlist.with_suffix(".csv"), card, opt["TEMP"],
                opt["GMIN"], rsh, sweep, limit, breakdown)


def cases(folder: Path = HERE) -> list[Case]:
    """Every sweep netlist in ``folder``, sorted by name."""
    return [case_of(p) for p in sorted(folder.glob("*.cir")) if p.stem != "bv_point"]


def simulate(case: Case, version: str) -> tuple[str, str]:
    """Run one sweep netlist; the CSV text and its truth.csv row."""
    text = case.netlist.read_text()
    result = ngspice_tools.run_deck(text, ensure_format=False)
    ngspice_tools.check_temperatures(result, case.name, case.temperature_C, 25.0)
    sweep = result.table("sweep.txt")
    volt, cur = np.real(sweep.scale), np.real(sweep["ir"])
    grid = np.round(volt / STEP_V).astype(int)
    if not np.allclose(volt, grid * STEP_V, rtol=0, atol=1e-9):
        raise ngspice_tools.NgspiceError(f"{case.name}: the sweep is not in {STEP_V} V steps")
    at = {int(k): i for k, i in zip(grid, cur)}
    v_bd = float(np.real(result.table("breakdown.txt")["vbd"][0]))
    v_lim = float(np.real(result.table("limit.txt")["vlim"][0]))
    rows = []
    for v in case.sweep_V:
        i = at[int(round(v / STEP_V))]
        if i >= case.limit_A:       # the source goes into compliance: it reports where
            rows.append((v_lim, case.limit_A))    # it reached the limit, then stops
            break
        rows.append((v, i))
    title = text.splitlines()[0].lstrip("* ").strip()
    temp = case.temperature_C
    lines = [
        f"# {title}",
        f"# simulated by {version}, batch mode, from netlist {case.netlist.name}",
        f"# model card: {model_card(text)}; shunt Rsh = {case.rsh:g} ohm",
        f"# options: {options_line(text)} (GMIN conducts across the junction)",
        f"# readings of the 0.25 V DC sweep at the listed voltages; a sweep that reaches "
        f"the {case.limit_A:g} A limit ends with the voltage ngspice finds at that current",
        "# regenerate: python tests/reference/ngspice/leakage/regenerate.py",
        HEADER,
    ]
    lines += [f"{case.name},{NUMBER % v},{NUMBER % i},{temp:g}" for v, i in rows]
    c = case.card
    truth = ",".join([case.name, f"{temp:g}", NUMBER % at[int(round(REPORT_V / STEP_V))],
                      NUMBER % v_bd, NUMBER % v_lim, f"{case.limit_A:g}", f"{case.breakdown_A:g}",
                      f"{case.gmin:g}", f"{case.rsh:g}"]
                     + [f"{c.get(k, float('nan')):g}" for k in ("IS", "N", "BV", "IBV", "NBV")]
                     + [NUMBER % at[int(round(v / STEP_V))] for v in BETWEEN_V])
    return "\n".join(lines) + "\n", truth


def simulate_bv_point(netlist: Path, version: str) -> str:
    text = netlist.read_text()
    result = ngspice_tools.run_deck(text, ensure_format=False)
    ngspice_tools.check_temperatures(result, netlist.stem, 25.0, 25.0)
    table = result.table("bv_point.txt")
    v, i = float(np.real(table["vr"][0])), float(np.real(table["ir"][0]))
    lines = [f"# {text.splitlines()[0].lstrip('* ').strip()}",
             f"# simulated by {version}, batch mode, from netlist {netlist.name}",
             f"# model card: {model_card(text)}",
             f"# options: {options_line(text)}",
             "# regenerate: python tests/reference/ngspice/leakage/regenerate.py",
             HEADER, f"bv_point,{NUMBER % v},{NUMBER % i},25"]
    return "\n".join(lines) + "\n"


def regenerate(out_dir: Path = HERE, folder: Path = HERE) -> list[Path]:
    """Simulate every netlist in ``folder`` and write the CSVs into ``out_dir``."""
    out = ngspice_tools.simulate_cases(out_dir, cases(folder), simulate)
    out.add("truth.csv",
            f"# what ngspice ({out.version}) gives for each netlist, at the netlist's temperature: "
            f"the current at exactly 20 V, the voltage at the breakdown current and at the "
            f"current limit, the card and shunt, and the current at voltages between readings\n"
            f"# regenerate: python tests/reference/ngspice/leakage/regenerate.py\n"
            + TRUTH_HEADER + "\n" + "\n".join(out.rows) + "\n")
    out.add("bv_point.csv", simulate_bv_point(folder / "bv_point.cir", out.version))
    return out.paths


def numbers(path: Path) -> np.ndarray:
    """The numeric cells of a CSV written here (the device column left out)."""
    return ngspice_tools.csv_numbers(path)


def main(argv: list[str] | None = None) -> int:
    return ngspice_tools.regenerate_main(argv, doc=__doc__, folder=HERE, regenerate=regenerate,
                                         numbers=numbers, equal_nan=True)


if __name__ == "__main__":
    sys.exit(main())
