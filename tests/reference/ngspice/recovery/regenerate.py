"""Regenerate the reverse-recovery reference data from the netlists in this folder.

Each ``<name>.cir`` switches one diode card (with TT and CJO) from a forward current
IF to a reverse drive −IR through a resistor and runs a transient in ngspice batch
mode, written at a fixed 10 ps step (``.options interp``) with ``wrdata recovery.txt
id vj``: the diode current and the junction voltage. This script writes

* ``<name>.csv``: every ``*@ decimate``-th sample in kinset's recovery format
  (``device,time_ns,current_mA`` and, where the netlist gives them on ``*@`` lines,
  the test conditions ``forward_current_A,reverse_current_A``), the device named
  after the netlist: what a sampling scope would record (2 → 50 GS/s, 10 → 10 GS/s);
* ``truth.csv``: per netlist, the reference values computed from all 10 ps samples by
  the plain definitions of IEC 60747-2 / JEDEC usage (written out in
  :func:`reference_values`, independent of kinset's own code), and the storage time
  at which ngspice's junction voltage crosses zero (the stored charge TT·ID is gone).

    python tests/reference/ngspice/recovery/regenerate.py            # rewrite the CSVs here
    python tests/reference/ngspice/recovery/regenerate.py --out DIR  # write elsewhere
    python tests/reference/ngspice/recovery/regenerate.py --check    # compare, write nothing

The committed CSVs were made with ngspice 39 (Debian package); ``tests/test_recovery_ngspice.py``
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

SWITCH_S = 5e-9          # the drive starts to fall here in every netlist
STEP_S = 10e-12          # the transient's fixed output step
END_FRACTION = 0.1       # trr: recovery to 10 % of Irrm
END_CURRENT_A = 1e-3     # trr_1mA: recovery to 1 mA
EXTRAPOLATE = (0.9, 0.25)  # trr_extrapolated: line through these fractions of Irrm to zero
TRUTH_HEADER = ("device,if_A,irrm_A,t0_s,ts_junction_s,trr_s,qrr_C,trr_1mA_s,"
                "trr_extrapolated_s,TT_s,CJO_F")
NUMBER = "%.10e"

_SCALE = {"t": 1e12, "g": 1e9, "meg": 1e6, "k": 1e3, "m": 1e-3, "u": 1e-6, "n": 1e-9,
          "p": 1e-12, "f": 1e-15}


def spice_number(text: str) -> float:
    m = re.match(r"^([+-]?(?:\d+\.?\d*|\.\d+)(?:e[+-]?\d+)?)(meg|[tgkmunpf])?", text.strip(), re.I)
    if not m:
        raise ValueError(f"not a SPICE number: {text!r}")
    return float(m.group(1)) * _SCALE.get((m.group(2) or "").lower(), 1.0)


@dataclass(frozen=True)
class Case:
    name: str
    netlist: Path
    csv: Path
    card: dict[str, float]
    decimate: int
    conditions: tuple[float, float] | None     # (IF, IR) test conditions [A], if given


def case_of(netlist: Path) -> Case:
    text = netlist.read_text()
    d = dict(re.findall(r"^\*@\s*(\w+)\s*=\s*(\S+)", text, re.MULTILINE))
    model = next(s for s in text.splitlines() if s.lower().startswith(".model"))
    card = {k.upper(): spice_number(v) for k, v in
            re.findall(r"([A-Za-z]\w*)\s*=\s*([^\s=()]+)", model.split("(", 1)[1])}
    cond = None
    if "forward_current_A" in d:
        cond = (float(d["forward_current_A"]), float(d["reverse_current_A"]))
    return Case(netlist.stem, netlist, netlist.with_suffix(".csv"), card,
                int(d["decimate"]), cond)


def cases(folder: Path = HERE) -> list[Case]:
    return [case_of(p) for p in sorted(folder.glob("*.cir"))]


def _cross(t, y, k, level):
    """Linear interpolation of where y passes ``level`` between samples k-1 and k."""
    return t[k - 1] + (y[k - 1] - level) / (y[k - 1] - y[k]) * (t[k] - t[k - 1])


def _integral(t, y, a, b):
    """∫ y dt from a to b, y linear between samples."""
    grid = np.concatenate([[a], t[(t > a) & (t < b)], [b]])
    vals = np.interp(grid, t, y)
    return float(np.sum(0.5 * (vals[1:] + vals[:-1]) * np.diff(grid)))


def reference_values(t, i, vj) -> dict[str, float]:
    """The reference numbers of one noiseless, finely sampled recovery waveform.

    IF: the mean current before the switch; t0: where the current first crosses zero
    after the switch; Irrm: the largest reverse current after t0; the end of recovery:
    where the reverse current first falls below 10 % of Irrm after the peak (also: below
    1 mA; and the extrapolation of the line through the 90 % and 25 % points to zero);
    trr from t0 to the end; Qrr the reverse current integrated from t0 to the end; ts the
    time from t0 until the junction voltage crosses zero.
    """
    rev = -i
    i_f = float(np.mean(i[t < SWITCH_S - 0.1e-9]))
    k0 = np.flatnonzero((t > SWITCH_S) & (i <= 0))[0]
    t0 = _cross(t, i, k0, 0.0)
    kp = k0 + int(np.argmax(rev[k0:]))
    irrm = float(rev[kp])

    def falls(level):
        k = kp + np.flatnonzero(rev[kp:] < level)[0]
        return _cross(t, rev, k, level)

    t_end = falls(END_FRACTION * irrm)
    t_1ma = falls(END_CURRENT_A)
    t1, t2 = falls(EXTRAPOLATE[0] * irrm), falls(EXTRAPOLATE[1] * irrm)
    t_ex = t2 + (t2 - t1) * EXTRAPOLATE[1] / (EXTRAPOLATE[0] - EXTRAPOLATE[1])
    kj = k0 + np.flatnonzero(vj[k0:] <= 0)[0]
    return {"if_A": i_f, "irrm_A": irrm, "t0_s": t0, "ts_junction_s": _cross(t, vj, kj, 0.0) - t0,
            "trr_s": t_end - t0, "qrr_C": _integral(t, rev, t0, t_end),
            "trr_1mA_s": t_1ma - t0, "trr_extrapolated_s": t_ex - t0}


def simulate(case: Case, version: str) -> tuple[str, str]:
    text = case.netlist.read_text()
    result = ngspice_tools.run_deck(text, ensure_format=False)
    temps = result.analysis_temperatures()
    if not temps or any(abs(a - 25) > 1e-9 or abs(b - 25) > 1e-9 for a, b in temps):
        raise ngspice_tools.NgspiceError(f"{case.name}: not simulated at TEMP = TNOM = 25 C")
    table = result.table("recovery.txt")
    t, i, vj = (np.real(x) for x in (table.scale, table["id"], table["vj"]))
    if not np.allclose(np.diff(t), STEP_S, rtol=1e-6, atol=0):
        raise ngspice_tools.NgspiceError(f"{case.name}: output is not at a fixed 10 ps step")
    ref = reference_values(t, i, vj)
    keep = slice(0, None, case.decimate)
    header = "device,time_ns,current_mA" + (",forward_current_A,reverse_current_A"
                                            if case.conditions else "")
    extra = f",{case.conditions[0]:g},{case.conditions[1]:g}" if case.conditions else ""
    model = next(s for s in text.splitlines() if s.lower().startswith(".model"))
    lines = [f"# {text.splitlines()[0].lstrip('* ').strip()}",
             f"# simulated by {version}, batch mode, from netlist {case.netlist.name}",
             f"# model card: {model}",
             f"# every {case.decimate}th sample of the 10 ps transient "
             f"({STEP_S * case.decimate * 1e12:g} ps steps); positive current is forward",
             "# regenerate: python tests/reference/ngspice/recovery/regenerate.py",
             header]
    lines += [f"{case.name},{tt * 1e9:.3f},{NUMBER % (ii * 1e3)}{extra}"
              for tt, ii in zip(t[keep], i[keep])]
    truth = ",".join([case.name] + [NUMBER % ref[k] for k in TRUTH_HEADER.split(",")[1:9]]
                     + [f"{case.card['TT']:g}", f"{case.card['CJO']:g}"])
    return "\n".join(lines) + "\n", truth


def regenerate(out_dir: Path = HERE, folder: Path = HERE) -> list[Path]:
    out = ngspice_tools.simulate_cases(out_dir, cases(folder), simulate)
    out.add("truth.csv",
            f"# reference values from the 10 ps transients of {out.version} (definitions in "
            f"regenerate.py: reference_values); SI units\n"
            f"# regenerate: python tests/reference/ngspice/recovery/regenerate.py\n"
            + TRUTH_HEADER + "\n" + "\n".join(out.rows) + "\n")
    return out.paths


def numbers(path: Path) -> np.ndarray:
    return ngspice_tools.csv_numbers(path)


def main(argv: list[str] | None = None) -> int:
    return ngspice_tools.regenerate_main(argv, doc=__doc__, folder=HERE, regenerate=regenerate,
                                         numbers=numbers)


if __name__ == "__main__":
    sys.exit(main())
