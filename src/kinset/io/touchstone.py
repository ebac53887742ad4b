"""Touchstone files of the capacitance dataset and the index that names them.

A reel's VNA measurements are Touchstone files (version 1 or 2, any number format,
read through scikit-rf) listed in ``capacitance/index.csv`` with the device, the
reverse bias and the fixture of each. Rows whose device is ``open`` are the empty
fixture at that bias. This module only reads: it gives frequency [Hz], the
scattering matrices and the reference impedance of each file, and pairs every
device measurement with the empty-fixture measurement that belongs to it. What the
numbers mean (admittance, capacitance) is worked out in ``kinset.physics`` and
``kinset.fitting``.

A Touchstone file that cannot be used does not stop a reel: :func:`read_vna` records
the problem with the row (the file is then reported as rejected), while a broken
``index.csv`` itself, like any broken CSV file, raises :class:`InputError`.
"""

from __future__ import annotations

import os
import re
import warnings
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from kinset.errors import InputError
from kinset.format import si
from kinset.io.datasets import read_capacitance_index
from kinset.io.reel import outside_reel

INDEX_NAME = "index.csv"
OPEN_DEVICE = "open"
# Ports each fixture's file must have (the contract: reflection is a one-port S11,
# series and shunt are two-ports).
PORTS = {"reflection": 1, "series": 2, "shunt": 2}
FIXTURES = tuple(PORTS)
# An empty-fixture measurement serves the device measurements within this bias [V].
BIAS_MATCH_V = 1e-3
# File names that are Touchstone files: .s1p, .s2p, ... (version 1 or 2) and .ts (version 2).
TOUCHSTONE_NAME = re.compile(r"\.(s\d+p|ts)$", re.IGNORECASE)


@dataclass(frozen=True)
class Sweep:
    """One Touchstone file in SI.

    frequency : (f,) [Hz], increasing
    s : (f, ports, ports) complex scattering matrices [1]
    reference_impedance : (f, ports) complex [Ohm]
    """

    path: str
    frequency: np.ndarray
    s: np.ndarray
    reference_impedance: np.ndarray

    @property
    def ports(self) -> int:
        return int(self.s.shape[1])


# The plain version 1 layout read_plain_touchstone takes itself: S parameters, one
# reference resistance, one frequency point per line. Frequency multipliers as the
# Touchstone specification defines them (version 1.1 and 2.0, section "Option line").
_PLAIN_NAME = re.compile(r"\.s([12])p$", re.IGNORECASE)
_FREQUENCY_UNITS = {"hz": 1.0, "khz": 1e3, "mhz": 1e6, "ghz": 1e9}
_PLAIN_FORMATS = ("ri", "ma", "db")
# Comment lines that carry data for scikit-rf (simulator port data, port names)
_SPECIAL_COMMENTS = ("! gamma", "! port", "! terminal data", "! modal data")
# Data lines of a plain file: the frequency and 2 numbers per S parameter on each line
# (blank lines allowed), checked in one match over the whole data block.
_ROWS = {rank: re.compile(r"(?:[ \t]*(?:\S+(?:[ \t]+\S+){%d}[ \t]*)?\n)*" % (2 * rank * rank))
         for rank in (1, 2)}


def _option_line(line: str) -> tuple[float, str, complex] | None:
    """Frequency multiplier, number format and reference resistance of a plain S-parameter
    option line (omitted fields take the specification's defaults: GHz S MA R 50)."""
    toks = line.lower()[1:].partition("!")[0].split()
    toks.extend(["ghz", "s", "ma", "r", "50"][len(toks):])
    if len(toks) != 5 or toks[0] not in _FREQUENCY_UNITS or toks[1] != "s" \
            or toks[2] not in _PLAIN_FORMATS or toks[3] != "r":
        return None
    try:
        return _FREQUENCY_UNITS[toks[0]], toks[2], complex(toks[4])
    except ValueError:
        return None


def _plain_header(lines: list[str]) -> tuple[tuple[float, str, complex], int] | None:
    """The option line's fields and the index of the first data line (None: not plain)."""
    option = None
    for i, line in enumerate(lines):
        line = line.strip()
        if not line:
            continue
        if line[0] == "!":
            if line.lower().startswith(_SPECIAL_COMMENTS):
                return None
        elif line[0] == "#":
            option = option or _option_line(line)       # a second option line is ignored
            if option is None:
                return None
        else:
            return (option, i) if option is not None and line[0] != "[" else None
    return None


def read_plain_touchstone(path: str) -> Sweep | None:
    """A one- or two-port version 1 S-parameter file read with numpy; None when the file
    is anything else (version 2 keywords, Y/Z/G/H data, one resistance per port, data
    wrapped over lines or with comments among it, simulator comments, frequencies not
    increasing, numbers that are not finite), which :func:`read_touchstone` then leaves
    to scikit-rf.

    The numbers are those scikit-rf gives for the same file (its conversions of RI, MA
    and DB pairs, its 21-before-12 order of version 1 two-ports): scikit-rf is the
    reference in tests/test_touchstone.py. Parsing 3,003 small files through scikit-rf
    was most of a 10,000-part reel's capacitance step (issue 18).
    """
    m = _PLAIN_NAME.search(path)
    if m is None:
        return None
    try:
        lines = Path(path).read_bytes().decode("utf-8").splitlines()
    except (OSError, UnicodeDecodeError):
        return None
    head = _plain_header(lines)
    if head is None:
        return None
    rank = int(m.group(1))
    width = 1 + 2 * rank * rank
    data = "\n".join(lines[head[1]:]) + "\n"
    if "!" in data or "#" in data or "[" in data or not _ROWS[rank].fullmatch(data):
        return None
    try:
        values = np.array(data.split(), dtype=np.float64)
    except ValueError:
        return None
    raw = values.reshape(-1, width)
    f, raw = raw[:, 0].copy(), raw[:, 1:].copy()
    if not np.isfinite(values).all() or np.any(np.diff(f) <= 0):
        return None
    mult, form, resistance = head[0]
    if form == "db":
        raw[:, 0::2] = 10 ** (raw[:, 0::2] / 20.0)
    s = raw.view(np.complex128) if form == "ri" else \
        raw[:, 0::2] * np.exp(1j * raw[:, 1::2] * np.pi / 180)
    s = s.reshape(-1, rank, rank)
    if rank == 2:        # version 1 two-ports list S11 S21 S12 S22
        s = np.transpose(s, axes=(0, 2, 1))
    return Sweep(path, f * mult, np.asarray(s, dtype=complex),
                 np.full((len(f), rank), resistance, dtype=complex))


def read_touchstone(path: str | Path) -> Sweep:
    """Read a Touchstone file (version 1 or 2): the plain version 1 layout with
    :func:`read_plain_touchstone`, anything else through scikit-rf.

    Raises
    ------
    InputError
        Naming the file when it is missing, does not parse, or holds no usable
        frequency points (non-finite numbers, frequencies not increasing).
    """
    path = str(path)
    if not Path(path).is_file():
        raise InputError("file not found", path)
    if Path(path).stat().st_size == 0:
        raise InputError("file is empty", path)
    plain = read_plain_touchstone(path)
    if plain is not None:
        return plain
    import skrf  # imported here: it is slow to import and only VNA data needs it
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            # Never skrf.Network(path): given a file name it first tries to unpickle the
            # file, which would run code from the reel. read_touchstone only parses text.
            net = skrf.Network()
            net.read_touchstone(path)
    except Exception as exc:  # noqa: BLE001 - any failure of the parser means "not a Touchstone file"
        text = str(exc).strip() or type(exc).__name__
        raise InputError(f"does not parse as a Touchstone file ({text})", path) from None
    f = np.asarray(net.f, dtype=float)
    s = np.asarray(net.s, dtype=complex)
    z0 = np.asarray(net.z0, dtype=complex)
    if f.size == 0 or s.ndim != 3:
        raise InputError("the Touchstone file holds no frequency points", path)
    if not (np.isfinite(f).all() and np.isfinite(s).all() and np.isfinite(z0).all()):
        raise InputError("the Touchstone file holds numbers that are not finite", path)
    if np.any(f <= 0) or np.any(np.diff(f) <= 0):
        raise InputError("frequencies must be positive and increasing", path)
    return Sweep(path, f, s, np.broadcast_to(z0, s.shape[:2]).copy())


# --------------------------------------------------------------------------- the index

def read_vna_index(path: str | Path) -> pd.DataFrame:
    """Read ``capacitance/index.csv`` and check every row.

    Paths are relative to the folder holding the index and must stay inside the
    reel folder (the index's grandparent); the fixture must be one of
    ``reflection``, ``series``, ``shunt``.

    Returns
    -------
    DataFrame
        ``file`` (as written), ``path`` (the file beside the index), ``device``,
        ``reverse_voltage [V]``, ``fixture``, ``temperature [K]`` (NaN when not given),
        ``is_open``, ``source`` (the index) and ``line``.

    Raises
    ------
    InputError
        Naming index.csv, the line and the column of the first bad row.
    """
    path = Path(path)
    frame = read_capacitance_index(path)
    folder = path.parent
    reel = folder.parent
    fixtures = frame["fixture"].astype(str).str.strip().str.lower()
    lines = frame["line"].to_numpy()
    bad = ~fixtures.isin(FIXTURES).to_numpy()
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise InputError(f"fixture '{frame['fixture'].iloc[i]}' is not one of "
                         f"{', '.join(FIXTURES)}", path, int(lines[i]), "fixture")
    resolved = []
    for file, line in zip(frame["file"].astype(str), lines):
        reason = outside_reel(file, folder, reel)
        if reason:
            raise InputError(f"{reason}; keep VNA files inside the reel", path, int(line), "file")
        resolved.append(os.path.normpath(os.path.join(folder, file.replace("\\", "/"))))
    frame["fixture"] = fixtures.to_numpy()
    frame["path"] = resolved
    frame["device"] = frame["device"].astype(str)
    frame["is_open"] = frame["device"].str.lower().to_numpy() == OPEN_DEVICE
    return frame


def match_opens(index: pd.DataFrame) -> tuple[np.ndarray, np.ndarray]:
    """The empty-fixture row that serves each row of the index.

    An ``open`` row serves a device row of the same fixture within
    :data:`BIAS_MATCH_V` of its bias; among several, the nearest in temperature
    (rows without a temperature count as equal), then the first listed.

    Returns
    -------
    row : ndarray of int
        Position (0-based, in ``index``) of the serving open row; -1 for none, and
        for open rows themselves.
    problem : ndarray of str
        Why a device row cannot be used: its fixture has empty-fixture rows, but
        none at its bias. '' otherwise; a fixture without any open row is not a
        problem here (the measurement is then used uncorrected, with a warning).
    """
    n = len(index)
    row = np.full(n, -1)
    problem = np.full(n, "", dtype=object)
    is_open = index["is_open"].to_numpy(dtype=bool)
    fixture = index["fixture"].to_numpy(dtype=object)
    bias = index["reverse_voltage"].to_numpy(dtype=float)
    temp = index["temperature"].to_numpy(dtype=float)
    opens = np.flatnonzero(is_open)
    for fx in np.unique(fixture[~is_open]):
        cand = opens[fixture[opens] == fx]
        devs = np.flatnonzero(~is_open & (fixture == fx))
        if not len(cand):
            continue
        listed = ", ".join(f"{v:g}" for v in np.unique(bias[cand]))
        for v in np.unique(bias[devs]):
            at = devs[bias[devs] == v]
            near = cand[np.abs(bias[cand] - v) <= BIAS_MATCH_V]
            if not len(near):
                problem[at] = (f"no empty-fixture ('open') measurement at {v:g} V in the {fx} "
                               f"fixture (index.csv lists it at {listed} V)")
                continue
            for r in at:
                dt = np.abs(temp[near] - temp[r])
                dt = np.where(np.isfinite(dt), dt, 0.0)
                row[r] = near[int(np.argmin(dt))]
    return row, problem


def unlisted_touchstone(folder: str | Path, index: pd.DataFrame | None) -> list[Path]:
    """Touchstone files in the capacitance folder that the index does not name."""
    folder = Path(folder)
    if not folder.is_dir():
        return []
    listed = set() if index is None else set(index["path"])
    return sorted(p for p in folder.iterdir() if p.is_file() and TOUCHSTONE_NAME.search(p.name)
                  and os.path.normpath(p) not in listed)


# --------------------------------------------------------------------------- reading rows

@dataclass
class VnaMeasurement:
    """One device row of the index and what was read for it.

    ``problem`` says, in plain words and naming the file, why the row cannot give a
    capacitance ('' when it can); ``sweep`` is then None.
    """

    device: str
    reverse_voltage: float      # [V]
    fixture: str
    temperature: float          # [K], NaN when not given
    file: str                   # as written in the index
    path: str
    line: int                   # line in index.csv
    index: str                  # path of index.csv
    sweep: Sweep | None = None
    open_file: str = ""         # the empty-fixture file used ('' for none)
    open_sweep: Sweep | None = None
    fixture_has_open: bool = False
    problem: str = ""


def _problem(file: str, exc: InputError) -> str:
    return f"{file}: {exc.message}"


def read_vna(index_path: str | Path, devices: list[str] | None = None,
             files: list[str | Path] | None = None) -> list[VnaMeasurement]:
    """Read the Touchstone files the index lists for some or all devices.

    Parameters
    ----------
    index_path : path
        ``capacitance/index.csv`` of the reel.
    devices : list of str, optional
        Read only these devices' rows (default: every device row).
    files : list of paths, optional
        Read only the rows naming these files (default: every device row).

    Returns
    -------
    list of VnaMeasurement
        One per device row, in index order, each with its file and empty-fixture file
        read, or with the problem that prevents it (missing file, not a Touchstone
        file, wrong port count for the fixture, no empty fixture at its bias).
    """
    index = read_vna_index(index_path)
    open_row, open_problem = match_opens(index)
    is_open = index["is_open"].to_numpy(dtype=bool)
    keep = ~is_open
    if devices is not None:
        keep &= index["device"].isin(set(map(str, devices))).to_numpy()
    if files is not None:
        wanted = {os.path.normpath(str(f)) for f in files}
        keep &= index["path"].isin(wanted).to_numpy()
    has_open = set(index.loc[is_open, "fixture"])
    cache: dict[str, Sweep | InputError] = {}

    def load(p: str) -> Sweep | InputError:
        if p not in cache:
            try:
                cache[p] = read_touchstone(p)
            except InputError as exc:
                cache[p] = exc
        return cache[p]

    out = []
    rows = index[["device", "reverse_voltage", "fixture", "temperature", "file", "path",
                  "line"]].to_dict("records")       # one pass; .iloc per row costs ~0.3 ms
    for i in np.flatnonzero(keep):
        r = rows[i]
        m = VnaMeasurement(device=str(r["device"]), reverse_voltage=float(r["reverse_voltage"]),
                           fixture=str(r["fixture"]), temperature=float(r["temperature"]),
                           file=str(r["file"]), path=str(r["path"]), line=int(r["line"]),
                           index=str(index_path), fixture_has_open=r["fixture"] in has_open)
        out.append(m)
        if open_problem[i]:
            m.problem = f"{m.file}: {open_problem[i]}"
            continue
        sweep = load(m.path)
        if isinstance(sweep, InputError):
            m.problem = _problem(m.file, sweep)
            continue
        need = PORTS[m.fixture]
        if sweep.ports != need:
            m.problem = (f"{m.file}: has {sweep.ports} port(s), but the {m.fixture} fixture "
                         f"needs a {need}-port file")
            continue
        if open_row[i] >= 0:
            o = index.iloc[open_row[i]]
            m.open_file = str(o["file"])
            op = load(str(o["path"]))
            if isinstance(op, InputError):
                m.problem = f"{m.file}: its empty-fixture file is unusable ({_problem(m.open_file, op)})"
                continue
            if op.ports != need:
                m.problem = (f"{m.file}: its empty-fixture file {m.open_file} has {op.ports} "
                             f"port(s), but the {m.fixture} fixture needs {need}")
                continue
            if op.frequency[-1] < sweep.frequency[0] or op.frequency[0] > sweep.frequency[-1]:
                m.problem = (f"{m.file}: its empty-fixture file {m.open_file} covers "
                             f"{si(op.frequency[0], 'Hz')}–{si(op.frequency[-1], 'Hz')}, none of "
                             f"the device's {si(sweep.frequency[0], 'Hz')}–"
                             f"{si(sweep.frequency[-1], 'Hz')}")
                continue
            m.open_sweep = op
        m.sweep = sweep
    return out


def unlisted_measurements(paths: list[str | Path]) -> list[VnaMeasurement]:
    """Touchstone files that no index row names: reported, since device and bias are unknown."""
    out = []
    for p in paths:
        name = Path(p).name
        out.append(VnaMeasurement(
            device="", reverse_voltage=float("nan"), fixture="", temperature=float("nan"),
            file=name, path=str(p), line=0, index="",
            problem=f"{name}: not listed in capacitance/{INDEX_NAME}, so its device, bias and "
                    f"fixture are unknown; add a row for it"))
    return out
