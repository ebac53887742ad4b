"""A corpus of broken inputs, each with its exact outcome.

Every case starts from the same small demo reel (``kinset demo``, 20 devices: invented
data, used here only as a well-formed surrounding for the broken file), breaks one
thing and runs what a user runs: the dataset's extraction, ``load_reel``, the
Touchstone index reader or ``load_profile``. The outcome is one of

* ``Error``: one :class:`kinset.errors.InputError` naming the file and the line
  and/or column, with the words that say what is wrong;
* ``Rejected``: the extraction finishes, the named device is ``rejected`` with its
  reason, and every other device of the reel keeps the status it has in the clean
  reel (none is lost, none gains a row);
* ``Accepted``: the extraction finishes and gives what the clean file gives (or the
  stated value), every other device unchanged.

What counts as broken comes from how instrument exports go wrong in practice
(common practice): truncated rows, ``;``-separated files with decimal commas
(spreadsheets in decimal-comma locales, which RFC 4180 does not cover), byte-order
marks and UTF-16 exports, Latin-1 bytes (UTF-8 is RFC 3629), missing or wrong
units (SI prefixes: BIPM SI Brochure, 9th ed., Table 7), duplicated ids, reversed
sign conventions, Touchstone files that do not parse (Touchstone File Format
Specification 2.0 for the option line), YAML typos (YAML 1.2 forbids duplicate
keys in a mapping, §3.2.1.1; tabs are not indentation, §6.1).
"""

from __future__ import annotations

import re
import shutil
from dataclasses import dataclass
from pathlib import Path
from typing import Callable

import pandas as pd
import pytest

from kinset.demo import write_demo
from kinset.errors import InputError
from kinset.registry import dataset as dataset_record
from kinset.io.reel import load_reel
from kinset.io.tables import MAX_ID_LENGTH
from kinset.io.touchstone import read_vna_index
from kinset.matching.profile import load_profile
from kinset.report.html import e as html_escape

DATASETS = ("forward", "leakage", "capacitance", "recovery")
SWEEP_HEADER = "device,position,current_A,voltage_V,temperature_C"
GOOD_ROW = "D901,90,1.0e-3,0.62,25"


# --------------------------------------------------------------------------- outcomes

@dataclass
class Error:
    """Loading ``target`` raises InputError naming ``file`` (relative to the reel)."""

    file: str
    line: int | None
    column: str | None
    words: str


@dataclass
class Rejected:
    """``device`` ends rejected with ``words`` in its note; the rest keep their status."""

    device: str
    words: str


@dataclass
class Accepted:
    """The extraction succeeds; ``check(table, clean, extras)`` holds; the rest keep their status."""

    check: Callable[..., None] | None = None   # (table, clean table, side tables)
    devices: tuple[str, ...] = ()       # devices the case adds or changes


@dataclass
class Case:
    name: str
    target: str                         # a dataset, "reel", "index" or "profile"
    mutate: Callable[[Path], None]
    outcome: Error | Rejected | Accepted


# --------------------------------------------------------------------------- file helpers

def put(rel: str, data: str | bytes) -> Callable[[Path], None]:
    def go(reel: Path) -> None:
        p = reel / rel
        p.parent.mkdir(parents=True, exist_ok=True)
        p.write_bytes(data if isinstance(data, bytes) else data.encode("utf-8"))
    return go


def edit(rel: str, change: Callable[[str], str]) -> Callable[[Path], None]:
    def go(reel: Path) -> None:
        p = reel / rel
        before = p.read_text(encoding="utf-8")
        after = change(before)
        assert after != before, f"the case's edit no longer changes {rel}: fix the case"
        p.write_text(after, encoding="utf-8")
    return go


def edit_bytes(rel: str, change: Callable[[bytes], bytes]) -> Callable[[Path], None]:
    def go(reel: Path) -> None:
        p = reel / rel
        before = p.read_bytes()
        after = change(before)
        assert after != before, f"the case's edit no longer changes {rel}: fix the case"
        p.write_bytes(after)
    return go


def both(*steps: Callable[[Path], None]) -> Callable[[Path], None]:
    def go(reel: Path) -> None:
        for step in steps:
            step(reel)
    return go


def rows_of(text: str, device: str) -> list[str]:
    return [line for line in text.splitlines() if line.startswith(device + ",")]


def copy_device(src: str, dst_file: str, header: str, device: str, new_id: str,
                change: Callable[[list[str]], list[str]] = lambda a: a) -> Callable[[Path], None]:
    """Write ``dst_file`` with ``device``'s rows of ``src`` under ``new_id``, each changed."""
    def go(reel: Path) -> None:
        out = [header]
        for line in rows_of((reel / src).read_text(encoding="utf-8"), device):
            cells = line.split(",")
            cells[0] = new_id
            out.append(",".join(change(cells)))
        (reel / dst_file).write_text("\n".join(out) + "\n", encoding="utf-8")
    return go


def negate(cols: tuple[int, ...]) -> Callable[[list[str]], list[str]]:
    def go(cells: list[str]) -> list[str]:
        for c in cols:
            cells[c] = cells[c][1:] if cells[c].startswith("-") else "-" + cells[c]
        return cells
    return go


def scale(col: int, factor: float) -> Callable[[list[str]], list[str]]:
    def go(cells: list[str]) -> list[str]:
        cells[col] = repr(float(cells[col]) * factor)
        return cells
    return go


def shift(col: int, by: float) -> Callable[[list[str]], list[str]]:
    def go(cells: list[str]) -> list[str]:
        cells[col] = repr(float(cells[col]) + by)
        return cells
    return go


def in_rows(device: str, change: Callable[[list[str]], list[str]]) -> Callable[[str], str]:
    """Apply ``change`` to the cells of every row of ``device`` in a CSV text."""
    def go(text: str) -> str:
        return "\n".join(",".join(change(line.split(","))) if line.startswith(device + ",")
                         else line for line in text.splitlines()) + "\n"
    return go


def semicolons(text: str) -> str:
    """The same table as a decimal-comma locale's spreadsheet exports it."""
    out = []
    for line in text.splitlines():
        out.append(line if line.startswith("#") else line.replace(",", ";").replace(".", ","))
    return "\n".join(out) + "\n"


def touchstone_in(unit: str, factor: float) -> Callable[[str], str]:
    """Rewrite a Hz Touchstone v1 file with its frequencies in ``unit``."""
    def go(text: str) -> str:
        out = []
        for line in text.splitlines():
            if line.startswith("#"):
                out.append(line.replace("# Hz", f"# {unit}"))
            elif line and line[0].isdigit():
                f, rest = line.split(" ", 1)
                out.append(f"{float(f) / factor!r} {rest}")
            else:
                out.append(line)
        return "\n".join(out) + "\n"
    return go


def index_rows(*rows: str) -> Callable[[Path], None]:
    """Append rows to capacitance/index.csv."""
    def go(reel: Path) -> None:
        p = reel / "capacitance" / "index.csv"
        p.write_text(p.read_text(encoding="utf-8") + "".join(r + "\n" for r in rows),
                     encoding="utf-8")
    return go


def inductor_s1p(bias: str) -> str:
    """A one-port of 0.5 ohm + 5 nH to ground (a short standard where the part should be),
    10 MHz-1 GHz: S11 = (Z - Z0)/(Z + Z0) (reflection coefficient, Kurokawa 1965)."""
    import numpy as np
    f = np.geomspace(1e7, 1e9, 51)
    s = (0.5 + 2j * np.pi * f * 5e-9 - 50) / (0.5 + 2j * np.pi * f * 5e-9 + 50)
    rows = (f"{a:.6e} {b.real:.9f} {b.imag:.9f}\n" for a, b in zip(f, s))
    return "# Hz S RI R 50\n" + "".join(rows)


def vna_device(new: str, files: Callable[[str], bytes | str]) -> Callable[[Path], None]:
    """A device measured only on the VNA: three files (from ``files(bias)``) and index rows."""
    def go(reel: Path) -> None:
        cap = reel / "capacitance"
        rows = []
        for bias in ("0", "2", "5"):
            name = f"vna_{new}_{bias}V.s1p"
            data = files(bias)
            if data is not None:
                (cap / name).write_bytes(data if isinstance(data, bytes) else data.encode())
            rows.append(f"{name},{new},{bias}.0,reflection")
        index_rows(*rows)(reel)
    return go


# --------------------------------------------------------------------------- checks

def same_values(columns: tuple[str, ...], devices: tuple[str, ...]):
    """The devices' values equal those of the clean reel (to 1e-9, for re-parsed text)."""
    def check(table: pd.DataFrame, clean: pd.DataFrame, extras=None) -> None:
        t, c = table.set_index("device"), clean.set_index("device")
        for d in devices:
            assert t.loc[d, "status"] == c.loc[d, "status"], (d, t.loc[d, "note"])
            for col in columns:
                assert t.loc[d, col] == pytest.approx(c.loc[d, col], rel=1e-9), (d, col)
    return check


def note_has(device: str, words: str, status: str = "ok"):
    def check(table: pd.DataFrame, clean: pd.DataFrame, extras=None) -> None:
        row = table.set_index("device").loc[device]
        assert row["status"] == status, row["note"]
        assert words in row["note"]
    return check


def devices_are(*ids: str):
    def check(table: pd.DataFrame, clean: pd.DataFrame, extras=None) -> None:
        for d in ids:
            assert d in set(table["device"]), d
    return check


def _leak_reversed(table, clean, extras):
    # The signed sweep is read as magnitudes: the same values as the clean file.
    same_values(("ir_A_at_20V",), ("D004",))(table, clean)
    assert "negative (signed) readings taken as reverse magnitudes" in \
        table.set_index("device").loc["D004", "note"]


def _stray(table, clean, extras):
    # A Touchstone file the index does not list cannot be attributed to a device: it is
    # reported in the points table (no device id) with the reason; the devices are unchanged.
    pts = extras["points"]
    row = pts[pts["source"].astype(str).str.endswith("stray.s1p")]
    assert len(row) == 1 and row["device"].iloc[0] == ""
    assert row["status"].iloc[0] == "rejected"
    assert row["note"].iloc[0].startswith("stray.s1p: not listed in capacitance/index.csv")




FWD = ("is_A", "n", "rs_ohm")
A = "forward/batch_a_sweep.csv"          # D001-D006, header on line 5
E = "forward/batch_e_supply.csv"         # D019-D020, supply and resistor readings
LK = "leakage/leak_01.csv"
CV = "capacitance/cv_01.csv"
RR = "recovery/rr_01.csv"
ZZ = "forward/zz_broken.csv"
PROFILE = "profiles/my_app.yaml"
PROFILE_OK = ("name: my app\nset_size: 2\nmatch:\n"
              "  - {quantity: forward_voltage, at_current_A: 1.0e-3, tolerance_V: 0.002}\n")


def sweep(*rows: str) -> str:
    return SWEEP_HEADER + "\n" + "".join(r + "\n" for r in rows)


CASES = [
    # ---------------------------------------------------------------- forward sweep
    Case("fwd_truncated_row", "forward", put(ZZ, sweep(GOOD_ROW, "D901,90,2.0e-3,")),
         Error(ZZ, 3, "voltage_V", "empty (a truncated row?)")),
    Case("fwd_truncated_mid_cell_no_newline", "forward",
         put(ZZ, (sweep(GOOD_ROW) + "D901,90,2.0e-3").encode()),
         Error(ZZ, 3, "voltage_V", "empty (a truncated row?)")),
    Case("fwd_semicolon_decimal_comma", "forward", edit(A, semicolons),
         Accepted(same_values(FWD, ("D001", "D004", "D006")))),
    Case("fwd_semicolon_mixed_decimal_marks", "forward",
         put(ZZ, "device;current_A;voltage_V\nD901;1,0e-3;0,62\nD901;2.0e-3;0.64\n"),
         Error(ZZ, 3, "current_A", "ambiguous")),
    Case("fwd_semicolon_thousands_separator", "forward",
         put(ZZ, "device;current_uA;voltage_mV\nD901;1.000,5;620\n"),
         Error(ZZ, 2, "current_uA", "thousands separator")),
    Case("fwd_comma_file_with_decimal_commas", "forward",
         put(ZZ, "device,current_A,voltage_V\nD901,0,001,0,62\n"),
         Error(ZZ, 2, None, "more fields than the header (5 > 3) (decimal commas?")),
    Case("fwd_byte_order_mark", "forward", edit_bytes(A, lambda b: b"\xef\xbb\xbf" + b),
         Accepted(same_values(FWD, ("D001", "D006")))),
    Case("fwd_utf16_export", "forward", put(ZZ, sweep(GOOD_ROW).encode("utf-16")),
         Error(ZZ, 1, None, "UTF-16")),
    Case("fwd_latin1_byte", "forward", put(ZZ, sweep(GOOD_ROW).encode() + b"D\xe9,1,1e-3,0.6,25\n"),
         Error(ZZ, 3, None, "byte 0xe9 is not valid UTF-8")),
    Case("fwd_missing_unit_suffix", "forward", put(ZZ, "device,current,voltage_V\nD901,1e-3,0.6\n"),
         Error(ZZ, 1, "current", "has no unit")),
    Case("fwd_unknown_prefix", "forward", put(ZZ, "device,current_xA,voltage_V\nD901,1,0.6\n"),
         Error(ZZ, 1, "current_xA", "unknown SI prefix 'x'")),
    Case("fwd_text_in_number", "forward", put(ZZ, sweep(GOOD_ROW, "D901,90,2 mA,0.64,25")),
         Error(ZZ, 3, "current_A", "'2 mA' is not a finite number")),
    Case("fwd_nan", "forward", put(ZZ, sweep(GOOD_ROW, "D901,90,2e-3,NaN,25")),
         Error(ZZ, 3, "voltage_V", "'NaN' is not a finite number")),
    Case("fwd_inf", "forward", put(ZZ, sweep("D901,90,inf,0.62,25")),
         Error(ZZ, 2, "current_A", "'inf' is not a finite number")),
    Case("fwd_empty_file", "forward", put(ZZ, b""), Error(ZZ, None, None, "no header and no data")),
    Case("fwd_header_only", "forward", put(ZZ, "# exported\n" + SWEEP_HEADER + "\n"),
         Error(ZZ, 2, None, "header but no data rows")),
    Case("fwd_unclosed_quote", "forward", put(ZZ, sweep(GOOD_ROW, '"D902,90,1e-3,0.6,25')),
         Error(ZZ, 3, None, "double quote is never closed")),
    Case("fwd_quoted_line_break", "forward", put(ZZ, sweep('"D9\n02",90,1e-3,0.6,25', GOOD_ROW)),
         Error(ZZ, 2, None, "runs over a line break")),
    Case("fwd_old_mac_line_ends", "forward", edit_bytes(A, lambda b: b.replace(b"\n", b"\r")),
         Accepted(same_values(FWD, ("D001", "D006")))),
    Case("fwd_duplicate_id_conflicting", "forward",
         copy_device(A, "forward/zz_dup.csv", SWEEP_HEADER, "D002", "D001", shift(3, 0.05)),
         Rejected("D001", "readings in 2 files (batch_a_sweep.csv, zz_dup.csv) disagree")),
    Case("fwd_duplicate_id_agreeing", "forward",
         copy_device(A, "forward/zz_dup.csv", SWEEP_HEADER, "D001", "D001"),
         Accepted(note_has("D001", "readings from 2 files combined"), ("D001",))),
    Case("fwd_negative_forward_current", "forward", edit(A, in_rows("D003", negate((2,)))),
         Rejected("D003", "no usable forward reading; 23 reading(s) with zero or negative current")),
    Case("fwd_reversed_sign_convention", "forward", edit(A, in_rows("D003", negate((2, 3)))),
         Rejected("D003", "reversed leads or sign convention")),
    # Unit slips (issue 15, plausibility): numbers in mA or mV under an A or V column give
    # readings no small-signal part gives (bounds in kinset.fitting.plausible, from memory);
    # the part is rejected with a note naming the column and the likely unit (SI prefixes:
    # BIPM SI Brochure, 9th ed., Table 7: 20 mA read as A is 20 A).
    Case("fwd_mA_in_A_column", "forward",
         copy_device("forward/batch_b_sweep_mA.csv", ZZ,
                     "device,position,current_A,voltage_mV,temperature_C", "D007", "D901"),
         Rejected("D901", "forward currents up to 20 A in column current_A: this looks like "
                          "mA written as A")),
    Case("fwd_mV_in_V_column", "forward",
         copy_device("forward/batch_b_sweep_mA.csv", ZZ,
                     "device,position,current_mA,voltage_V,temperature_C", "D007", "D901"),
         Rejected("D901", "in column voltage_V: this looks like mV written as V")),
    # ---------------------------------------------------------------- forward supply form
    Case("supply_zero_resistance", "forward",
         put(ZZ, "device,supply_V,resistance_ohm,voltage_V\nD901,5,1000,0.6\nD901,5,0,0.7\n"),
         Error(ZZ, 3, "resistance_ohm", "resistance must be positive (got 0)")),
    Case("supply_unknown_prefix", "forward",
         put(ZZ, "device,supply_V,resistance_Kohm,voltage_V\nD901,5,1,0.6\n"),
         Error(ZZ, 1, "resistance_Kohm", "unknown SI prefix 'K'")),
    Case("supply_wrong_unit", "forward",
         put(ZZ, "device,supply_V,resistance_A,voltage_V\nD901,5,1,0.6\n"),
         Error(ZZ, 1, "resistance_A", "not a resistance unit")),
    Case("supply_below_diode_voltage", "forward",
         edit(E, in_rows("D019", lambda c: c[:2] + ["0.1"] + c[3:])),
         Rejected("D019", "no usable forward reading; 6 reading(s) with zero or negative current")),
    Case("supply_semicolon_decimal_comma", "forward", edit(E, semicolons),
         Accepted(same_values(FWD, ("D019", "D020")))),
    # ---------------------------------------------------------------- leakage
    Case("leak_reversed_sign_convention", "leakage", edit(LK, in_rows("D004", negate((1, 2)))),
         Accepted(_leak_reversed)),
    Case("leak_duplicate_id_conflicting", "leakage",
         copy_device(LK, "leakage/zz_dup.csv", "device,reverse_voltage_V,reverse_current_A,"
                     "temperature_C", "D002", "D001", scale(2, 1000.0)),
         Rejected("D001", "readings in 2 files (leak_01.csv, zz_dup.csv) disagree")),
    Case("leak_nA_in_A_column", "leakage",
         copy_device(LK, "leakage/zz.csv", "device,reverse_voltage_V,reverse_current_A,"
                     "temperature_C", "D002", "D901", scale(2, 1e9)),
         Rejected("D901", "in column reverse_current_A: this looks like nA written as A")),
    Case("leak_mV_in_V_column", "leakage",
         copy_device(LK, "leakage/zz.csv", "device,reverse_voltage_V,reverse_current_A,"
                     "temperature_C", "D002", "D901", scale(1, 1e3)),
         Rejected("D901", "reverse voltages up to 80 kV in column reverse_voltage_V: this "
                          "looks like mV written as V")),
    Case("leak_text_in_number", "leakage",
         put("leakage/zz.csv", "device,reverse_voltage_V,reverse_current_nA\nD901,20,3.5nA\n"),
         Error("leakage/zz.csv", 2, "reverse_current_nA", "'3.5nA' is not a finite number")),
    Case("leak_wrong_unit", "leakage",
         put("leakage/zz.csv", "device,reverse_voltage_V,reverse_current_V\nD901,20,3.5\n"),
         Error("leakage/zz.csv", 1, "reverse_current_V", "not a current unit")),
    Case("leak_missing_column", "leakage",
         put("leakage/zz.csv", "device,reverse_voltage_V,current_A\nD901,20,3.5e-9\n"),
         Error("leakage/zz.csv", 1, None, "missing required column(s): reverse_current_A")),
    # ---------------------------------------------------------------- capacitance C–V
    Case("cv_frequency_units_mixed_across_files", "capacitance",
         edit(CV, lambda t: t.replace("capacitance_pF,frequency_Hz", "capacitance_pF,frequency_MHz")
              .replace(",1000000\n", ",1\n")),
         Accepted(same_values(("cj0_F", "vj_V", "m"), ("D001", "D002")))),
    Case("cv_two_frequency_columns", "capacitance",
         put("capacitance/zz.csv", "device,reverse_voltage_V,capacitance_pF,frequency_Hz,"
             "frequency_MHz\nD901,0,2,1000000,1\n"),
         Error("capacitance/zz.csv", 1, "frequency_MHz", "appears twice")),
    Case("cv_wrong_unit_case", "capacitance",
         put("capacitance/zz.csv", "device,reverse_voltage_V,capacitance_pf\nD901,0,2\n"),
         Error("capacitance/zz.csv", 1, "capacitance_pf", "not a capacitance unit")),
    Case("cv_duplicate_id_conflicting", "capacitance",
         copy_device(CV, "capacitance/zz_dup.csv", "device,reverse_voltage_V,capacitance_pF,"
                     "frequency_Hz", "D001", "D001", scale(2, 2.0)),
         Rejected("D001", "C–V points in 2 files (cv_01.csv, zz_dup.csv) disagree")),
    Case("cv_pF_in_F_column", "capacitance",
         copy_device(CV, "capacitance/zz.csv", "device,reverse_voltage_V,capacitance_F,"
                     "frequency_Hz", "D001", "D901"),
         Rejected("D901", "capacitances up to 1.76 F in column capacitance_F: this looks like "
                          "pF written as F")),
    Case("cv_negative_capacitance", "capacitance", edit(CV, in_rows("D001", negate((2,)))),
         Rejected("D001", "no usable capacitance point")),
    Case("cv_semicolon_decimal_comma", "capacitance", edit(CV, semicolons),
         Accepted(same_values(("cj0_F", "vj_V", "m"), ("D001", "D010")))),
    # ---------------------------------------------------------------- index + Touchstone
    Case("index_path_outside_reel", "capacitance", index_rows("../../elsewhere.s1p,D901,0,reflection"),
         Error("capacitance/index.csv", 22, "file", "outside the reel folder")),
    Case("index_absolute_path", "index", index_rows("/etc/passwd,D901,0,reflection"),
         Error("capacitance/index.csv", 22, "file", "is an absolute path")),
    Case("index_fixture_typo", "index", index_rows("vna_D002_0V.s1p,D901,0,reflektion"),
         Error("capacitance/index.csv", 22, "fixture", "fixture 'reflektion' is not one of")),
    Case("index_missing_fixture_column", "index",
         put("capacitance/index.csv", "file,device,reverse_voltage_V\nx.s1p,D901,0\n"),
         Error("capacitance/index.csv", 1, None, "missing required column 'fixture'")),
    Case("touchstone_does_not_parse", "capacitance",
         vna_device("D901", lambda b: "# Hz S RI R 50\n1e7 0.99 abc\n"),
         Rejected("D901", "does not parse as a Touchstone file")),
    Case("touchstone_empty_file", "capacitance", vna_device("D901", lambda b: b""),
         Rejected("D901", "vna_D901_0V.s1p: file is empty")),
    Case("touchstone_missing_file", "capacitance", vna_device("D901", lambda b: None),
         Rejected("D901", "vna_D901_0V.s1p: file not found")),
    Case("touchstone_wrong_port_count", "capacitance",
         both(vna_device("D901", lambda b: ""),
              lambda reel: [shutil.copy(reel / "capacitance" / f"vna_D002_{b}V.s1p",
                                        reel / "capacitance" / f"vna_D901_{b}V.s1p")
                            for b in ("0", "2", "5")],
              edit("capacitance/index.csv",
                   lambda t: re.sub(r"(vna_D901_\dV)\.s1p,D901,(\S+),reflection",
                                    r"\1.s1p,D901,\2,series", t))),
         Rejected("D901", "has 1 port(s), but the series fixture needs a 2-port file")),
    Case("touchstone_frequency_units_mixed", "capacitance",
         both(edit("capacitance/vna_D002_0V.s1p", touchstone_in("GHz", 1e9)),
              edit("capacitance/vna_D002_2V.s1p", touchstone_in("MHz", 1e6)),
              edit("capacitance/vna_D002_5V.s1p", touchstone_in("kHz", 1e3))),
         Accepted(same_values(("cj0_F", "vj_V", "m"), ("D002",)))),
    Case("touchstone_inductive", "capacitance", vna_device("D901", inductor_s1p),
         Rejected("D901", "vna_D901_0V.s1p: after the empty fixture is removed, not a capacitance: "
                          "inductive at every frequency")),
    Case("touchstone_not_listed", "capacitance",
         lambda reel: shutil.copy(reel / "capacitance" / "vna_D002_0V.s1p",
                                  reel / "capacitance" / "stray.s1p"),
         Accepted(_stray)),
    # ---------------------------------------------------------------- recovery
    Case("rr_reversed_sign_convention", "recovery", edit(RR, in_rows("D004", negate((2,)))),
         Rejected("D004", "the sign is inverted: positive current is forward")),
    Case("rr_duplicate_id_conflicting", "recovery",
         copy_device(RR, "recovery/zz_dup.csv", "device,time_ns,current_mA", "D002", "D001",
                     scale(1, 3.0)),
         Rejected("D001", "captures in 2 files (rr_01.csv, zz_dup.csv) disagree")),
    Case("rr_truncated_row", "recovery",
         put("recovery/zz.csv", "device,time_ns,current_mA\nD901,0,10\nD901,0.1\n"),
         Error("recovery/zz.csv", 3, "current_mA", "empty (a truncated row?)")),
    Case("rr_semicolon_decimal_comma", "recovery", edit(RR, semicolons),
         Accepted(same_values(("trr_s", "qrr_C"), ("D001", "D012")))),
    # ---------------------------------------------------------------- reel.yaml
    Case("reel_top_level_typo", "reel", edit("reel.yaml", lambda t: t.replace("accuracy:", "acuracy:")),
         Error("reel.yaml", 12, "acuracy", "unknown key 'acuracy'")),
    Case("reel_nested_typo", "reel",
         edit("reel.yaml", lambda t: t.replace("breakdown_current_A", "breakdown_curent_A")),
         Error("reel.yaml", 23, "leakage.breakdown_curent_A", "unknown key 'breakdown_curent_A'")),
    Case("reel_duplicate_key", "reel", edit("reel.yaml", lambda t: t + "material: germanium\n"),
         Error("reel.yaml", 28, "material", "appears twice in one mapping (first on line 6)")),
    Case("reel_tab_indentation", "reel",
         edit("reel.yaml", lambda t: t.replace("  voltage: {", "\tvoltage: {")),
         Error("reel.yaml", 13, None, "found character '\\t'")),
    Case("reel_latin1_byte", "reel", edit_bytes("reel.yaml", lambda b: b.replace(b"glass", b"gl\xe4ss")),
         Error("reel.yaml", 5, None, "byte 0xe4 is not valid UTF-8")),
    Case("reel_not_a_number", "reel",
         edit("reel.yaml", lambda t: t.replace("reference_temperature_C: 25", "reference_temperature_C: .nan")),
         Error("reel.yaml", 7, "reference_temperature_C", "nan is not a finite number")),
    Case("reel_python_tag", "reel",
         edit("reel.yaml", lambda t: t.replace("material: silicon", "material: !!python/object/apply:os.system ['true']")),
         Error("reel.yaml", 6, None, "not valid YAML")),
    Case("reel_byte_order_mark", "reel", edit_bytes("reel.yaml", lambda b: b"\xef\xbb\xbf" + b),
         Accepted()),
    # A misspelt application is caught when the reel is read, with the nearest name.
    Case("reel_application_typo", "reel",
         edit("reel.yaml", lambda t: t.replace("ring_mixer_quad]", "ring_mixr_quad]")),
         Error("reel.yaml", 27, "applications.1", "did you mean 'ring_mixer_quad'?")),
    Case("reel_application_file_missing", "reel",
         edit("reel.yaml", lambda t: t.replace("ring_mixer_quad]", "profiles/mine.yaml]")),
         Error("reel.yaml", 27, "applications.1", "'profiles/mine.yaml' not found in the reel folder")),
    # ---------------------------------------------------------------- application profiles
    Case("profile_unknown_quantity", "profile", put(PROFILE, PROFILE_OK.replace("forward_voltage", "forward_volts")),
         Error(PROFILE, 4, "match.0.quantity", "forward_volts")),
    Case("profile_key_typo", "profile", put(PROFILE, PROFILE_OK.replace("set_size", "setsize")),
         Error(PROFILE, 2, "setsize", "unknown key 'setsize'")),
    Case("profile_duplicate_key", "profile", put(PROFILE, PROFILE_OK + "set_size: 4\n"),
         Error(PROFILE, 5, "set_size", "appears twice in one mapping (first on line 2)")),
    Case("profile_text_for_number", "profile", put(PROFILE, PROFILE_OK.replace("set_size: 2", "set_size: two")),
         Error(PROFILE, 2, "set_size", "'two' is not of type 'integer'")),
    Case("profile_infinite_tolerance", "profile", put(PROFILE, PROFILE_OK.replace("0.002", ".inf")),
         Error(PROFILE, 4, "match.0.tolerance_V", "inf is not a finite number")),
    Case("profile_unclosed_bracket", "profile", put(PROFILE, PROFILE_OK.replace("0.002}", "0.002")),
         Error(PROFILE, 5, None, "not valid YAML")),
    Case("profile_utf16", "profile", put(PROFILE, PROFILE_OK.encode("utf-16")), Error(PROFILE, 1, None, "UTF-16")),
    # ---------------------------------------------------------------- hostile part ids
    Case("id_html", "forward", put(ZZ, sweep(*(f"<script>alert(1)</script>,90,{i:.1e},{0.5 + 0.05 * k:.3f},25"
                                                for k, i in enumerate((1e-5, 1e-4, 1e-3, 1e-2))))),
         Accepted(devices_are("<script>alert(1)</script>"), ("<script>alert(1)</script>",))),
    Case("id_control_character", "forward", put(ZZ, sweep(GOOD_ROW, "D9\x1b[31m02,90,1e-3,0.6,25")),
         Error(ZZ, 3, "device", "control character U+001B")),
    Case("id_nul_byte", "forward", put(ZZ, sweep(GOOD_ROW, "D9\x0002,90,1e-3,0.6,25")),
         Error(ZZ, 3, "device", "control character U+0000")),
    Case("id_too_long", "forward", put(ZZ, sweep(GOOD_ROW, "D" * (MAX_ID_LENGTH + 1) + ",90,1e-3,0.6,25")),
         Error(ZZ, 3, "device", f"{MAX_ID_LENGTH + 1} characters long, more than the {MAX_ID_LENGTH}")),
    Case("id_numeric_looking", "forward", put(ZZ, sweep("001,90,1e-3,0.60,25", "1,91,1e-3,0.61,25",
                                                          "1.0,92,1e-3,0.62,25")),
         Accepted(devices_are("001", "1", "1.0"), ("001", "1", "1.0"))),
    Case("id_blank", "forward", put(ZZ, sweep(GOOD_ROW, "   ,90,1e-3,0.6,25")),
         Error(ZZ, 3, "device", "'device' is empty")),
]


# --------------------------------------------------------------------------- running

@pytest.fixture(scope="module")
def demo(tmp_path_factory) -> Path:
    return write_demo(tmp_path_factory.mktemp("demo") / "reel", devices=20, seed=412)


_CLEAN: dict[str, pd.DataFrame] = {}


def clean_table(demo: Path, dataset: str) -> pd.DataFrame:
    if dataset not in _CLEAN:
        _CLEAN[dataset] = dataset_record(dataset).extract(load_reel(demo), []).table
    return _CLEAN[dataset]


def _run(case: Case, reel: Path):
    if case.target == "reel":
        return load_reel(reel)
    if case.target == "profile":
        return load_profile(str(reel / PROFILE))
    if case.target == "index":
        return read_vna_index(reel / "capacitance" / "index.csv")
    return dataset_record(case.target).extract(load_reel(reel), [])


def test_corpus_is_large_and_covers_every_input():
    names = [c.name for c in CASES]
    assert len(names) == len(set(names)) and len(CASES) >= 30
    assert {c.target for c in CASES} >= set(DATASETS) | {"reel", "index", "profile"}


@pytest.mark.parametrize("case", CASES, ids=lambda c: c.name)
def test_corpus_case(case: Case, demo: Path, tmp_path: Path):
    reel = tmp_path / "reel"
    shutil.copytree(demo, reel)
    case.mutate(reel)
    out = case.outcome
    if isinstance(out, Error):
        with pytest.raises(InputError) as err:
            _run(case, reel)
        e = err.value
        assert e.file == str(reel / out.file), str(e)
        assert (e.line, e.column) == (out.line, out.column), str(e)
        assert out.words in e.message, str(e)
        assert str(e).startswith(str(reel / out.file))
        return
    result = _run(case, reel)
    if case.target not in DATASETS:
        assert isinstance(out, Accepted)
        return
    clean = clean_table(demo, case.target)
    table = result.table
    touched = {out.device} if isinstance(out, Rejected) else set(out.devices)
    if isinstance(out, Rejected):
        row = table.set_index("device").loc[out.device]
        assert row["status"] == "rejected", row["note"]
        assert out.words in row["note"], row["note"]
    elif out.check is not None:
        out.check(table, clean, result.extras)
    # The rest of the reel is intact: every clean device is still there, with its status.
    now = table[table["device"] != ""].set_index("device")["status"]
    before = clean.set_index("device")["status"]
    assert set(before.index) <= set(now.index)
    assert set(now.index) - set(before.index) <= touched
    others = [d for d in before.index if d not in touched]
    pd.testing.assert_series_equal(now.loc[others], before.loc[others])


def test_html_ids_are_kept_verbatim_and_escaped_in_the_page():
    # HTML 5 §13.1.2.6 (escapable text): '<' and '&' must be written as character
    # references; the whole page is checked with a parser in test_report.py.
    hostile = "<script>alert(1)</script>"
    assert html_escape(hostile) == "&lt;script&gt;alert(1)&lt;/script&gt;"
