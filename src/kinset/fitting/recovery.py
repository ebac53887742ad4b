"""Reverse recovery of every captured waveform: IF, t0, Irrm, trr, ta, tb, Qrr, softness, TT.

Definitions follow the usage of IEC 60747-2 and the JEDEC reverse-recovery test
methods: the recovery time trr runs from the instant the current crosses zero (t0)
to the specified end point; ta from t0 to the peak reverse current Irrm, tb from the
peak to the end; the softness factor is tb/ta; the recovered charge Qrr is the
reverse current integrated from t0 to the end. The end point is set by reel.yaml
``recovery.end``:

* ``{fraction_of_peak: f}``: the current has recovered to f·Irrm (default 0.1: with
  IF = IR = 10 mA the usual small-signal condition "recovery to 1 mA");
* ``{current_A: I}``: the current has recovered to I;
* ``{extrapolate: [f1, f2]}``: the straight line through the points where the
  current falls through f1·Irrm and f2·Irrm, extended to zero current.

Waveforms are scope captures: noisy, ringing, at any sample rate. Each one is
sorted by time and brought to a uniform time step; waveforms of equal length are
stacked and analysed together as arrays.

* Noise: σ from the median absolute second difference (robust to the signal's own
  curvature; for white noise the second difference has standard deviation √6·σ).
* Zero crossing: found with hysteresis — the last sample above +h before the
  first sample below −h, h half the smaller of IF and the reverse peak — and placed
  where the least-squares line through the raw samples between them crosses zero,
  so noise on the edge averages out at fine sampling and the result is the
  interpolated crossing at coarse sampling.
* Smoothing: a symmetric triangular kernel (a moving average applied twice) whose
  half-width is 1/20 of the time from t0 to the 50 % point of the recovery for the
  peak, and for the decay at most 1/4 of the time from the 50 % to the 25 % point
  (both found on the raw capture), so that it never blurs the decay of a snappy part. Being symmetric it does not shift a
  linear edge; being tied to the waveform's own time scales its bias is the same at
  every sample rate, while its noise reduction grows with the samples per feature.
* Falling crossings (50 %, 25 % and the end level): the first sample below the level
  after the last sample above the level plus a hysteresis band (3 σ of the smoothed
  signal, at least 2 % of Irrm), interpolated linearly between samples. Ringing or
  noise that dips below a level and comes back above the band does not end recovery.
* The peak and the storage phase: in the charge-control picture the circuit holds
  the current at −IR while stored charge remains (Kingston [1]); on such a
  flat-topped waveform the sample of largest current is set by noise. The peak time
  is therefore taken where the recovery decay, extrapolated back as an exponential
  through its 50 % and 25 % points, reaches Irrm (t_peak = 2·t50 − t25): on a
  waveform with a sharp peak followed by an exponential recovery this is the peak
  itself, on a flat-topped one it is the end of the storage phase, so that ta is the
  storage time ts. Irrm is the largest value of the smoothed current.
* Transit time: ``tt_s`` is the TT of the charge-control model that reproduces the
  measured storage phase, TT = ts / ln(1 + IF/IR) (Kingston [1]), with IF the
  forward level before the switch and IR the median reverse current over the middle
  half of the storage phase.

A waveform that never reverses, starts already reversed, has no forward level
before the switch, or ends before the current has recovered to the end level is
rejected with the reason.

References
----------
.. [1] R. H. Kingston, "Switching time in junction diodes and junction transistors",
   Proceedings of the IRE 42(5), 829-834, 1954. doi:10.1109/JRPROC.1954.274521
.. [2] IEC 60747-2:2016, Semiconductor devices — Part 2: Discrete devices — Rectifier
   diodes (reverse recovery time, recovered charge, the extrapolation method).
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from kinset.format import si
from kinset.physics.recovery import transit_time

EDGE_FRACTION = 0.5          # zero-crossing hysteresis: ±50 % of min(IF, reverse peak)
SMOOTH_FRACTION = 1.0 / 20   # triangle half-width / (t50 − t0) ...
SMOOTH_DECAY = 1.0 / 4       # ... and at most this fraction of (t25 − t50), the decay
DECAY_FRACTIONS = (0.5, 0.25)  # where the decay is measured for the knee (fractions of Irrm)
HYSTERESIS_SIGMAS = 3.0
HYSTERESIS_MIN = 0.02        # of Irrm
REVERSE_SIGMAS = 5.0         # a reverse excursion smaller than 5 σ is noise
REVERSE_MIN = 0.05           # ... or than 5 % of IF
MIN_SAMPLES = 8
CAPTURES_DISAGREE = 0.25     # captures of one id in several files whose trr spread exceeds this
MIN_FORWARD_SAMPLES = 3
FORWARD_PLATEAU = 0.8        # forward samples: above 80 % of the largest before the switch
CONDITION_MISMATCH = 0.1     # warn when IF or IR differs from the test condition by > 10 %
COARSE_SAMPLES = 5           # warn when trr spans fewer samples than this
UNIFORM_TOLERANCE = 0.01     # relative spread of time steps accepted as uniform
MAD_TO_SIGMA = 1.4826        # median absolute deviation of a normal variable -> sigma


@dataclass
class RecoverySettings:
    """What the analysis needs from reel.yaml (all SI)."""

    forward_current: float         # [A] test condition when the file has no column
    reverse_current: float         # [A]
    end_rule: str                  # "fraction_of_peak" | "current_A" | "extrapolate"
    end_value: tuple[float, ...]   # f, or I [A], or (f1, f2)

    @classmethod
    def from_end(cls, forward_current: float, reverse_current: float, end: dict
                 ) -> "RecoverySettings":
        """From reel.yaml's ``recovery.end`` mapping (one key)."""
        (rule, value), = end.items()
        values = tuple(float(x) for x in (value if isinstance(value, (list, tuple)) else [value]))
        if rule == "extrapolate":
            values = tuple(sorted(values, reverse=True))
        return cls(float(forward_current), float(reverse_current), rule, values)

    def describe(self) -> str:
        if self.end_rule == "fraction_of_peak":
            return f"{self.end_value[0]:g} of Irrm"
        if self.end_rule == "current_A":
            return si(self.end_value[0], "A")
        return (f"extrapolated to zero through {self.end_value[0]:g} and "
                f"{self.end_value[1]:g} of Irrm")


# --------------------------------------------------------------------------- helpers

def _boxcar(x: np.ndarray, half: np.ndarray) -> np.ndarray:
    """Moving average of each row over ±half[row] samples (shrinking at the ends)."""
    g, n = x.shape
    c = np.zeros((g, n + 1))
    np.cumsum(x, axis=1, out=c[:, 1:])
    out = np.empty_like(c[:, 1:])
    j = np.arange(n)
    for h in np.unique(half):       # rows of one width share their window bounds
        rows = np.flatnonzero(half == h)
        lo, hi = np.clip(j - h, 0, n), np.clip(j + h + 1, 0, n)
        block = c[rows]
        out[rows] = (block[:, hi] - block[:, lo]) / (hi - lo)
    return out


def _noise_gain(half: int) -> float:
    """Standard deviation of white noise after the triangular kernel, per unit input."""
    box = np.ones(2 * half + 1) / (2 * half + 1)
    return float(np.sqrt(np.sum(np.convolve(box, box) ** 2)))


def _row_median(x: np.ndarray) -> np.ndarray:
    """Median of each row over its finite values (NaN for a row without any)."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)    # rows that are all NaN
        return np.nanmedian(x, axis=1)


def _last(mask: np.ndarray) -> np.ndarray:
    """Index of the last True per row (-1 where none)."""
    n = mask.shape[1]
    k = n - 1 - np.argmax(mask[:, ::-1], axis=1)
    return np.where(mask.any(axis=1), k, -1)


def _first(mask: np.ndarray) -> np.ndarray:
    """Index of the first True per row (-1 where none)."""
    return np.where(mask.any(axis=1), np.argmax(mask, axis=1), -1)


def _fall_crossing(time, y, level, band, start):
    """Time where ``y`` falls through ``level`` for good, per row (NaN if never).

    The crossing counted is the first sample below ``level`` after the last sample,
    from ``start`` on, above ``level + band`` (hysteresis), interpolated linearly.
    """
    g, n = y.shape
    col = np.arange(n)[None, :]
    after = col >= start[:, None]
    above = (after & (y > (level + band)[:, None])) | (col == start[:, None])
    k_above = _last(above)
    below = (col > k_above[:, None]) & (y < level[:, None]) & (k_above[:, None] >= 0)
    j = _first(below)
    found = j > 0
    out = np.full(g, np.nan)
    r = np.flatnonzero(found)
    jj = j[r]
    y0, y1 = y[r, jj - 1], y[r, jj]
    with np.errstate(divide="ignore", invalid="ignore"):   # y0 == y1 takes the 0 branch
        frac = np.where(y0 > y1, (y0 - level[r]) / (y0 - y1), 0.0)
    out[r] = time[r, jj - 1] + frac * (time[r, jj] - time[r, jj - 1])
    return out


def _integral(time, y, t_from, t_to):
    """∫ y dt from t_from to t_to per row, y linear between samples (uniform steps)."""
    g, n = y.shape
    r = np.arange(g)
    dt = (time[:, -1] - time[:, 0]) / (n - 1)
    steps = 0.5 * (y[:, 1:] + y[:, :-1]) * np.diff(time, axis=1)
    cum = np.concatenate([np.zeros((g, 1)), np.cumsum(steps, axis=1)], axis=1)

    def upto(t):
        t = np.clip(t, time[:, 0], time[:, -1])
        k = np.clip(np.floor((t - time[:, 0]) / dt).astype(np.int64), 0, n - 2)
        u = t - time[r, k]
        slope = (y[r, k + 1] - y[r, k]) / (time[r, k + 1] - time[r, k])
        return cum[r, k] + u * (y[r, k] + 0.5 * slope * u)

    good = np.isfinite(t_from) & np.isfinite(t_to)
    out = np.full(g, np.nan)
    if good.any():
        out[good] = (upto(np.where(good, t_to, time[:, 0])) - upto(np.where(good, t_from, time[:, 0])))[good]
    return out


# --------------------------------------------------------------------------- analysis

def analyse_waveforms(time: np.ndarray, current: np.ndarray, settings: RecoverySettings
                      ) -> dict[str, np.ndarray]:
    """Analyse a stack of waveforms of equal length, each on a uniform time grid.

    Parameters
    ----------
    time : (g, n) sample times [s], increasing with a constant step per row
    current : (g, n) current [A], positive forward
    settings : RecoverySettings

    Returns
    -------
    dict of (g,) arrays
        ``t0_s, if_A, irrm_A, ir_A, t_peak_s, t_end_s, trr_s, ta_s, tb_s, qrr_C,
        softness, tt_s, end_level_A, noise_A, decay_tau_s`` (NaN where not found),
        ``reject`` (object: the reason, '' when usable) and ``warn`` (object: '; '
        joined remarks, '' for none).
    """
    g, n = current.shape
    r = np.arange(g)
    col = np.arange(n)[None, :]
    reject = np.full(g, "", dtype=object)
    nan = np.full(g, np.nan)
    out = {k: nan.copy() for k in ("t0_s", "if_A", "irrm_A", "ir_A", "t_peak_s", "t_end_s",
                                   "trr_s", "ta_s", "tb_s", "qrr_C", "softness", "tt_s",
                                   "end_level_A", "noise_A", "decay_tau_s")}
    out["reject"] = reject
    out["warn"] = np.full(g, "", dtype=object)
    if n < MIN_SAMPLES:
        reject[:] = f"only {n} samples: too few for a recovery waveform"
        return out
    dt = (time[:, -1] - time[:, 0]) / (n - 1)
    d2 = current[:, 2:] - 2.0 * current[:, 1:-1] + current[:, :-2]
    sigma = MAD_TO_SIGMA * np.median(np.abs(d2), axis=1) / np.sqrt(6.0)
    out["noise_A"] = sigma

    # Forward level, reversal and the zero crossing, on the raw samples.
    low = current.min(axis=1)
    deep = current < 0.5 * low[:, None]
    k_deep = _first(deep)
    before = col < k_deep[:, None]
    peak_fwd = np.max(np.where(before, current, -np.inf), axis=1)
    fwd = before & (current >= FORWARD_PLATEAU * peak_fwd[:, None]) & (peak_fwd[:, None] > 0)
    n_fwd = fwd.sum(axis=1)
    i_f = _row_median(np.where(fwd, current, np.nan))
    start = np.median(current[:, :3], axis=1)
    noise_floor = REVERSE_SIGMAS * sigma
    reversed_enough = -low > np.maximum(noise_floor, REVERSE_MIN * np.where(n_fwd > 0, i_f, 0.0))
    for k in np.flatnonzero(~reversed_enough):
        reject[k] = (f"the current never reverses beyond the noise (lowest reading "
                     f"{si(low[k], 'A')}, noise {si(sigma[k], 'A')} rms): no recovery in "
                     f"this record")
    starts_rev = reversed_enough & (start < -np.maximum(noise_floor, REVERSE_MIN * -low))
    for k in np.flatnonzero(starts_rev & (reject == "")):
        reject[k] = (f"the record starts with the current already reversed "
                     f"({si(start[k], 'A')}): no forward level before the switch (or the "
                     f"sign is inverted: positive current is forward)")
    no_fwd = (reject == "") & ((n_fwd < MIN_FORWARD_SAMPLES) | ~(peak_fwd > noise_floor))
    for k in np.flatnonzero(no_fwd):
        reject[k] = ("the record starts at the switch: too few samples of the forward "
                     "level before the current reverses")
    live = reject == ""
    if not live.any():
        return out
    h_edge = EDGE_FRACTION * np.minimum(np.where(live, i_f, 1.0), -low)
    neg = (current < -h_edge[:, None])
    k_neg = _first(neg)
    pos = (col < k_neg[:, None]) & (current > h_edge[:, None])
    k_pos = _last(pos)
    edge_ok = live & (k_neg > 0) & (k_pos >= 0)
    band = (col >= k_pos[:, None]) & (col <= k_neg[:, None]) & edge_ok[:, None]
    tz = time - time[r, np.maximum(k_pos, 0)][:, None]
    cnt = band.sum(axis=1)
    st, si_, stt, sti = (np.sum(np.where(band, x, 0.0), axis=1) for x in
                         (tz, current, tz * tz, tz * current))
    with np.errstate(all="ignore"):
        slope = (cnt * sti - st * si_) / (cnt * stt - st * st)
        icpt = (si_ - slope * st) / cnt
        t0_line = -icpt / slope
    kp, kn = np.maximum(k_pos, 0), np.maximum(k_neg, 0)
    y0, y1 = current[r, kp], current[r, kn]
    with np.errstate(all="ignore"):
        t0_interp = time[r, kp] + y0 / (y0 - y1) * (time[r, kn] - time[r, kp])
    span = time[r, kn] - time[r, kp]
    use_line = (slope < 0) & (t0_line >= 0) & (t0_line <= span)
    t0 = np.where(use_line, time[r, kp] + t0_line, t0_interp)
    t0 = np.where(edge_ok, t0, np.nan)
    reject[live & ~edge_ok] = "no clear zero crossing of the current"
    live = reject == ""

    # Smoothing tied to the waveform's own time scale (t0 to the raw 50 % point).
    rev = -current
    k_min = np.argmax(rev, axis=1)
    raw_band = HYSTERESIS_SIGMAS * sigma
    t50_raw = _fall_crossing(time, rev, DECAY_FRACTIONS[0] * -low, raw_band, k_min)
    t25_raw = _fall_crossing(time, rev, DECAY_FRACTIONS[1] * -low, raw_band, k_min)

    def smoothed(scale):
        scale = np.where(np.isfinite(scale) & live, scale, 0.0)
        half = np.round(np.maximum(scale, 0.0) / (2.0 * dt)).astype(np.int64)
        half = np.clip(half, 0, max((n - 1) // 8, 0))
        widths, which = np.unique(half, return_inverse=True)
        gain = np.array([_noise_gain(int(h)) for h in widths])[which]
        return _boxcar(_boxcar(rev, half), half), sigma * gain

    # The peak: smoothed over 1/20 of the recovery; the decay: at most 1/4 of its own scale.
    peak_curve, _ = smoothed(SMOOTH_FRACTION * (t50_raw - t0))
    smooth, sigma_s = smoothed(np.fmin(SMOOTH_FRACTION * (t50_raw - t0),
                                       SMOOTH_DECAY * (t25_raw - t50_raw)))

    after_t0 = time > np.where(live, t0, np.inf)[:, None]
    masked = np.where(after_t0, peak_curve, -np.inf)
    k_peak = np.argmax(masked, axis=1)
    irrm = masked[r, k_peak]
    irrm = np.where(live & np.isfinite(irrm), irrm, np.nan)
    band_h = np.maximum(HYSTERESIS_SIGMAS * sigma_s, HYSTERESIS_MIN * irrm)
    t50 = _fall_crossing(time, smooth, DECAY_FRACTIONS[0] * irrm, band_h, k_peak)
    t25 = _fall_crossing(time, smooth, DECAY_FRACTIONS[1] * irrm, band_h, k_peak)
    knee = t50 - (t25 - t50) * np.log(1.0 / DECAY_FRACTIONS[0]) / np.log(
        DECAY_FRACTIONS[0] / DECAY_FRACTIONS[1])
    # A record that stops between the end level and 25 % of Irrm has no knee: the peak
    # sample stands in.
    no_knee = np.isnan(knee)
    knee = np.where(no_knee, time[r, k_peak], knee)
    t_peak = np.clip(knee, t0, np.where(np.isfinite(t50), t50, np.inf))
    decay_tau = (t25 - t50) / np.log(DECAY_FRACTIONS[0] / DECAY_FRACTIONS[1])

    s = settings
    t_last = time[:, -1]
    if s.end_rule == "extrapolate":
        f1, f2 = s.end_value
        t1 = _fall_crossing(time, smooth, f1 * irrm, band_h, k_peak)
        t2 = _fall_crossing(time, smooth, f2 * irrm, band_h, k_peak)
        t_end = t2 + (t2 - t1) * f2 / (f1 - f2)
        level = np.full(g, np.nan)
        missing = np.isnan(t2)
        lowest = f2 * irrm
    else:
        level = s.end_value[0] * irrm if s.end_rule == "fraction_of_peak" \
            else np.full(g, s.end_value[0])
        too_high = live & (level >= irrm)
        for k in np.flatnonzero(too_high):
            reject[k] = (f"the peak reverse current {si(irrm[k], 'A')} does not reach "
                         f"the end level {si(level[k], 'A')}")
        live = reject == ""
        t_end = _fall_crossing(time, smooth, level, band_h, k_peak)
        missing = np.isnan(t_end)
        lowest = level
    ends_early = live & missing
    for k in np.flatnonzero(ends_early):
        reject[k] = (f"the record ends {si(t_last[k] - time[k, k_peak[k]], 's')} after the "
                     f"peak with the reverse current still at {si(smooth[k, -1], 'A')}, "
                     f"above the end of recovery ({si(lowest[k], 'A')}): ends before recovery")
    live = reject == ""

    t_peak = np.minimum(t_peak, t_end)
    ts = t_peak - t0
    mid = (time >= (t0 + 0.25 * ts)[:, None]) & (time <= (t0 + 0.75 * ts)[:, None])
    i_r = _row_median(np.where(mid, rev, np.nan))
    i_r = np.where(mid.sum(axis=1) >= 3, i_r, irrm)
    qrr = _integral(time, rev, t0, np.minimum(t_end, t_last))
    warn = out["warn"]
    for k in np.flatnonzero(live & no_knee):
        warn[k] = ("the record ends before the current falls to 25 % of Irrm: the largest "
                   "sample marks the end of the storage phase (ta, tb, tt_s less certain)")
    for k in np.flatnonzero(live & (t_end > t_last)):
        late = (f"the extrapolated end lies {si(t_end[k] - t_last[k], 's')} after the record "
                f"ends; Qrr counted to the end of the record")
        warn[k] = "; ".join(x for x in (warn[k], late) if x)

    def keep(x):
        return np.where(live, x, np.nan)

    out.update({
        "t0_s": keep(t0), "if_A": keep(i_f), "irrm_A": keep(irrm), "ir_A": keep(i_r),
        "t_peak_s": keep(t_peak), "t_end_s": keep(t_end), "trr_s": keep(t_end - t0),
        "ta_s": keep(ts), "tb_s": keep(t_end - t_peak), "qrr_C": keep(qrr),
        "end_level_A": keep(level), "decay_tau_s": keep(decay_tau),
    })
    with np.errstate(all="ignore"):
        out["softness"] = keep((t_end - t_peak) / ts)
        out["tt_s"] = keep(transit_time(ts, i_f, i_r))
    for k in np.flatnonzero(live & ((t_end - t0) < COARSE_SAMPLES * dt)):
        warn[k] = "; ".join(x for x in (warn[k], f"coarse sampling: trr spans only "
                            f"{(t_end[k] - t0[k]) / dt[k]:.1f} samples") if x)
    return out


# --------------------------------------------------------------------------- the table

def _in_order(*keys) -> bool:
    """Whether rows are already sorted by keys[0], then keys[1], ... (as lexsort would)."""
    tied = np.ones(max(len(keys[0]) - 1, 0), dtype=bool)
    for k in keys:
        step = np.diff(k)
        if (tied & (step < 0)).any():
            return False
        tied &= step == 0
    return True


def _uniform(t: np.ndarray, i: np.ndarray) -> tuple[np.ndarray, np.ndarray, bool]:
    """The waveform on a uniform grid (resampled linearly when the steps differ)."""
    if len(t) < 3:
        return t, i, False
    steps = np.diff(t)
    step = float(np.median(steps))
    if step <= 0:
        return t, i, False
    if np.max(np.abs(steps - step)) <= UNIFORM_TOLERANCE * step:
        return t, i, False
    n = int(np.floor((t[-1] - t[0]) / step + 1e-9)) + 1
    grid = t[0] + step * np.arange(n)
    return grid, np.interp(grid, t, i), True


# Samples analysed in one stack: each of the analysis' temporaries is this many floats
# (8 MB), so memory stays flat whatever the reel's size, and the arrays stay in cache.
STACK_SAMPLES = 1_000_000

RESULT_COLUMNS = ("trr_s", "ta_s", "tb_s", "irrm_A", "qrr_C", "softness", "tt_s", "if_A",
                  "ir_A", "t0_s", "end_level_A", "decay_tau_s", "noise_A")


def fit_recovery(points, settings: RecoverySettings) -> pd.DataFrame:
    """Recovery parameters of every device in a table of waveform samples.

    Parameters
    ----------
    points : DataFrame, or an iterable of them
        ``device, time [s], current [A], forward_current [A], reverse_current [A] (NaN:
        from reel.yaml), source, line`` — as from :func:`kinset.io.datasets.read_recovery`.
        One waveform per device and file; a device captured in several files gets
        the mean of its usable captures. Tables given one by one (one per file, say)
        are analysed one at a time, so memory follows the largest file, not the reel.
    settings : RecoverySettings

    Returns
    -------
    DataFrame
        One row per device, sorted by id: ``device, status, note, trr_s, ta_s, tb_s,
        irrm_A, qrr_C, softness, tt_s`` and ``if_A`` (measured forward level),
        ``ir_A`` (reverse current of the storage phase), ``t0_s``, ``end_level_A``,
        ``decay_tau_s``, ``noise_A``, the test conditions ``if_set_A, ir_set_A``, the
        ``end_rule``, and the capture (``samples, sample_period_s, record_start_s,
        record_end_s, captures``).
    """
    tables = [points] if isinstance(points, pd.DataFrame) else points
    return _device_table(_concat_captures([_captures(t, settings) for t in tables]), settings)


@dataclass
class _Captures:
    """Per-capture (device and file) results, sorted by device and file."""

    device: np.ndarray
    source: np.ndarray
    res: dict
    status: np.ndarray
    notes: list
    if_set: np.ndarray
    ir_set: np.ndarray
    length: np.ndarray
    dt: np.ndarray
    t_first: np.ndarray
    t_final: np.ndarray


def _concat_captures(parts: list[_Captures]) -> _Captures:
    if len(parts) == 1:
        return parts[0]
    device = np.concatenate([p.device for p in parts])
    source = np.concatenate([p.source for p in parts])
    order = np.lexsort((pd.factorize(source, sort=True)[0], pd.factorize(device, sort=True)[0]))
    cat = lambda name: np.concatenate([getattr(p, name) for p in parts])[order]  # noqa: E731
    notes = [n for p in parts for n in p.notes]
    return _Captures(device[order], source[order],
                     {k: np.concatenate([p.res[k] for p in parts])[order] for k in RESULT_COLUMNS},
                     cat("status"), [notes[i] for i in order], cat("if_set"), cat("ir_set"),
                     cat("length"), cat("dt"), cat("t_first"), cat("t_final"))


def _captures(points: pd.DataFrame, settings: RecoverySettings) -> _Captures:
    """Analyse every capture in one table of samples."""
    s = settings
    dev_codes, names = pd.factorize(points["device"].astype(str).to_numpy(), sort=True)
    src_codes, src_names = pd.factorize(points["source"].astype(str).to_numpy(), sort=True)
    t_all = points["time"].to_numpy(dtype=float)
    i_all = points["current"].to_numpy(dtype=float)
    # Files list each capture's samples in time order, one device after another: then
    # the sort is the identity and is skipped.
    order = slice(None) if _in_order(dev_codes, src_codes, t_all) else \
        np.lexsort((t_all, src_codes, dev_codes))
    dc, sc, t, cur = dev_codes[order], src_codes[order], t_all[order], i_all[order]
    wave_new = np.ones(len(dc), dtype=bool)
    wave_new[1:] = (dc[1:] != dc[:-1]) | (sc[1:] != sc[:-1])
    wave = np.cumsum(wave_new) - 1
    n_wave = int(wave[-1]) + 1 if len(wave) else 0
    # Repeated time stamps inside one capture: the mean current.
    sample_new = wave_new.copy()
    sample_new[1:] |= t[1:] != t[:-1]
    samp = np.cumsum(sample_new) - 1
    n_samp = int(samp[-1]) + 1 if len(samp) else 0
    counts = np.bincount(samp, minlength=n_samp)
    cur_u = np.bincount(samp, cur, n_samp) / counts
    first = np.flatnonzero(sample_new)
    t_u, wave_u = t[first], wave[first]
    repeated = np.bincount(wave_u, counts > 1, n_wave)
    wave_dev = dc[np.flatnonzero(wave_new)]
    wave_src = np.asarray(src_names, dtype=object)[sc[np.flatnonzero(wave_new)]]

    def condition(column, default):
        x = points[column].to_numpy(dtype=float) if column in points else None
        if x is None or not np.isfinite(x).any():   # not in the files: reel.yaml's value
            return np.full(n_wave, default), np.zeros(n_wave, dtype=bool)
        x = x[order]
        ok = np.isfinite(x)
        val = pd.Series(np.where(ok, x, np.nan)).groupby(wave).median().to_numpy()
        given = np.isfinite(val)
        return np.where(given, val, default), given

    if_set, if_given = condition("forward_current", s.forward_current)
    ir_set, ir_given = condition("reverse_current", s.reverse_current)

    bounds = np.concatenate([[0], np.cumsum(np.bincount(wave_u, minlength=n_wave))])
    waves_t, waves_i, resampled = [], [], np.zeros(n_wave, dtype=bool)
    for w in range(n_wave):        # slicing only; the rare irregular capture is resampled
        tw, iw = t_u[bounds[w]:bounds[w + 1]], cur_u[bounds[w]:bounds[w + 1]]
        tw, iw, resampled[w] = _uniform(tw, iw)
        waves_t.append(tw)
        waves_i.append(iw)
    length = np.array([len(x) for x in waves_t], dtype=np.int64)
    res = {k: np.full(n_wave, np.nan) for k in RESULT_COLUMNS}
    reject = np.full(n_wave, "", dtype=object)
    warn = np.full(n_wave, "", dtype=object)
    for n in np.unique(length):     # waveforms of equal length are stacked, a block at a time
        same = np.flatnonzero(length == n)
        block = max(1, STACK_SAMPLES // max(int(n), 1))
        for ids in (same[i:i + block] for i in range(0, len(same), block)):
            tt = np.stack([waves_t[w] for w in ids])
            ii = np.stack([waves_i[w] for w in ids])
            a = analyse_waveforms(tt, ii, s)
            for k in RESULT_COLUMNS:
                res[k][ids] = a[k]
            reject[ids], warn[ids] = a["reject"], a["warn"]
    dt = np.array([(x[-1] - x[0]) / (len(x) - 1) if len(x) > 1 else np.nan for x in waves_t])
    t_first = np.array([x[0] for x in waves_t])
    t_final = np.array([x[-1] for x in waves_t])

    # Per-wave notes: conditions and what was done to the capture.
    wave_notes: list[list[str]] = [[] for _ in range(n_wave)]
    status_w = np.where(reject != "", "rejected", "ok").astype(object)
    for w in range(n_wave):
        note = wave_notes[w]
        if reject[w]:
            note.append(reject[w])
            continue
        if warn[w]:
            note.append(warn[w])
            status_w[w] = "warning"
        for label, measured, setting, given, key in (
                ("forward level", res["if_A"][w], if_set[w], if_given[w], "forward_current"),
                ("storage-phase reverse current", res["ir_A"][w], ir_set[w], ir_given[w],
                 "reverse_current")):
            if abs(measured / setting - 1.0) > CONDITION_MISMATCH:
                where = f"column {key}_A" if given else f"reel.yaml recovery.{key}_A"
                note.append(f"measured {label} {si(measured, 'A')} differs from the test "
                            f"condition {si(setting, 'A')} ({where})")
                status_w[w] = "warning"
        if resampled[w]:
            note.append(f"uneven time steps: resampled to {si(dt[w], 's')}")
        if repeated[w]:
            note.append(f"{repeated[w]} repeated time stamp(s) averaged")

    return _Captures(np.asarray(names, dtype=object)[wave_dev], wave_src, res, status_w,
                     wave_notes, if_set, ir_set, length, dt, t_first, t_final)


def _device_table(c: _Captures, settings: RecoverySettings) -> pd.DataFrame:
    """One row per device from its captures (sorted by device)."""
    s = settings
    wave_dev, names = pd.factorize(c.device, sort=True)
    res, status_w, wave_notes, wave_src = c.res, c.status, c.notes, c.source
    if_set, ir_set, length, dt, t_first, t_final = (c.if_set, c.ir_set, c.length, c.dt,
                                                    c.t_first, c.t_final)
    # One row per device: the mean of its usable captures (waves are sorted by device).
    n_dev = len(names)
    good = status_w != "rejected"
    n_good = np.bincount(wave_dev, good, n_dev)
    n_all = np.bincount(wave_dev, minlength=n_dev)
    # The captures a device's conditions come from: its usable ones, or all when none is.
    chosen = good | (n_good[wave_dev] == 0)
    n_chosen = np.bincount(wave_dev, chosen, n_dev)

    def mean_of(x, use, count):
        with np.errstate(invalid="ignore", divide="ignore"):
            return np.bincount(wave_dev[use], x[use], n_dev) / np.where(count > 0, count, np.nan)

    def extreme(x, pick):
        out = np.full(n_dev, -np.inf if pick is np.maximum else np.inf)
        pick.at(out, wave_dev[chosen], x[chosen])
        return out

    table = {"device": [str(x) for x in names]}
    status = np.where(n_good == 0, "rejected", "ok").astype(object)
    status[np.unique(wave_dev[good & (status_w == "warning")])] = "warning"
    table["status"] = status
    first_wave = np.searchsorted(wave_dev, np.arange(n_dev))
    notes = []
    for d in range(n_dev):
        w0 = first_wave[d]
        if n_all[d] == 1:               # the usual case: one capture per device
            note = "; ".join(dict.fromkeys(wave_notes[w0]))
        else:
            ws = np.arange(w0, w0 + n_all[d])
            ok = ws[good[ws]]
            if not len(ok):
                note = "; ".join(wave_notes[w0]) + f" (all {len(ws)} captures rejected)"
            else:
                parts: list[str] = []
                trr = res["trr_s"][ok]
                files = sorted({Path(wave_src[w]).name for w in ok})
                if len(files) > 1 and np.ptp(trr) > CAPTURES_DISAGREE * np.mean(trr):
                    # Captures of one id in several files that do not agree: one id on two
                    # parts?
                    status[d] = "rejected"
                    parts.append(f"captures in {len(files)} files ({', '.join(files)}) disagree: "
                                 f"trr {si(np.min(trr), 's')} to {si(np.max(trr), 's')}; one id "
                                 f"on two parts? Check the files")
                for w in ok:
                    parts += [x for x in wave_notes[w] if x not in parts]
                parts.append(f"mean of {len(ok)} captures"
                             + (f" ({len(ws) - len(ok)} rejected)" if len(ok) < len(ws) else "")
                             + f", trr spread {si(np.ptp(res['trr_s'][ok]), 's')}")
                note = "; ".join(parts)
            files = ", ".join(sorted({Path(wave_src[w]).name for w in ws}))
            note = "; ".join(x for x in (note, f"files {files}") if x)
        notes.append(note)
    table["note"] = notes
    for k in RESULT_COLUMNS:
        table[k] = mean_of(res[k], good, n_good)
    table["if_set_A"] = mean_of(if_set, chosen, n_chosen)
    table["ir_set_A"] = mean_of(ir_set, chosen, n_chosen)
    table["end_rule"] = s.describe()
    table["samples"] = np.bincount(wave_dev[chosen], length[chosen], n_dev).astype(np.int64)
    table["sample_period_s"] = mean_of(dt, chosen, n_chosen)
    table["record_start_s"] = extreme(t_first, np.minimum)
    table["record_end_s"] = extreme(t_final, np.maximum)
    table["captures"] = n_all
    columns = ["device", "status", "note", "trr_s", "ta_s", "tb_s", "irrm_A", "qrr_C",
               "softness", "tt_s", "if_A", "ir_A", "t0_s", "end_level_A", "decay_tau_s",
               "noise_A", "if_set_A", "ir_set_A", "end_rule", "samples", "sample_period_s",
               "record_start_s", "record_end_s", "captures"]
    return pd.DataFrame(table, columns=columns)
