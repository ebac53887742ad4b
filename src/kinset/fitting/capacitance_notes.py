"""The outcomes of the capacitance dataset: codes, the least status each gives, sentences.

One catalogue for both of its tables: the codes of a capacitance point (the series R–L–C
element fitted to one Touchstone file, :mod:`kinset.fitting.touchstone`; ``reason_code``
of ``capacitance_points.csv``) and those of a device's C–V fit
(:mod:`kinset.fitting.capacitance`; ``reason_code`` of ``capacitance.csv``). A device's
diagnosis reads its points' codes, never their sentences.
"""

from __future__ import annotations

from kinset.outcomes import Catalogue, Note

CAPACITANCE = Catalogue("capacitance", [
    # One Touchstone row (a VNA point). The reader's reasons (kinset.io.touchstone) arrive
    # as its sentence; 'touchstone_not_listed' is a file no index row names (device unknown).
    Note("touchstone_not_listed", "rejected", "{problem}"),
    Note("touchstone_unusable", "rejected", "{problem}"),
    Note("complex_reference_impedance", "rejected",
         "{file}: complex or non-positive reference impedance; only real ones are supported"),
    Note("too_few_frequencies", "rejected",
         "{file}: {count} frequency point(s) (with its empty fixture); at least {least} are "
         "needed for R, L and C"),
    Note("no_capacitive_reactance", "rejected",
         "{file}: {after_open}the impedance shows no capacitive reactance in the band "
         "{band_min}–{band_max} (is the diode forward biased, shorted or missing?)"),
    Note("series_rlc_fit", "ok",
         "{file}: C = {c} from a series R–L–C fit over {band_min}–{band_max} "
         "({points:.0f} frequencies)"),
    Note("open_removed", "ok", "empty fixture {open_file} removed ({open_c})"),
    Note("no_open_for_fixture", "warning",
         "no empty-fixture measurement for the {fixture} fixture: its parasitic capacitance "
         "is not removed"),
    Note("not_series_rlc", "warning",
         "the impedance does not follow a series R–L–C (the residual implies noise of "
         "{s_noise:.2g} on S)"),
    Note("poorly_conditioned", "warning", "poorly conditioned: C uncertain by {percent:.2g} %"),
    Note("rs_unresolved", "ok", "series resistance not resolved"),
    # One device's C–V fit, in the order its note gives them.
    Note("cv_files_disagree", "rejected",
         "C–V points in {count} files ({files}) disagree: the fit to all of them is off by "
         "{rms} rms, beyond the capacitance accuracy; one id on two parts? Check the files"),
    Note("no_usable_point", "rejected", "no usable capacitance point"),
    Note("too_few_biases", "warning",
         "only {count} reverse bias(es) ({biases}): too few to fit {parameters}; the measured "
         "values serve only at their own bias"),
    Note("fit_not_converged", "rejected",
         "the fit did not converge: the points do not follow a depletion law"),
    Note("fitted_cv_vna", "ok",
         "fitted to {cv_points} C–V table and {vna_points} VNA points together (one fit, each "
         "point weighted by the capacitance accuracy); VNA points lie {offset_pct:+.2g} % "
         "from the C–V points on average"),
    # From one source: which one is the table's 'sources' column ('cv' or 'vna').
    Note("fitted", "ok", "fitted to {points} {source} points, {vr_min:g}–{vr_max:g} V"),
    Note("nonpositive_points", "ok",
         "{count:.0f} point(s) with zero or negative capacitance ignored"),
    Note("forward_bias_points", "ok",
         "{count:.0f} forward-bias point(s) left out (the depletion law is fitted on reverse "
         "bias)"),
    Note("sources_disagree", "warning",
         "C–V table and VNA points disagree by more than the capacitance accuracy (check the "
         "open correction of both)"),
    Note("vj_at_bound", "warning",
         "VJ at the bound {vj:.3g} V of its range {vj_min:g}–{vj_max:g} V: VJ and M are not "
         "separately resolved by these biases"),
    Note("m_unusual", "warning",
         "grading coefficient M = {m:.3g} is outside the usual {m_min:g}–{m_max:g}"),
    Note("poor_fit", "warning",
         "poor fit: rms residual {rms} exceeds the capacitance accuracy"),
    Note("touchstone_rejected", "warning", "Touchstone {file_word} rejected: {notes}"),
    Note("touchstone_warning", "warning", "{notes}"),
    Note("cv_files_combined", "ok", "C–V points from {count} files combined"),
    Note("temperature_uncorrected", "warning",
         "measured up to {dt:.3g} K away from the reference temperature; capacitance is not "
         "corrected for temperature"),
])

