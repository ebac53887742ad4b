"""The outcomes of the capacitance dataset: codes, the least status each gives, sentences.

One catalogue for both of its tables: the codes of a capacitance point (the series R–L–C
element fitted to one Touchstone file, :mod:`kinset.fitting.touchstone`; ``reason_code``
of ``capacitance_points.csv``) and those of a device's C–V fit
(:mod:`kinset.fitting.capacitance`; ``reason_code`` of ``capacitance.csv``). A device's
diagnosis reads its points' codes, never their sentences.
"""

from __future__ import annotations

from kinset.outcomes import Catalogue

CAPACITANCE = Catalogue.load("capacitance")

