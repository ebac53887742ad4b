"""A series R–L–C element fitted to each Touchstone network: one capacitance point per file.

Each measurement (a Touchstone sweep of one device at one reverse bias, read by
:func:`kinset.io.touchstone.read_vna`) becomes one capacitance point. The device
admittance follows from S and the fixture
(:func:`kinset.physics.capacitance.fixture_admittance`); the empty fixture measured at
the same bias is subtracted as an admittance; a series R–L–C is fitted to the
impedance over the band where the measurement is well conditioned. The model is linear
in (R, L, 1/C), so every sweep of a job is solved at once as a stack of 3×3 weighted
normal equations.

Conditioning of a VNA measurement (how strongly noise on S is amplified into the
impedance) is :math:`\\sigma_Z/|Z| = |Z|\\,|dY/dS|` per unit noise on S. For a
reflection measurement of a small capacitance at low frequency, |Z| ≫ Z0 and S11 ≈ 1:
the ratio grows like |Z|/(2 Z0), and the series resistance is lost in the noise. The
band kept is where this ratio is within :data:`BAND_FACTOR` of its best value in the
sweep; inside it the points are weighted by 1/σ_Z.

Stages: :func:`_prepare` (measurements to flat arrays, or the reason a row gives none),
:func:`fit_series_rlc` (arrays in, element values out), :func:`_diagnose` (the point codes
of :data:`kinset.fitting.capacitance_notes.CAPACITANCE` as findings), :func:`_table`
(status, note and ``reason_code`` composed once by :func:`kinset.outcomes.compose`).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from kinset.fitting.batch import Groups, grouped_normal_equations, inverse_diagonal, solve_stack
from kinset.format import si
from kinset.fitting.capacitance_notes import CAPACITANCE
from kinset.outcomes import SEVERITY, STATUSES, Finding, compose, split_codes
from kinset.physics.capacitance import fixture_admittance

# Keep frequencies whose noise amplification σ_Z/|Z| is within this factor of the
# sweep's best (rule of thumb: a point 10 times noisier carries 1 % of the weight).
BAND_FACTOR = 10.0
MIN_BAND_POINTS = 5          # the band holds at least this many best-conditioned points
MIN_FREQUENCIES = 3          # below this no R, L and C can be fitted with a residual
# Residual of the R–L–C fit, expressed as the rms noise on S it implies, above which the
# sweep does not look like a series R–L–C (a calibrated analyser is near 1e-3 or better).
POOR_S_NOISE = 1e-2
UNCERTAIN_C_REL = 1e-2       # relative standard error of C above which a point warns
# Relative standard error of C above which a point is rejected. A VNA point enters the
# C–V fit with the weight of the capacitance accuracy (an LCR meter or calibrated
# analyser is near 1 %, common practice; the demo reel states 1 %): a point ten times
# less certain than that would pull CJO, VJ and M with a weight it has not earned, and
# no shipped profile's capacitance tolerance (1 %, or 50 fF on about 1 pF) can be judged
# with it. Between UNCERTAIN_C_REL and this the point warns.
REJECT_C_REL = 0.1
# The element is capacitive over the band when its reactance is negative at this share
# of the band's frequencies or more: above self-resonance it is an inductor, and a C
# from a band mostly above resonance rests on the few frequencies below it.
CAPACITIVE_SHARE = 0.5
# The file's own capacitance at mid-band, -1/(ω (X − ωL)) with the fitted inductance's
# reactance removed, equals C at every frequency for a series R–L–C (circuit theory).
# A fitted C further than this fraction from its average over mid-band, and by more than
# MIDBAND_SIGMAS standard deviations of the difference (from the fit's noise on S), does
# not describe the file: rejected (a warning would still feed it to the C–V fit). 10 % is ten
# times the capacitance accuracy above, so a disagreement this large is not a
# calibration residue but a file that is not one series element.
MIDBAND_C_REL = 0.1
MIDBAND_SIGMAS = 3.0
MIDBAND_SPAN = 2.0           # mid-band: within an octave either side of the geometric mean
# A series resistance the data put below zero by more than NEGATIVE_RS_SIGMAS standard
# errors and by more than NEGATIVE_RS_FLOOR of the smallest |Z| in the band is a
# diagnosis, not a value: a passive element has RS ≥ 0 (the fit is bounded there), so
# the reference plane, the calibration or the fixture type is wrong. The floor (R/|Z| of
# 1e-3, a loss angle of 0.06°) keeps rounding in a noise-free file, whose standard error
# is near zero, from rejecting it; a negative RS that small moves no capacitance.
NEGATIVE_RS_SIGMAS = 3.0
NEGATIVE_RS_FLOOR = 1e-3

FIT_COLUMNS = ("capacitance", "capacitance_se", "resistance", "resistance_se", "inductance",
               "band_min", "band_max", "band_points", "fit_rms_ohm", "s_noise",
               "open_capacitance")
# Figures of the fit used only to diagnose it (never a result column): the unbounded
# series resistance, the band's reactance, the file's own C at mid-band.
SANITY_COLUMNS = ("resistance_free", "capacitive_points", "reactance_min", "reactance_max",
                  "z_min", "mid_frequency", "mid_capacitance", "mid_deviation_sigmas")


def point_status(reason_code) -> np.ndarray:
    """Status of each point from its ``reason_code`` alone: the most severe of its codes.

    A code this catalogue does not hold (a C–V point has none) counts as ``ok``.
    """
    worst = [max((SEVERITY[CAPACITANCE[c].status] for c in codes if c in CAPACITANCE), default=0)
             for codes in split_codes(reason_code)]
    return np.asarray(STATUSES, dtype=object)[np.asarray(worst, dtype=int)]


def _interp_complex(x, xp, fp):
    return np.interp(x, xp, fp.real) + 1j * np.interp(x, xp, fp.imag)


def _sweep_arrays(m):
    """Frequencies, device admittance, its noise gain |dY/dS| and the open's admittance.

    Returns (frequency, Y_device, gain, open admittance or None), or None when the
    reference impedance is complex or not positive (only real ones are supported).
    """
    sw = m.sweep
    z0 = sw.reference_impedance
    if np.any(np.abs(z0.imag) > 1e-9 * np.abs(z0)) or np.any(z0.real <= 0):
        return None
    f = sw.frequency
    y, dy = fixture_admittance(sw.s, z0.real, m.fixture)
    gain = np.abs(dy)
    y_open = None
    if m.open_sweep is not None:
        op = m.open_sweep
        yo, dyo = fixture_admittance(op.s, op.reference_impedance.real, m.fixture)
        if len(op.frequency) != len(f) or not np.allclose(op.frequency, f, rtol=1e-9):
            inside = (f >= op.frequency[0]) & (f <= op.frequency[-1])
            f, y, gain = f[inside], y[inside], gain[inside]
            yo = _interp_complex(f, op.frequency, yo)
            dyo = np.interp(f, op.frequency, np.abs(dyo))
        y = y - yo
        gain = np.hypot(gain, np.abs(dyo))
        y_open = yo
    return f, y, gain, y_open


def fit_touchstone(measurements: list) -> pd.DataFrame:
    """One capacitance point per Touchstone measurement: series R–L–C fits, all at once.

    Parameters
    ----------
    measurements : list of :class:`kinset.io.touchstone.VnaMeasurement`
        Rows of the index with their sweeps (and empty-fixture sweeps) read.

    Returns
    -------
    DataFrame
        One row per measurement: ``device, kind ('vna'), reverse_voltage [V],
        capacitance [F], capacitance_se [F], resistance [Ohm], resistance_se,
        inductance [H], band_min, band_max [Hz], band_points, fit_rms_ohm, s_noise,
        open_capacitance [F], fixture, temperature [K], frequency (NaN), open_file,
        status (ok | warning | rejected), note, reason_code (codes of
        :data:`kinset.fitting.capacitance_notes.CAPACITANCE`), source (the Touchstone
        file), line (in index.csv), index``.
    """
    early, arrays, n_freq = _prepare(measurements)
    good = [i for i, a in enumerate(arrays) if a is not None]
    fit = {k: np.full(len(measurements), np.nan) for k in FIT_COLUMNS + SANITY_COLUMNS}
    for k, v in fit_series_rlc([arrays[i] for i in good]).items():
        fit[k][good] = v
    return _table(measurements, fit, _diagnose(measurements, early, n_freq, fit))


def _prepare(measurements: list) -> tuple[np.ndarray, list, np.ndarray]:
    """Each measurement's arrays for the fit, or the code of why it gives none.

    Returns the code per measurement ('' when it is fitted), its arrays (None when not
    fitted) and its number of frequencies (after the empty fixture's range; 0 unread).
    """
    early = np.full(len(measurements), "", dtype=object)
    arrays: list = [None] * len(measurements)
    n_freq = np.zeros(len(measurements), dtype=int)
    for i, m in enumerate(measurements):
        if m.problem:
            early[i] = "touchstone_not_listed" if m.device == "" else "touchstone_unusable"
        elif m.sweep is not None:
            a = _sweep_arrays(m)
            if a is None:
                early[i] = "complex_reference_impedance"
            elif len(a[0]) < MIN_FREQUENCIES:
                early[i], n_freq[i] = "too_few_frequencies", len(a[0])
            else:
                arrays[i], n_freq[i] = a, len(a[0])
    return early, arrays, n_freq


def _band(w, y, gain, sweeps: Groups):
    """Impedance, its σ_Z per unit noise on S, and the band of each sweep's rows.

    The band: within BAND_FACTOR of the sweep's best conditioning σ_Z/|Z|, and at least
    its MIN_BAND_POINTS best rows.
    """
    g, starts = sweeps.codes, sweeps.starts
    with np.errstate(divide="ignore", invalid="ignore"):
        z = 1.0 / y
        sz = np.abs(z) ** 2 * gain             # σ_Z per unit noise on S [Ohm]
        cond = sz / np.abs(z)                  # relative noise gain
    cond = np.where(np.isfinite(cond) & (cond > 0), cond, np.inf)
    best = sweeps.min(cond)
    order = np.lexsort((cond, g))
    rank = np.empty(len(g), dtype=int)
    rank[order] = np.arange(len(g)) - starts[g[order]]
    band = np.isfinite(cond) & ((cond <= BAND_FACTOR * best[g]) | (rank < MIN_BAND_POINTS))
    return z, sz, band


def fit_series_rlc(arrays: list) -> dict[str, np.ndarray]:
    """Weighted series R–L–C fits of many impedance sweeps at once.

    ``arrays``: per sweep (frequency [Hz], device admittance [S], noise gain |dY/dS| [S],
    empty-fixture admittance or None). Returns per sweep the columns of
    :data:`FIT_COLUMNS` (C, R, L with standard errors, the band, the residual).
    """
    k = len(arrays)
    if not k:
        return {}
    sizes = np.array([len(a[0]) for a in arrays])
    sweeps = Groups(np.repeat(np.arange(k), sizes), k)
    w = 2 * np.pi * np.concatenate([a[0] for a in arrays])
    z, sz, band = _band(w, np.concatenate([a[1] for a in arrays]),
                        np.concatenate([a[2] for a in arrays]), sweeps)
    gb, wb, zb, sb = sweeps.codes[band], w[band], z[band], sz[band]
    # Sums over the band keep numpy.bincount's order (one after another): Groups.sum
    # (reduceat) adds pairwise, which moves the last bits of C, R, L and of every table.
    nb = np.bincount(gb, minlength=k)
    w_ref = np.exp(np.bincount(gb, np.log(wb), minlength=k) / np.maximum(nb, 1))
    x = wb / w_ref[gb]
    # Rows: Re Z = R and Im Z = ωL − 1/(ωC), in units of Ohm: unknowns
    # (R, L·ω_ref, ω_ref^-1/C), each row divided by its σ_Z.
    m = len(gb)
    idx = np.concatenate([gb, gb])
    jac = np.zeros((2 * m, 3))
    jac[:m, 0] = 1.0 / sb
    jac[m:, 1] = x / sb
    jac[m:, 2] = -1.0 / (x * sb)
    target = np.concatenate([zb.real, zb.imag]) / np.concatenate([sb, sb])
    jtj, jtr = grouped_normal_equations(idx, jac, target, k)
    p, used, r_free = _solve_bounded(jtj, jtr)
    resid = np.einsum("ij,ij->i", jac, p[idx]) - target
    ssr = np.bincount(idx, resid ** 2, minlength=k)
    dof = 2 * nb - used.sum(axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        noise = np.sqrt(ssr / np.maximum(dof, 1))
        jtj_u = jtj * (used[:, :, None] & used[:, None, :]) + np.einsum(
            "ki,ij->kij", ~used, np.eye(3))
        se = np.where(used, np.sqrt(inverse_diagonal(jtj_u, rcond=1e-15) * noise[:, None] ** 2),
                      0.0)
        c = 1.0 / (p[:, 2] * w_ref)             # from 1/C [1/F]
        zfit = p[gb, 0] + 1j * (p[gb, 1] * x - p[gb, 2] / x)
        rms = np.sqrt(np.bincount(gb, np.abs(zb - zfit) ** 2, minlength=k) / np.maximum(nb, 1))
    return {
        "capacitance": c, "capacitance_se": np.abs(se[:, 2] * w_ref) * c ** 2,
        "resistance": p[:, 0], "resistance_se": se[:, 0],
        "inductance": p[:, 1] / w_ref,
        "band_min": sweeps.min(np.where(band, w, np.nan)) / (2 * np.pi),
        "band_max": sweeps.max(np.where(band, w, np.nan)) / (2 * np.pi),
        "band_points": nb.astype(float), "fit_rms_ohm": rms, "s_noise": noise,
        "open_capacitance": _open_capacitance(arrays, band, sweeps),
        "resistance_free": r_free,
        **_sanity(gb, wb, zb, sb, p, w_ref, noise, se[:, 2] * w_ref, k),
    }


def _solve_bounded(jtj: np.ndarray, jtr: np.ndarray):
    """(R, L·ω_ref, 1/(C·ω_ref)) with R ≥ 0 and L ≥ 0: the bounded least-squares optimum.

    R is fitted to the real parts only and (L, 1/C) to the imaginary parts only, so the
    normal equations are block diagonal: R's bound is met exactly by projecting R onto
    R ≥ 0 (a convex quadratic in one variable), L's by refitting (R, 1/C) with L = 0 where
    the free L is negative or unresolved. Returns the parameters, the mask of the ones
    fitted (L held at zero is not; R keeps its standard error from the data even at its
    bound) and the unbounded R, kept only to diagnose the data.
    """
    k = len(jtj)
    p = solve_stack(jtj, jtr)
    used = np.ones((k, 3), dtype=bool)
    neg_l = ~(p[:, 1] >= 0)                   # negative or unresolved inductance: L = 0
    if neg_l.any():
        keep = [0, 2]
        sub = solve_stack(jtj[neg_l][:, keep][:, :, keep], jtr[neg_l][:, keep])
        p[neg_l] = np.column_stack([sub[:, 0], np.zeros(neg_l.sum()), sub[:, 1]])
        used[neg_l, 1] = False
    r_free = p[:, 0].copy()
    p[r_free < 0, 0] = 0.0
    return p, used, r_free


def _sanity(gb, wb, zb, sb, p, w_ref, noise, se_inv_c, k: int) -> dict[str, np.ndarray]:
    """Figures the diagnosis checks the fit against, from the band's own impedance.

    Per sweep: how many band frequencies have a negative (capacitive) reactance, the
    reactance's range and the smallest |Z|; and the file's own C at mid-band: over the
    band frequencies within MIDBAND_SPAN of the geometric-mean frequency, 1/C_i =
    -ω_i (X_i − ω_i L) with the fitted L, averaged with weights 1/σ_i² (σ_i from the fit's
    noise on S), and how many standard deviations of the difference the fitted 1/C lies
    from that average.
    """
    out = {name: np.full(k, np.nan) for name in SANITY_COLUMNS if name != "resistance_free"}
    nb = np.bincount(gb, minlength=k)
    has = np.flatnonzero(nb > 0)
    if not len(has):
        return out
    x = zb.imag
    out["capacitive_points"] = np.bincount(gb, x < 0, minlength=k).astype(float)
    starts = np.concatenate([[0], np.cumsum(nb)[:-1]])[has]
    for name, value, reduce in (("reactance_min", x, np.minimum), ("reactance_max", x, np.maximum),
                                ("z_min", np.abs(zb), np.minimum)):
        out[name][has] = reduce.reduceat(value, starts)
    distance = np.abs(np.log(wb / w_ref[gb]))
    nearest = np.lexsort((distance, gb))[starts]
    near = distance <= np.log(MIDBAND_SPAN)
    near[nearest] = True
    with np.errstate(invalid="ignore", divide="ignore"):
        inv_c = -wb * (x - wb * p[gb, 1] / w_ref[gb])         # 1/C_i [1/F]
        weight = np.where(near, 1.0 / (wb * sb) ** 2, 0.0)   # σ_i = ω_i σ_Z,i × noise
        total = np.bincount(gb, weight, minlength=k)
        mean = np.bincount(gb, weight * inv_c, minlength=k) / total
        sd = np.hypot(noise / np.sqrt(total), se_inv_c)
        out["mid_frequency"][has] = w_ref[has] / (2 * np.pi)
        out["mid_capacitance"][has] = 1.0 / mean[has]
        out["mid_deviation_sigmas"][has] = (np.abs(p[:, 2] * w_ref - mean) / sd)[has]
    return out


def _open_capacitance(arrays: list, band: np.ndarray, sweeps: Groups) -> np.ndarray:
    """The empty fixture's capacitance Im(Y)/ω at the band's median (NaN: no open, no band)."""
    open_c = np.full(len(arrays), np.nan)
    for i, a in enumerate(arrays):
        if a[3] is not None:
            sel = band[sweeps.starts[i]:sweeps.starts[i] + sweeps.counts[i]]
            if sel.any():
                open_c[i] = np.median(a[3].imag[sel] / (2 * np.pi * a[0][sel]))
    return open_c


def _diagnose(measurements: list, early: np.ndarray, n_freq: np.ndarray, fit: dict
              ) -> list[Finding]:
    """The codes of every measurement, in the order of its note (rejecting codes first)."""
    c, band_min, band_max = fit["capacitance"], fit["band_min"], fit["band_max"]
    files = [m.file for m in measurements]
    has_open = np.asarray([bool(m.open_file) for m in measurements], dtype=bool)
    band = {"file": files, "band_min": lambda i: si(band_min[i], "Hz"),
            "band_max": lambda i: si(band_max[i], "Hz")}
    problem = {"problem": [m.problem for m in measurements]}
    sanity, ok = _sanity_findings(fit, early == "", band, np.where(
        has_open, "after the empty fixture is removed, ", ""))
    with np.errstate(invalid="ignore"):
        unsure = fit["capacitance_se"] > UNCERTAIN_C_REL * c
        return [
            Finding("touchstone_not_listed", early == "touchstone_not_listed", problem),
            Finding("touchstone_unusable", early == "touchstone_unusable", problem),
            Finding("complex_reference_impedance", early == "complex_reference_impedance",
                    {"file": files}),
            Finding("too_few_frequencies", early == "too_few_frequencies",
                    {"file": files, "count": n_freq, "least": MIN_FREQUENCIES}),
            *sanity,
            Finding("series_rlc_fit", ok, {**band, "c": lambda i: si(c[i], "F", 4),
                                           "points": fit["band_points"]}),
            Finding("open_removed", ok & has_open,
                    {"open_file": [m.open_file for m in measurements],
                     "open_c": lambda i: si(fit["open_capacitance"][i], "F")}),
            Finding("no_open_for_fixture", ok & ~has_open & ~np.asarray(
                [m.fixture_has_open for m in measurements], dtype=bool),
                {"fixture": [m.fixture for m in measurements]}),
            Finding("not_series_rlc", ok & (fit["s_noise"] > POOR_S_NOISE),
                    {"s_noise": fit["s_noise"]}),
            Finding("poorly_conditioned", ok & unsure,
                    {"percent": lambda i: 100 * fit["capacitance_se"][i] / c[i]}),
            Finding("rs_unresolved", ok & ~(fit["resistance"] > 2 * fit["resistance_se"])),
        ]


def _reactance(x: float) -> str:
    """A reactance as people write it: '+j1.2 kOhm', '−j35 Ohm'."""
    return f"{'+' if x >= 0 else '−'}j{si(abs(x), 'Ω')}"


def _sanity_findings(fit: dict, fitted: np.ndarray, band: dict, after_open: np.ndarray
                     ) -> tuple[list[Finding], np.ndarray]:
    """Why a fitted point is not a capacitance to trust, and the mask of those that are.

    Not capacitive over the band (a majority of its frequencies inductive), no positive
    C, a negative series resistance beyond noise, C too uncertain, C off the file's own
    value at mid-band: each rejects the point with its own code, in this order.
    """
    c, se, r_free = fit["capacitance"], fit["capacitance_se"], fit["resistance_free"]
    n_band, n_cap = fit["band_points"], fit["capacitive_points"]
    with np.errstate(invalid="ignore", divide="ignore"):
        inductive = fitted & ~(n_cap >= CAPACITIVE_SHARE * n_band)
        no_reactance = fitted & ~inductive & ~(np.isfinite(c) & (c > 0))
        sane = fitted & ~inductive & ~no_reactance
        negative = sane & (r_free < -NEGATIVE_RS_SIGMAS * fit["resistance_se"]) & (
            r_free < -NEGATIVE_RS_FLOOR * fit["z_min"])
        rel = se / c
        uncertain = sane & (rel > REJECT_C_REL)
        off = c / fit["mid_capacitance"] - 1.0
        disagrees = sane & (np.abs(off) > MIDBAND_C_REL) & (
            fit["mid_deviation_sigmas"] > MIDBAND_SIGMAS)
    findings = [
        Finding("not_capacitive", inductive, {
            **band, "after_open": after_open,
            "where": lambda i: ("at every frequency" if n_cap[i] == 0 else
                                f"at {n_band[i] - n_cap[i]:.0f} of {n_band[i]:.0f} frequencies"),
            "x_min": lambda i: _reactance(fit["reactance_min"][i]),
            "x_max": lambda i: _reactance(fit["reactance_max"][i])}),
        Finding("no_capacitive_reactance", no_reactance, {**band, "after_open": after_open}),
        Finding("negative_rs", negative, {
            **band, "r": lambda i: si(r_free[i], "Ω"),
            "r_se": lambda i: si(fit["resistance_se"][i], "Ω")}),
        Finding("c_uncertain", uncertain, {
            **band, "c": lambda i: si(c[i], "F"), "percent": 100 * rel,
            "limit": 100 * REJECT_C_REL, "r": lambda i: si(fit["resistance"][i], "Ω")}),
        Finding("c_disagrees_with_file", disagrees, {
            "file": band["file"], "c": lambda i: si(c[i], "F"), "percent": 100 * off,
            "c_mid": lambda i: si(fit["mid_capacitance"][i], "F"),
            "f_mid": lambda i: si(fit["mid_frequency"][i], "Hz")}),
    ]
    return findings, sane & ~negative & ~uncertain & ~disagrees


def _table(measurements: list, fit: dict, findings: list[Finding]) -> pd.DataFrame:
    """The points with status, note and reason_code composed from the findings."""
    n = len(measurements)
    status, note, code = compose(n, findings, CAPACITANCE)
    fit = {k: fit[k] for k in FIT_COLUMNS}          # the diagnosis' own figures stay inside
    fit["capacitance"] = np.where(status == "rejected", np.nan, fit["capacitance"])
    return pd.DataFrame({
        "device": [m.device for m in measurements],
        "kind": "vna",
        "reverse_voltage": [m.reverse_voltage for m in measurements],
        **fit,
        "fixture": [m.fixture for m in measurements],
        "temperature": [m.temperature for m in measurements],
        "frequency": np.nan,
        "open_file": [m.open_file for m in measurements],
        "status": status.tolist(),
        "note": note.tolist(),
        "reason_code": code.tolist(),
        "source": [m.path for m in measurements],
        "line": [m.line for m in measurements],
        "index": [m.index for m in measurements],
    }, index=pd.RangeIndex(n))
