"""Forward extraction on a generated reel: kinset's vectorised fit against a per-device loop.

    python benchmarks/forward_extract.py [--devices 10000] [--points 40]

Writes a synthetic reel (batch files of 500 parts, 40 points each, half the parts
measured at 35 °C), then times
  * pandas.read_csv of the same files (the I/O limit),
  * kinset's extraction (reading + fit, as ``kinset extract forward`` does),
  * a per-device ``scipy.optimize.curve_fit`` loop on the same files (read with
    pandas, grouped by part, one fit per part: what one writes by hand),
and prints the speed ratio and the parameter errors of both against the truth.
"""

from __future__ import annotations

import argparse
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd
from scipy.optimize import curve_fit

from kinset.extract import forward_settings
from kinset.fitting.forward import fit_forward
from kinset.io.parsed import read_inputs
from kinset.io.reel import load_reel
from kinset.physics.forward import saturation_current_at, voltage_from_current

T25 = 298.15


def make_reel(folder: Path, devices: int, points: int, seed: int = 7) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    (folder / "forward").mkdir(parents=True)
    (folder / "reel.yaml").write_text("reel: bench\nmaterial: silicon\n"
                                      "thermal_resistance_K_per_W: 0\n")
    n = rng.uniform(1.0, 2.0, devices)
    i_s = 10 ** rng.uniform(-14, -8, devices)
    rs = rng.uniform(0.3, 10.0, devices)
    temp = np.where(rng.random(devices) < 0.5, T25, T25 + 10)
    currents = np.logspace(-6, np.log10(2e-2), points)
    for start in range(0, devices, 500):
        ids = np.arange(start, min(start + 500, devices))
        dev = np.repeat(ids, points)
        cur = np.tile(currents, len(ids))
        ist = saturation_current_at(i_s[dev], temp[dev], T25, n[dev], 1.11, 3.0)
        v = voltage_from_current(cur, ist, n[dev], rs[dev], temp[dev]) + rng.normal(0, 1e-4, dev.size)
        pd.DataFrame({"device": [f"P{d:05d}" for d in dev], "current_A": cur, "voltage_V": v,
                      "temperature_C": temp[dev] - 273.15}).to_csv(
            folder / "forward" / f"batch{start // 500:03d}.csv", index=False, float_format="%.9g")
    return pd.DataFrame({"device": [f"P{d:05d}" for d in range(devices)], "is": i_s, "n": n, "rs": rs})


def errors(fit: pd.DataFrame, truth: pd.DataFrame) -> dict[str, np.ndarray]:
    m = truth.merge(fit, on="device")
    return {"IS": np.abs(m["is_A"] / m["is"] - 1), "N": np.abs(m["n_fit"] / m["n"] - 1),
            "RS": np.abs(m["rs_ohm"] / m["rs"] - 1)}


def curve_fit_loop(files, settings) -> pd.DataFrame:
    """What one would write by hand: read each file, loop over parts, curve_fit each."""
    points = pd.concat([pd.read_csv(f, comment="#") for f in files], ignore_index=True)
    return curve_fit_points(points, settings)


def curve_fit_points(points: pd.DataFrame, settings) -> pd.DataFrame:
    """One ``curve_fit`` per part of a ``device, current_A, voltage_V, temperature_C`` table."""
    s = settings
    points = points.assign(temperature=points["temperature_C"] + 273.15)
    points = points.rename(columns={"current_A": "current", "voltage_V": "voltage"})
    rows = []
    for dev, g in points.groupby("device", sort=True):
        t = g["temperature"].to_numpy()

        def model(i, ln_is, n, rs):
            return voltage_from_current(i, saturation_current_at(np.exp(ln_is), t, s.reference_temperature,
                                                                 n, s.activation_energy, s.xti), n, rs, t)
        try:
            p, _ = curve_fit(model, g["current"].to_numpy(), g["voltage"].to_numpy(),
                             p0=[np.log(1e-10), 1.5, 1.0], maxfev=5000)
            rows.append((dev, np.exp(p[0]), p[1], p[2]))
        except RuntimeError:
            rows.append((dev, np.nan, np.nan, np.nan))
    return pd.DataFrame(rows, columns=["device", "is_A", "n_fit", "rs_ohm"])


def main():
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--devices", type=int, default=10000)
    ap.add_argument("--points", type=int, default=40)
    args = ap.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp) / "reel"
        truth = make_reel(folder, args.devices, args.points)
        reel = load_reel(folder)
        files = reel.dataset_files("forward")

        t0 = time.perf_counter()
        for f in files:
            pd.read_csv(f)
        t_raw = time.perf_counter() - t0

        t0 = time.perf_counter()
        points = read_inputs("forward", files)
        t_read = time.perf_counter() - t0
        t0 = time.perf_counter()
        table, _ = fit_forward(points, forward_settings(reel))
        t_fit = time.perf_counter() - t0

        t0 = time.perf_counter()
        loop = curve_fit_loop(files, forward_settings(reel))
        t_loop = time.perf_counter() - t0

    ek = errors(table.rename(columns={"n": "n_fit"}), truth)
    el = errors(loop, truth)
    print(f"reel: {args.devices} devices x {args.points} points, {len(files)} files")
    print(f"{'step':38s} {'time [s]':>9s}")
    print(f"{'pandas.read_csv of the files (I/O)':38s} {t_raw:9.2f}")
    print(f"{'kinset read (units, checks)':38s} {t_read:9.2f}")
    print(f"{'kinset fit (vectorised)':38s} {t_fit:9.2f}")
    print(f"{'kinset extraction total':38s} {t_read + t_fit:9.2f}")
    print(f"{'per-device curve_fit loop (read + fit)':38s} {t_loop:9.2f}")
    ratio = t_loop / (t_read + t_fit)
    print(f"speed-up, loop / kinset: {ratio:.1f}x (target >= 20x: {'met' if ratio >= 20 else 'NOT met'})")
    print(f"{'error vs truth':16s} {'kinset median':>14s} {'kinset max':>11s} {'loop median':>12s} {'loop max':>10s}")
    for k in ("IS", "N", "RS"):
        a, b = ek[k], el[k]
        print(f"{k:16s} {np.nanmedian(a):14.2e} {np.nanmax(a):11.2e} {np.nanmedian(b):12.2e} {np.nanmax(b):10.2e}")
    print(f"failed fits: kinset {int(table['is_A'].isna().sum())}, loop {int(loop['is_A'].isna().sum())}")


if __name__ == "__main__":
    main()
