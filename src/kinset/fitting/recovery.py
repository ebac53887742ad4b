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

The work runs in stages: *prepare* sorts the samples by device, file and time,
averages repeated time stamps and brings each capture to a uniform grid
(:func:`_captures`); *solve* analyses stacks of equal-length waveforms, arrays in and
arrays out, giving each capture's results and the code of the check that refused it
(:func:`analyse_waveforms`); *diagnose* turns those arrays into findings, first per
capture then per device (:func:`_capture_findings`, :func:`_device_findings`); the
*table* averages each device's usable captures and writes status, note and
``reason_code`` from the findings through :func:`kinset.outcomes.compose`
(:func:`_device_table`). The notes and their codes are in :data:`CATALOGUE`.

References
----------
.. [1] R. H. Kingston, "Switching time in junction diodes and junction transistors",
   Proceedings of the IRE 42(5), 829-834, 1954. doi:10.1109/JRPROC.1954.274521
.. [2] IEC 60747-2:2016, Semiconductor devices — Part 2: Discrete devices — Rectifier
   diodes (reverse recovery time, recovered charge, the extrapolation method).
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from kinset.fitting.batch import Groups, factorize_runs, row_nanmedian
from kinset.format import si
from kinset.outcomes import Catalogue, Finding, compose
from kinset.physics.recovery import transit_time

# --------------------------------------------------------------------------- outcomes

# Why a capture is unusable, in the order the analysis checks (the first one found is
# the reason). ``{all_rejected}`` is empty, or " (all N captures rejected)" on a device
# whose N captures were all refused (the note then quotes the first capture's reason).
REJECTIONS = ("too_few_samples", "never_reverses", "starts_reversed", "no_forward_level",
              "no_zero_crossing", "peak_below_end_level", "ends_before_recovery")

CATALOGUE = Catalogue.load("recovery")

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


# --------------------------------------------------------------------------- solve

# What the analysis gives per waveform: the results, then what the notes quote.
WAVE_COLUMNS = ("t0_s", "if_A", "irrm_A", "ir_A", "t_peak_s", "t_end_s", "trr_s", "ta_s",
                "tb_s", "qrr_C", "softness", "tt_s", "end_level_A", "noise_A", "decay_tau_s",
                "lowest_A", "start_A", "peak_A", "level_A", "after_peak_s", "tail_A",
                "floor_A")


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
        softness, tt_s, end_level_A, noise_A, decay_tau_s`` (NaN where not found or
        refused); ``reason`` (object: the code of :data:`REJECTIONS` that refuses the
        waveform, '' when usable); ``decay_cut_short`` (bool: the record stops before
        the 25 % point, so the peak sample stands in for the knee); and what the
        reasons quote, unmasked: ``lowest_A, start_A`` (lowest and first current),
        ``peak_A, level_A`` (largest reverse current, end level), ``after_peak_s,
        tail_A, floor_A`` (record after the peak, last current, lowest end level).
    """
    g, n = current.shape
    r = np.arange(g)
    out = {k: np.full(g, np.nan) for k in WAVE_COLUMNS}
    reason = out["reason"] = np.full(g, "", dtype=object)
    out["decay_cut_short"] = np.zeros(g, dtype=bool)
    if n < MIN_SAMPLES:
        reason[:] = "too_few_samples"
        return out
    dt = (time[:, -1] - time[:, 0]) / (n - 1)
    d2 = current[:, 2:] - 2.0 * current[:, 1:-1] + current[:, :-2]
    sigma = MAD_TO_SIGMA * np.median(np.abs(d2), axis=1) / np.sqrt(6.0)
    i_f, low, start = _reversal(current, sigma, reason)
    live = reason == ""
    out.update(noise_A=sigma, lowest_A=low, start_A=start)
    if not live.any():
        return out
    t0, edge_ok = _zero_crossing(time, current, i_f, low, live)
    reason[live & ~edge_ok] = "no_zero_crossing"
    live = reason == ""
    rev = -current
    peak_curve, smooth, sigma_s = _smoothed(time, rev, t0, low, sigma, dt, live)
    irrm, k_peak, band_h, t50, t25, no_knee = _peak(time, t0, live, peak_curve, smooth, sigma_s)
    knee = np.where(no_knee, time[r, k_peak], _knee(t50, t25))
    t_peak = np.clip(knee, t0, np.where(np.isfinite(t50), t50, np.inf))
    t_end, level, lowest, missing, too_high = _end_of_recovery(time, smooth, irrm, band_h,
                                                               k_peak, settings)
    reason[live & too_high] = "peak_below_end_level"
    live = reason == ""
    reason[live & missing] = "ends_before_recovery"
    live = reason == ""
    t_last = time[:, -1]
    out.update(peak_A=irrm, level_A=level, after_peak_s=t_last - time[r, k_peak],
               tail_A=smooth[:, -1], floor_A=lowest, decay_cut_short=live & no_knee)

    t_peak = np.minimum(t_peak, t_end)
    ts = t_peak - t0
    mid = (time >= (t0 + 0.25 * ts)[:, None]) & (time <= (t0 + 0.75 * ts)[:, None])
    i_r = row_nanmedian(np.where(mid, rev, np.nan))
    i_r = np.where(mid.sum(axis=1) >= 3, i_r, irrm)
    qrr = _integral(time, rev, t0, np.minimum(t_end, t_last))
    with np.errstate(all="ignore"):
        softness, tt = (t_end - t_peak) / ts, transit_time(ts, i_f, i_r)
    decay_tau = (t25 - t50) / np.log(DECAY_FRACTIONS[0] / DECAY_FRACTIONS[1])
    for key, x in (("t0_s", t0), ("if_A", i_f), ("irrm_A", irrm), ("ir_A", i_r),
                   ("t_peak_s", t_peak), ("t_end_s", t_end), ("trr_s", t_end - t0),
                   ("ta_s", ts), ("tb_s", t_end - t_peak), ("qrr_C", qrr),
                   ("end_level_A", level), ("decay_tau_s", decay_tau),
                   ("softness", softness), ("tt_s", tt)):
        out[key] = np.where(live, x, np.nan)
    return out


def _reversal(current, sigma, reason):
    """Forward level, lowest and first current of each row; refuses rows without a recovery.

    Sets ``reason`` (in place) to never_reverses, starts_reversed or no_forward_level.
    """
    col = np.arange(current.shape[1])[None, :]
    low = current.min(axis=1)
    deep = current < 0.5 * low[:, None]
    before = col < _first(deep)[:, None]
    peak_fwd = np.max(np.where(before, current, -np.inf), axis=1)
    fwd = before & (current >= FORWARD_PLATEAU * peak_fwd[:, None]) & (peak_fwd[:, None] > 0)
    n_fwd = fwd.sum(axis=1)
    i_f = row_nanmedian(np.where(fwd, current, np.nan))
    start = np.median(current[:, :3], axis=1)
    noise_floor = REVERSE_SIGMAS * sigma
    reversed_enough = -low > np.maximum(noise_floor, REVERSE_MIN * np.where(n_fwd > 0, i_f, 0.0))
    reason[~reversed_enough] = "never_reverses"
    starts_rev = reversed_enough & (start < -np.maximum(noise_floor, REVERSE_MIN * -low))
    reason[starts_rev] = "starts_reversed"
    no_fwd = (reason == "") & ((n_fwd < MIN_FORWARD_SAMPLES) | ~(peak_fwd > noise_floor))
    reason[no_fwd] = "no_forward_level"
    return i_f, low, start


def _zero_crossing(time, current, i_f, low, live):
    """t0 of each row (hysteresis, then the least-squares line through the edge) and
    whether a clear crossing was found."""
    g, n = current.shape
    r = np.arange(g)
    col = np.arange(n)[None, :]
    h_edge = EDGE_FRACTION * np.minimum(np.where(live, i_f, 1.0), -low)
    k_neg = _first(current < -h_edge[:, None])
    k_pos = _last((col < k_neg[:, None]) & (current > h_edge[:, None]))
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
    return np.where(edge_ok, t0, np.nan), edge_ok


def _smoothed(time, rev, t0, low, sigma, dt, live):
    """The reverse current smoothed for the peak and for the decay, and the noise left
    on the latter; the scales come from the raw 50 % and 25 % points."""
    n = rev.shape[1]
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
    return peak_curve, smooth, sigma_s


def _peak(time, t0, live, peak_curve, smooth, sigma_s):
    """Irrm and its sample, the hysteresis band, the 50 % and 25 % points, and whether
    the record stops before the 25 % point (no knee)."""
    r = np.arange(len(t0))
    after_t0 = time > np.where(live, t0, np.inf)[:, None]
    masked = np.where(after_t0, peak_curve, -np.inf)
    k_peak = np.argmax(masked, axis=1)
    irrm = masked[r, k_peak]
    irrm = np.where(live & np.isfinite(irrm), irrm, np.nan)
    band_h = np.maximum(HYSTERESIS_SIGMAS * sigma_s, HYSTERESIS_MIN * irrm)
    t50 = _fall_crossing(time, smooth, DECAY_FRACTIONS[0] * irrm, band_h, k_peak)
    t25 = _fall_crossing(time, smooth, DECAY_FRACTIONS[1] * irrm, band_h, k_peak)
    # A record that stops between the end level and 25 % of Irrm has no knee: the peak
    # sample stands in.
    return irrm, k_peak, band_h, t50, t25, np.isnan(_knee(t50, t25))


def _knee(t50, t25):
    """Where the exponential through the 50 % and 25 % points reaches Irrm."""
    return t50 - (t25 - t50) * np.log(1.0 / DECAY_FRACTIONS[0]) / np.log(
        DECAY_FRACTIONS[0] / DECAY_FRACTIONS[1])


def _end_of_recovery(time, smooth, irrm, band_h, k_peak, settings):
    """End of recovery by the reel's rule: t_end, the end level (NaN when extrapolated),
    the lowest level the rule needs, where that level is never reached, and where the
    peak does not reach the end level."""
    s = settings
    if s.end_rule == "extrapolate":
        f1, f2 = s.end_value
        t1 = _fall_crossing(time, smooth, f1 * irrm, band_h, k_peak)
        t2 = _fall_crossing(time, smooth, f2 * irrm, band_h, k_peak)
        t_end = t2 + (t2 - t1) * f2 / (f1 - f2)
        return t_end, np.full(len(irrm), np.nan), f2 * irrm, np.isnan(t2), np.zeros(len(irrm), bool)
    level = s.end_value[0] * irrm if s.end_rule == "fraction_of_peak" \
        else np.full(len(irrm), s.end_value[0])
    t_end = _fall_crossing(time, smooth, level, band_h, k_peak)
    return t_end, level, level, np.isnan(t_end), level >= irrm

# --------------------------------------------------------------------------- prepare helpers

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


def _already_uniform(t: np.ndarray, bounds: np.ndarray) -> np.ndarray:
    """Per capture (``t[bounds[w]:bounds[w + 1]]``), whether :func:`_uniform` would leave
    it as it is: the same test for every capture of one length at once (a Python loop over
    10,000 captures' medians was ~7 % of a reel's recovery step, issue 18)."""
    length = np.diff(bounds)
    out = length < 3
    for n in np.unique(length[length >= 3]):
        same = np.flatnonzero(length == n)
        block = max(1, STACK_SAMPLES // int(n))
        for ids in (same[i:i + block] for i in range(0, len(same), block)):
            steps = np.diff(t[bounds[ids][:, None] + np.arange(n)], axis=1)
            step = np.median(steps, axis=1)
            out[ids] = (step <= 0) | (np.max(np.abs(steps - step[:, None]), axis=1)
                                      <= UNIFORM_TOLERANCE * step)
    return out


# --------------------------------------------------------------------------- prepare

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
        One row per device, sorted by id: ``device, status, note, reason_code, trr_s,
        ta_s, tb_s, irrm_A, qrr_C, softness, tt_s`` and ``if_A`` (measured forward
        level), ``ir_A`` (reverse current of the storage phase), ``t0_s``,
        ``end_level_A``, ``decay_tau_s``, ``noise_A``, the test conditions ``if_set_A,
        ir_set_A``, the ``end_rule``, and the capture (``samples, sample_period_s,
        record_start_s, record_end_s, captures``).
    """
    tables = [points] if isinstance(points, pd.DataFrame) else points
    return _device_table(_concat_captures([_captures(t, settings) for t in tables]), settings)


@dataclass
class _Captures:
    """Per-capture (device and file) arrays, sorted by device and file.

    ``cols`` holds what :func:`analyse_waveforms` gives, and the capture's test
    conditions (``if_set, ir_set`` and whether a column gave them, ``if_given,
    ir_given``), ``length, dt, t_first, t_final, resampled, repeated``.
    """

    device: np.ndarray
    source: np.ndarray
    cols: dict


def _concat_captures(parts: list[_Captures]) -> _Captures:
    if len(parts) == 1:
        return parts[0]
    device = np.concatenate([p.device for p in parts])
    source = np.concatenate([p.source for p in parts])
    order = np.lexsort((pd.factorize(source, sort=True)[0], pd.factorize(device, sort=True)[0]))
    return _Captures(device[order], source[order],
                     {k: np.concatenate([p.cols[k] for p in parts])[order] for k in parts[0].cols})


def _captures(points: pd.DataFrame, settings: RecoverySettings) -> _Captures:
    """Analyse every capture in one table of samples."""
    dev_codes, names = factorize_runs(points["device"].astype(str).to_numpy())
    src_codes, src_names = factorize_runs(points["source"].astype(str).to_numpy())
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
    cols = _waves(t, cur, wave_new, wave, n_wave, settings)
    for key, column, default in (("if", "forward_current", settings.forward_current),
                                 ("ir", "reverse_current", settings.reverse_current)):
        cols[f"{key}_set"], cols[f"{key}_given"] = _condition(points, column, default, order,
                                                              wave, n_wave)
    first = np.flatnonzero(wave_new)
    return _Captures(np.asarray(names, dtype=object)[dc[first]],
                     np.asarray(src_names, dtype=object)[sc[first]], cols)


def _condition(points, column, default, order, wave, n_wave):
    """A test condition per capture (the median of its column), and whether the file gave it."""
    x = points[column].to_numpy(dtype=float) if column in points else None
    if x is None or not np.isfinite(x).any():   # not in the files: reel.yaml's value
        return np.full(n_wave, default), np.zeros(n_wave, dtype=bool)
    x = x[order]
    ok = np.isfinite(x)
    val = pd.Series(np.where(ok, x, np.nan)).groupby(wave).median().to_numpy()
    given = np.isfinite(val)
    return np.where(given, val, default), given


def _waves(t, cur, wave_new, wave, n_wave, settings):
    """Each capture's samples (sorted by capture, then time) on a uniform grid, analysed
    in stacks of equal length; repeated time stamps give their mean current."""
    sample_new = wave_new.copy()
    sample_new[1:] |= t[1:] != t[:-1]
    samp = np.cumsum(sample_new) - 1
    samples = Groups(samp, int(samp[-1]) + 1 if len(samp) else 0)
    cur_u = samples.sum(cur) / samples.counts
    first = np.flatnonzero(sample_new)
    t_u = t[first]
    per_wave = Groups(wave[first], n_wave)
    bounds = np.append(per_wave.starts, len(first))
    waves_t, waves_i, resampled = [], [], np.zeros(n_wave, dtype=bool)
    uniform = _already_uniform(t_u, bounds)
    for w in range(n_wave):        # slicing only; the rare irregular capture is resampled
        tw, iw = t_u[bounds[w]:bounds[w + 1]], cur_u[bounds[w]:bounds[w + 1]]
        if not uniform[w]:
            tw, iw, resampled[w] = _uniform(tw, iw)
        waves_t.append(tw)
        waves_i.append(iw)
    length = np.array([len(x) for x in waves_t], dtype=np.int64)
    cols = _analyse_stacks(waves_t, waves_i, length, settings)
    cols.update(length=length, resampled=resampled,
                repeated=per_wave.count(samples.counts > 1),
                dt=np.array([(x[-1] - x[0]) / (len(x) - 1) if len(x) > 1 else np.nan
                             for x in waves_t]),
                t_first=np.array([x[0] for x in waves_t]),
                t_final=np.array([x[-1] for x in waves_t]))
    return cols


def _analyse_stacks(waves_t, waves_i, length, settings):
    """:func:`analyse_waveforms` over every capture, waveforms of equal length stacked."""
    empty = np.zeros((len(length), 0))
    cols = analyse_waveforms(empty, empty, settings)    # arrays of the right kinds, overwritten
    for n in np.unique(length):     # a block of equal length at a time
        same = np.flatnonzero(length == n)
        block = max(1, STACK_SAMPLES // max(int(n), 1))
        for ids in (same[i:i + block] for i in range(0, len(same), block)):
            a = analyse_waveforms(np.stack([waves_t[w] for w in ids]),
                                  np.stack([waves_i[w] for w in ids]), settings)
            for k, v in a.items():
                cols[k][ids] = v
    return cols

# --------------------------------------------------------------------------- diagnose

def _quoted(x, unit=None):
    """A field of a note: ``x`` per capture (or device), with its unit where it is quoted."""
    return x if unit is None else (lambda i: si(x[i], unit))


# What each rejection quotes: field -> (column of the captures, unit).
_QUOTES = {
    "too_few_samples": {"samples": ("length", None)},
    "never_reverses": {"lowest": ("lowest_A", "A"), "noise": ("noise_A", "A")},
    "starts_reversed": {"start": ("start_A", "A")},
    "peak_below_end_level": {"peak": ("peak_A", "A"), "level": ("level_A", "A")},
    "ends_before_recovery": {"after_peak": ("after_peak_s", "s"), "tail": ("tail_A", "A"),
                             "floor": ("floor_A", "A")},
}


def _capture_findings(c: _Captures) -> list[Finding]:
    """The notes of each capture, in their order: why it is refused, or its remarks."""
    r = c.cols
    reason = r["reason"]
    live = reason == ""
    found = [Finding(code, reason == code,
                     {"all_rejected": "", **{name: _quoted(r[key], unit) for name, (key, unit)
                                             in _QUOTES.get(code, {}).items()}})
             for code in REJECTIONS]
    found.append(Finding("decay_cut_short", r["decay_cut_short"]))
    found.append(Finding("end_past_record", live & (r["t_end_s"] > r["t_final"]),
                         {"beyond": _quoted(r["t_end_s"] - r["t_final"], "s")}))
    with np.errstate(all="ignore"):
        found.append(Finding("coarse_sampling", live & (r["trr_s"] < COARSE_SAMPLES * r["dt"]),
                             {"samples": r["trr_s"] / r["dt"]}))
    for code, key, column in (("forward_level_differs", "if", "forward_current"),
                              ("reverse_current_differs", "ir", "reverse_current")):
        measured, setting, given = r[f"{key}_A"], r[f"{key}_set"], r[f"{key}_given"]
        with np.errstate(all="ignore"):
            off = np.abs(measured / setting - 1.0) > CONDITION_MISMATCH
        source = np.where(given, f"column {column}_A", f"reel.yaml recovery.{column}_A")
        found.append(Finding(code, live & off, {"measured": _quoted(measured, "A"),
                                                "setting": _quoted(setting, "A"),
                                                "source": source}))
    found.append(Finding("uneven_time_steps", live & r["resampled"],
                         {"step": _quoted(r["dt"], "s")}))
    found.append(Finding("repeated_time_stamps", live & (r["repeated"] > 0),
                         {"count": r["repeated"]}))
    return found


def _device_findings(c: _Captures, groups: Groups, good: np.ndarray,
                     found: list[Finding]) -> list[Finding]:
    """The notes of each device: whether its captures disagree, the notes of the captures
    it shows (its usable ones, or its first when none is usable), how they were combined,
    and its files when it has several captures."""
    n_all, n_good = groups.counts, groups.count(good)
    first = np.zeros(len(good), dtype=bool)
    first[groups.starts[n_all > 0]] = True
    shown = good | (groups.each(n_good == 0) & first)
    before = np.cumsum(shown) - shown
    rank = before - groups.each(before[groups.starts])
    trr = c.cols["trr_s"]
    # The spread of trr over the usable captures (NaN if one of them has none).
    spread = np.where(groups.count(good & np.isnan(trr)) > 0, np.nan, groups.spread(trr, good))
    out = [_disagreement(c, groups, good, spread)]
    shown_at: list[np.ndarray] = []
    for k in range(int(rank[shown].max()) + 1 if shown.any() else 0):
        at = np.full(groups.n, -1)
        at[groups.codes[shown & (rank == k)]] = np.flatnonzero(shown & (rank == k))
        shown_at.append(at)
        out += [_on_devices(f, shown_at, n_all) for f in found]
    several = (n_all > 1) & (n_good > 0)
    fields = {"count": n_good, "rejected": n_all - n_good, "spread": _quoted(spread, "s")}
    out.append(Finding("mean_of_captures", several & (n_good == n_all), fields))
    out.append(Finding("mean_of_usable_captures", several & (n_good < n_all), fields))
    out.append(Finding("capture_files", n_all > 1,
                       {"files": lambda d: _file_names(c.source, groups, d)}))
    return out


def _on_devices(f: Finding, shown_at: list[np.ndarray], n_all: np.ndarray) -> Finding:
    """A capture finding moved onto the devices showing that capture as their
    ``len(shown_at)``-th; a sentence one of their earlier captures gave is not repeated."""
    at = shown_at[-1]
    has = at >= 0
    where = has & np.asarray(f.where)[np.where(has, at, 0)]
    if len(shown_at) > 1:
        def text(w):
            return CATALOGUE.text(f.code, **f.fields_of(w))
        for d in np.flatnonzero(where):
            earlier = {text(a[d]) for a in shown_at[:-1] if f.where[a[d]]}
            where[d] = text(at[d]) not in earlier
    fields = {name: (lambda d, name=name: f.fields_of(at[d])[name]) for name in f.fields}
    if f.code in REJECTIONS:
        fields["all_rejected"] = lambda d: (f" (all {n_all[d]} captures rejected)"
                                            if n_all[d] > 1 else "")
    return Finding(f.code, where, fields, f.status)


def _disagreement(c: _Captures, groups: Groups, good: np.ndarray, spread: np.ndarray
                  ) -> Finding:
    """Usable captures of one id in several files whose trr spread exceeds
    :data:`CAPTURES_DISAGREE` of their mean: one id on two parts?"""
    trr = c.cols["trr_s"]
    several = groups.each(groups.counts > 1)
    file = np.zeros(len(trr), dtype=np.int64)
    if several.any():
        file[several] = pd.factorize(np.array([Path(s).name for s in c.source[several]]))[0]
    n_files = groups.distinct(file, good & several)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = groups.sum(np.where(good, trr, 0.0)) / groups.count(good)
    kept = np.where(good, trr, np.nan)
    return Finding("captures_disagree", (n_files > 1) & (spread > CAPTURES_DISAGREE * mean),
                   {"count": n_files, "files": lambda d: _file_names(c.source, groups, d, good),
                    "low": _quoted(groups.min(kept), "s"), "high": _quoted(groups.max(kept), "s")})


def _file_names(source: np.ndarray, groups: Groups, d: int, use=None) -> str:
    """The file names of device ``d``'s captures (those in ``use``), sorted."""
    block = slice(groups.starts[d], groups.starts[d] + groups.counts[d])
    names = source[block] if use is None else source[block][use[block]]
    return ", ".join(sorted({Path(s).name for s in names}))


# --------------------------------------------------------------------------- the table

COLUMNS = ("device", "status", "note", "reason_code", "trr_s", "ta_s", "tb_s", "irrm_A",
           "qrr_C", "softness", "tt_s", "if_A", "ir_A", "t0_s", "end_level_A", "decay_tau_s",
           "noise_A", "if_set_A", "ir_set_A", "end_rule", "samples", "sample_period_s",
           "record_start_s", "record_end_s", "captures")


def _device_table(c: _Captures, settings: RecoverySettings) -> pd.DataFrame:
    """One row per device from its captures (sorted by device): the mean of its usable ones."""
    codes, names = pd.factorize(c.device, sort=True)
    groups = Groups(codes, len(names))
    r = c.cols
    good = r["reason"] == ""
    n_good = groups.count(good)
    # The captures a device's conditions come from: its usable ones, or all when none is.
    chosen = good | groups.each(n_good == 0)
    n_chosen = groups.count(chosen)
    findings = _device_findings(c, groups, good, _capture_findings(c))
    status, note, reason_code = compose(groups.n, findings, CATALOGUE)

    def mean_of(x, use, count):
        with np.errstate(invalid="ignore", divide="ignore"):
            return groups.sum(np.where(use, x, 0.0)) / np.where(count > 0, count,
                                                                             np.nan)

    table = {"device": [str(x) for x in names], "status": status, "note": note,
             "reason_code": reason_code}
    for k in RESULT_COLUMNS:
        table[k] = mean_of(r[k], good, n_good)
    table["if_set_A"] = mean_of(r["if_set"], chosen, n_chosen)
    table["ir_set_A"] = mean_of(r["ir_set"], chosen, n_chosen)
    table["end_rule"] = settings.describe()
    table["samples"] = groups.sum(np.where(chosen, r["length"], 0)).astype(np.int64)
    table["sample_period_s"] = mean_of(r["dt"], chosen, n_chosen)
    table["record_start_s"] = groups.min(np.where(chosen, r["t_first"], np.nan))
    table["record_end_s"] = groups.max(np.where(chosen, r["t_final"], np.nan))
    table["captures"] = groups.counts
    return pd.DataFrame(table, columns=list(COLUMNS))
