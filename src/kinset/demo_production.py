"""A large synthetic reel as an automatic tester exports it: ``kinset demo --layout batches``.

The devices are drawn as for the workshop reel (:func:`kinset.demo.demo_parameters`),
and every part is measured on every station with one fixed format:

* forward: 40 log-spaced forced currents 10 µA..20 mA with self-heating, fixture
  temperature per part (``device, position, current_A, voltage_V, temperature_C``);
* leakage: 30 reverse voltages 1..80 V; a sweep that reaches the source's 1 mA limit
  stops there and reports the voltage reached (the parts that break down early);
* capacitance: C–V at 8 biases for every part, and for a tenth of the parts VNA one-port
  reflection files (Touchstone v1) at 3 biases listed in ``capacitance/index.csv``,
  with the empty fixture at each bias;
* recovery: waveforms of 2,000 samples (20 ps apart) for every part.

Files come as the tester writes them: one file per station and batch of
``BATCH_PARTS`` consecutive part numbers (``fwd_b0001.csv`` holds D00001..D00250
whatever the reel's length, so a new batch is a new file and changes no other), or with
``layout="per-part"`` one file per part and station (``fwd_D00001.csv``).

The text is formatted with numpy (a 10,000-part reel is ~0.5 GB of text, most of it
recovery waveforms): the same devices and seed give byte-identical files.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from kinset.demo import (CV_FREQUENCY, CV_VOLTAGES, FIXTURE_CAPACITANCE,
                         FIXTURE_LOSS_TANGENT, FORWARD_NOISE_V, LEAKAGE_COMPLIANCE,
                         RECOVERY_START, VNA_FREQUENCIES, VNA_NOISE, VNA_VOLTAGES, Z0,
                         as_read, compliance_voltage, cv_readings, fixed_text,
                         leakage_readings, recovery_readings, sci_text, sweep_voltages)
from kinset.io.output import atomic_output
from kinset.physics.capacitance import (junction_capacitance, reflection_coefficient,
                                        series_rlc_impedance)
from kinset.physics.constants import ZERO_CELSIUS
from kinset.registry import DATASETS

BATCH_PARTS = 250
LAYOUTS = ("batches", "per-part")
FORWARD_CURRENTS = np.geomspace(1e-5, 2e-2, 40)                         # [A]
LEAKAGE_VOLTAGES = np.array([1, 2, 3, 4, 5, 6, 7, 8, 10, 12, 14, 16, 18, 20, 22, 25, 28,
                             30, 33, 36, 40, 45, 50, 55, 60, 65, 70, 75, 78, 80],
                            dtype=float)                                 # [V]
RECOVERY_SAMPLES = 2000
RECOVERY_STEP = 0.02e-9                                                  # [s]
VNA_SHARE = 0.1                                                          # of the parts
PREFIX = {d.name: d.short for d in DATASETS}                           # file name stems


# --------------------------------------------------------------------------- text in bulk
# A column of text is a byte matrix (rows, width) and a mask of the bytes in use; rows
# are joined by masking the concatenated matrix, without a Python loop over rows.

def _text(strings) -> tuple[np.ndarray, np.ndarray]:
    a = np.asarray(strings, dtype="S")
    chars = a.view(np.uint8).reshape(len(a), a.dtype.itemsize)
    return chars, chars != 0


def _numbers(values, decimals: int) -> tuple[np.ndarray, np.ndarray]:
    """Fixed-point text of many numbers: '-12.345' (rounded first: never '-0.000')."""
    k = np.rint(np.asarray(values, dtype=float).ravel() * 10.0 ** decimals).astype(np.int64)
    neg = k < 0
    whole, frac = np.divmod(np.abs(k), 10 ** decimals)
    digits = np.ones(len(k), dtype=np.int64)
    while (whole >= 10 ** digits).any():
        digits += whole >= 10 ** digits
    width = int(digits.max()) + 1                 # one more for the sign
    chars = np.empty((len(k), width + 1 + decimals), dtype=np.uint8)
    mask = np.ones(chars.shape, dtype=bool)
    for c in range(width):
        r = width - 1 - c                         # power of ten of this column
        used = r < digits
        chars[:, c] = np.where(used, 48 + (whole // 10 ** r) % 10, 45)
        mask[:, c] = used | ((r == digits) & neg)
    chars[:, width] = 46
    for j in range(decimals):
        chars[:, width + 1 + j] = 48 + (frac // 10 ** (decimals - 1 - j)) % 10
    return chars, mask


def _rows(columns, sep: str = ",") -> tuple[bytes, np.ndarray]:
    """Rows of the columns joined by ``sep``; returns the bytes and each row's length."""
    parts, masks = [], []
    n = len(columns[0][0])
    for j, (chars, mask) in enumerate(columns):
        end = 10 if j == len(columns) - 1 else ord(sep)
        parts += [chars, np.full((n, 1), end, dtype=np.uint8)]
        masks += [mask, np.ones((n, 1), dtype=bool)]
    chars, mask = np.hstack(parts), np.hstack(masks)
    return chars[mask].tobytes(), mask.sum(axis=1)


def _repeat(col, k):
    return np.repeat(col[0], k, axis=0), np.repeat(col[1], k, axis=0)


def _tile(col, k):
    return np.tile(col[0], (k, 1)), np.tile(col[1], (k, 1))


# --------------------------------------------------------------------------- files

class _Writer:
    """Cuts a station's rows into files per batch or per part, each with its header."""

    def __init__(self, out, dataset: str, layout: str, reel: str, header: list[str],
                 comments: list[str]):
        self.out, self.dataset, self.layout = out, dataset, layout
        self.head = [f"kinset demo reel {reel}: synthetic data (every value is invented)"] \
            + comments
        self.header = ",".join(header) + "\n"

    def add(self, devices, batch: int, body: bytes, row_lengths, rows_per_device) -> None:
        """Rows of ``devices`` (in order, ``rows_per_device`` each) of batch ``batch``."""
        ends = np.cumsum(row_lengths)[np.cumsum(rows_per_device) - 1]
        starts = np.concatenate([[0], ends[:-1]])
        prefix = PREFIX[self.dataset]
        if self.layout == "batches":
            groups = [(f"{prefix}_b{batch:04d}", devices[0], devices[-1], 0, len(body))]
        else:
            groups = [(f"{prefix}_{d}", d, d, a, b) for d, a, b in zip(devices, starts, ends)]
        for name, first, last, a, b in groups:
            what = f"part {first}" if first == last else f"parts {first}-{last}"
            head = "".join(f"# {c}\n" for c in self.head[:1] + [f"{self.head[1]}, {what}"]
                           + self.head[2:])
            self.out[f"{self.dataset}/{name}.csv"] = head.encode() + self.header.encode() \
                + body[a:b]


def _batches(p: pd.DataFrame):
    """(batch number, its parts) by part number: batch j holds positions (j-1)·B+1..j·B."""
    batch = (p["position"].to_numpy() - 1) // BATCH_PARTS + 1
    for j in np.unique(batch):
        yield int(j), p.iloc[np.flatnonzero(batch == j)]


def forward_files(p: pd.DataFrame, seed: int, reel: str, layout: str, out) -> None:
    rng = np.random.default_rng([seed, 12])
    cur_text = sci_text(FORWARD_CURRENTS, 4)
    cur = as_read(cur_text)
    k = len(cur)
    w = _Writer(out, "forward", layout, reel,
                ["device", "position", "current_A", "voltage_V", "temperature_C"],
                ["forward sweep", f"automatic tester, {k} log-spaced forced currents 10 uA.."
                 "20 mA, DC (the part self-heats in the fixture)",
                 "temperature_C is the fixture temperature read before each part"])
    cur_col = _text(cur_text)
    for j, sel in _batches(p):
        nd = len(sel)
        amb_text = fixed_text(25.0 + 0.15 * rng.standard_normal(nd), 1)
        amb = as_read(amb_text)[:, None] + ZERO_CELSIUS
        volt = sweep_voltages(sel, cur[None, :], amb)
        volt = volt + FORWARD_NOISE_V * rng.standard_normal(volt.shape)
        dev = sel["device"].to_numpy()
        body, lengths = _rows([_repeat(_text(dev), k),
                               _repeat(_text([str(x) for x in sel["position"]]), k),
                               _tile(cur_col, nd), _numbers(volt, 5),
                               _repeat(_text(amb_text), k)])
        w.add(dev, j, body, lengths, np.full(nd, k))


def leakage_files(p: pd.DataFrame, seed: int, reel: str, layout: str, out) -> None:
    rng = np.random.default_rng([seed, 13])
    w = _Writer(out, "leakage", layout, reel,
                ["device", "reverse_voltage_V", "reverse_current_A", "temperature_C"],
                ["reverse leakage", f"source-measure unit, {len(LEAKAGE_VOLTAGES)} reverse "
                 "voltages 1..80 V, current limit 1 mA",
                 "a sweep that reaches the current limit stops there; its last row is the "
                 "voltage reached at the limit"])
    k = len(LEAKAGE_VOLTAGES)
    for j, sel in _batches(p):
        nd = len(sel)
        temp_text, args, cur, noisy, v_noise, i_noise = leakage_readings(
            sel, LEAKAGE_VOLTAGES, rng)
        over = cur >= LEAKAGE_COMPLIANCE
        stop = np.where(over.any(axis=1), over.argmax(axis=1), k)
        # One more column for the reading at the current limit of the parts that reach it.
        v = np.hstack([np.tile(LEAKAGE_VOLTAGES, (nd, 1)), np.zeros((nd, 1))])
        i = np.hstack([noisy, np.zeros((nd, 1))])
        for d in np.flatnonzero(stop < k):
            lo = LEAKAGE_VOLTAGES[stop[d] - 1] if stop[d] else 0.0
            v[d, stop[d]] = compliance_voltage(args, d, lo, LEAKAGE_VOLTAGES[stop[d]]) \
                + 1e-3 * v_noise[d]
            i[d, stop[d]] = LEAKAGE_COMPLIANCE * (1 + 2e-4 * i_noise[d])
        keep = np.arange(k + 1)[None, :] < np.where(stop < k, stop + 1, k)[:, None]
        count = keep.sum(axis=1)
        dev = sel["device"].to_numpy()
        body, lengths = _rows([_repeat(_text(dev), count), _numbers(v[keep], 3),
                               _text(sci_text(i[keep], 4)), _repeat(_text(temp_text), count)])
        w.add(dev, j, body, lengths, count)


def capacitance_files(p: pd.DataFrame, seed: int, reel: str, layout: str, out) -> None:
    rng = np.random.default_rng([seed, 14])
    k = len(CV_VOLTAGES)
    w = _Writer(out, "capacitance", layout, reel,
                ["device", "reverse_voltage_V", "capacitance_pF", "frequency_Hz"],
                ["C-V", "LCR meter at 1 MHz, 30 mV test signal, open-corrected, room at 25 C"])
    bias, freq = _text(fixed_text(CV_VOLTAGES, 1)), _text([f"{CV_FREQUENCY:.0f}"])
    for j, sel in _batches(p):
        nd = len(sel)
        c = cv_readings(sel, rng)
        dev = sel["device"].to_numpy()
        body, lengths = _rows([_repeat(_text(dev), k), _tile(bias, nd),
                               _numbers(c * 1e12, 4), _tile(freq, nd * k)])
        w.add(dev, j, body, lengths, np.full(nd, k))
    _vna_files(p[p["capacitance"] == "cv+vna"], seed, reel, out)


def _touchstone(comments: list[str], s11: np.ndarray) -> bytes:
    """A one-port Touchstone v1 file, real/imaginary pairs, reference 50 ohm."""
    head = "".join(f"!{c}\n" for c in comments) + f"# Hz S RI R {Z0:.1f}\n"
    body, _ = _rows([_text([f"{f:.0f}" for f in VNA_FREQUENCIES]),
                     _numbers(s11.real, 6), _numbers(s11.imag, 6)], sep=" ")
    return head.encode() + body


def _vna_files(vna: pd.DataFrame, seed: int, reel: str, out) -> None:
    """Reflection of the packaged diode (RS, LS, Cj in series) with the fixture's own
    capacitance in parallel; an empty-fixture file per bias; the index of them all."""
    rng = np.random.default_rng([seed, 15])
    f = VNA_FREQUENCIES
    y_fixture = 2 * np.pi * f * FIXTURE_CAPACITANCE * (FIXTURE_LOSS_TANGENT + 1j)
    col = lambda name: vna[name].to_numpy()[:, None]
    rows = []
    for vr in VNA_VOLTAGES:
        name = f"open_{vr:.0f}V.s1p"
        noise = VNA_NOISE * (rng.standard_normal(len(f)) + 1j * rng.standard_normal(len(f)))
        out[f"capacitance/{name}"] = _touchstone(
            [f"kinset demo reel {reel}: synthetic data",
             f"empty fixture (open), bias supply at {vr:.0f} V"],
            reflection_coefficient(1.0 / y_fixture, Z0) + noise)
        rows.append((name, "open", vr))
    for vr in VNA_VOLTAGES:
        cj = junction_capacitance(vr, col("cjo_F"), col("vj_V"), col("m"))
        z = series_rlc_impedance(f[None, :], col("rs_ohm"), col("package_inductance_H"), cj)
        gamma = reflection_coefficient(1.0 / (1.0 / z + y_fixture), Z0)
        gamma = gamma + VNA_NOISE * (rng.standard_normal(gamma.shape)
                                     + 1j * rng.standard_normal(gamma.shape))
        for d, g in zip(vna["device"], gamma):
            name = f"vna_{d}_{vr:.0f}V.s1p"
            out[f"capacitance/{name}"] = _touchstone(
                [f"kinset demo reel {reel}: synthetic data",
                 f"{d} at {vr:.0f} V reverse bias in the fixture"], g)
            rows.append((name, d, vr))
    rows.sort(key=lambda r: (r[1] != "open", r[1], r[2]))
    head = [f"kinset demo reel {reel}: synthetic data (every value is invented)",
            "VNA one-port reflection files: 51 points 10 MHz..1 GHz, 50 ohm; device 'open' "
            "is the empty fixture at that bias"]
    body = "".join(f"{a},{b},{c:.1f},reflection\n" for a, b, c in rows)
    out["capacitance/index.csv"] = ("".join(f"# {h}\n" for h in head)
                                    + "file,device,reverse_voltage_V,fixture\n" + body).encode()


def recovery_files(p: pd.DataFrame, seed: int, reel: str, layout: str, out) -> None:
    rng = np.random.default_rng([seed, 16])
    k = RECOVERY_SAMPLES
    t_text = fixed_text((RECOVERY_START + RECOVERY_STEP * np.arange(k)) * 1e9, 2)
    t = as_read(t_text)[None, :] * 1e-9
    w = _Writer(out, "recovery", layout, reel, ["device", "time_ns", "current_mA"],
                ["reverse recovery", f"IF = IR = 10 mA (see reel.yaml), sampling scope, "
                 f"{k} samples 20 ps apart, current from the voltage across 50 ohm",
                 "time_ns is 0 near the zero crossing of the current; positive current "
                 "is forward"])
    time_col = _text(t_text)
    for j, sel in _batches(p):
        nd = len(sel)
        i = recovery_readings(sel, t, rng)
        dev = sel["device"].to_numpy()
        body, lengths = _rows([_repeat(_text(dev), k), _tile(time_col, nd),
                               _numbers(i * 1e3, 3)])
        w.add(dev, j, body, lengths, np.full(nd, k))


STATIONS = (forward_files, leakage_files, capacitance_files, recovery_files)


def production_parameters(p: pd.DataFrame, seed: int) -> pd.DataFrame:
    """The workshop draw, measured on every station; a tenth of the parts also on the VNA."""
    p = p.copy()
    n = len(p)
    rng = np.random.default_rng([seed, 11])
    p["forward_batch"] = [f"b{j:04d}" for j in (p["position"] - 1) // BATCH_PARTS + 1]
    p["capacitance"] = "cv"
    vna = rng.choice(n, max(1, round(VNA_SHARE * n)), replace=False)
    p.loc[p.index[np.sort(vna)], "capacitance"] = "cv+vna"
    p["recovery"] = True
    return p


class Folder:
    """Where the stations put their files: each is written as soon as it is made (a
    10,000-part reel never sits in memory as a whole)."""

    def __init__(self, folder: Path):
        self.folder = Path(folder)
        self.names: list[str] = []
        self._made: set[Path] = set()

    def __setitem__(self, name: str, data: bytes) -> None:
        path = self.folder / name
        if path.parent not in self._made:
            path.parent.mkdir(parents=True, exist_ok=True)
            self._made.add(path.parent)
        # A demo reel is made again at will: renamed into place whole, not flushed to disk
        # file by file (32,000 fsyncs were most of a 100,000-part reel's wall time).
        with atomic_output(path, binary=True, durable=False) as fh:
            fh.write(data)
        self.names.append(name)


def write_production(folder: Path, p: pd.DataFrame, seed: int, reel: str, layout: str,
                     stations=STATIONS) -> list[str]:
    """Write every station's files of the parts in ``p`` (see :func:`production_parameters`)
    into ``folder``; returns the names written."""
    if layout not in LAYOUTS:
        raise ValueError(f"layout must be one of {', '.join(LAYOUTS)} (got {layout!r})")
    out = Folder(folder)
    for station in stations:
        station(p, seed, reel, layout, out)
    return out.names
