"""What a profile asks for that the reel has not measured at all, and how to proceed.

A dataset absent from the whole reel (no extraction table of it) leaves every screen
and match criterion on its quantities without a value for any part. This is said at
once, before matching, on the command line and at the top of the report, with the two
ways on: measure it, or waive the screens explicitly.

A waiver names screened quantities: the profile key ``waive_screens``, ``kinset match
--waive-screens`` or the workflow's ``--config waive_screens=...``. A waived screen is
skipped only while the reel has no data for it at all; a reel with that dataset is
screened part by part as always (a part without data is left out with its reason).
Every set formed with a screen skipped is marked in ``sets.csv`` (column
``unscreened``) and in the report. A match criterion cannot be waived: a set cannot be
matched on what was not measured.

A profile that does not suit the reel is said the same way (:func:`misfits`,
:func:`suit_notice`): made for another junction material than reel.yaml's ``material``
(the profile key ``materials``), or a condition (a current, a bias) outside every part's
measured range, where no part can be compared at all.
"""

from __future__ import annotations

from dataclasses import dataclass

from kinset.matching.profile import Profile, Screen
from kinset.format import si
from kinset.quantities import CONDITION_UNITS, QUANTITIES
from kinset.registry import BY_NAME, NAMES

# How the waiver is written, for the message (profile key, command option, config key).
WAIVER_FORMS = ("'waive_screens: [{q}]' in the profile",
                "'kinset match --waive-screens {q}'",
                "'snakemake --config waive_screens={q}'")


@dataclass(frozen=True)
class Gap:
    """One dataset the reel lacks, and what of the profile needs it."""

    dataset: str
    screens: tuple[Screen, ...]      # the profile's screens on its quantities
    criteria: tuple[str, ...]        # match criteria on its quantities (described)
    waived: tuple[Screen, ...]       # the screens skipped by the profile's waiver

    def as_dict(self) -> dict:
        """For summary.json (the report reads it back with :func:`notice`)."""
        return {"dataset": self.dataset, "label": BY_NAME[self.dataset].label,
                "screens": [{"name": s.name, "quantity": s.quantity, "text": s.describe()}
                            for s in self.screens],
                "criteria": list(self.criteria),
                "waived": [s.name for s in self.waived]}


def gaps(profile: Profile, present) -> list[Gap]:
    """The datasets ``profile`` needs that are not among ``present`` (dataset names with
    an extraction table), in the registry's order."""
    out = []
    for name in NAMES:
        if name in present:
            continue
        screens = tuple(s for s in profile.screens if QUANTITIES[s.quantity].dataset == name)
        criteria = tuple(dict.fromkeys(d.describe() for d in profile.dimensions
                                       if QUANTITIES[d.quantity].dataset == name))
        if screens or criteria:
            waived = tuple(s for s in screens if s.quantity in profile.waive_screens)
            out.append(Gap(name, screens, criteria, waived))
    return out


def skipped_screens(found: list[Gap]) -> list[Screen]:
    """The screens a run skips: waived, and without data for any part of the reel."""
    return [s for g in found for s in g.waived]


@dataclass(frozen=True)
class Notice:
    """What is missing and how to proceed: a headline, the items, the ways on."""

    headline: str
    items: tuple[str, ...]
    proceed: tuple[str, ...]

    def text(self) -> str:
        """One short block for the command line."""
        return "\n".join([self.headline, *(f"  - {i}" for i in self.items),
                          *(["how to proceed:"] if self.proceed else []),
                          *(f"  - {p}" for p in self.proceed)])


def notice(application: str, found: list[dict]) -> Notice | None:
    """The notice for the gaps of one application (:meth:`Gap.as_dict`, as summary.json
    holds them); None when nothing is missing."""
    if not found:
        return None
    labels = ", ".join(g["label"] for g in found)
    items, measure, open_screens = [], [], []
    for g in found:
        folder = f"{g['dataset']}/"
        measure.append(f"measure the {g['label']}: put its CSV files in the reel's "
                       f"{folder} folder and run again")
        for s in g["screens"]:
            if s["name"] in g["waived"]:
                items.append(f"screen on {s['text']}: waived as stated (waive_screens); "
                             "every set formed is marked unscreened")
            else:
                open_screens.append(s["quantity"])
                items.append(f"screen on {s['text']} cannot be applied: every part is left "
                             "out on it")
        items += [f"match criterion {c} cannot be applied, and cannot be waived: a set "
                  "cannot be matched on what was not measured" for c in g["criteria"]]
    measure = list(dict.fromkeys(measure))
    criteria = any(g["criteria"] for g in found)
    if not open_screens and not criteria:    # every screen waived: the way to screen them
        return Notice(f"{application}: this reel has no {labels} data:", tuple(items),
                      tuple(f"to apply the screen, {m}" for m in measure))
    proceed = measure
    if open_screens:
        q = ",".join(dict.fromkeys(open_screens))
        proceed.append("or form sets without the screen, stated explicitly: "
                       + ", or ".join(f.format(q=q) for f in WAIVER_FORMS)
                       + "; every set formed so is marked unscreened (sets.csv column "
                       "'unscreened', and the report)")
    if criteria:
        proceed.append("or use a profile that does not match on what the reel lacks")
    return Notice(f"{application}: this reel has no {labels} data:", tuple(items),
                  tuple(proceed))


# --------------------------------------------------------------------------- suitability

def misfits(profile: Profile, material: str | None, tables: dict | None = None) -> list[dict]:
    """How ``profile`` does not suit the reel, as dicts for summary.json (``kind``:
    ``material`` or ``range``, ``text``, ``proceed``); empty when it suits.

    ``material`` is reel.yaml's; ``tables`` the extraction tables (None in the workflow
    plan, before anything is extracted: then only the material is compared). A condition
    is out of range when it lies outside the span from the lowest to the highest
    condition any part of the reel was measured at.
    """
    out = []
    if profile.materials and material and material not in profile.materials:
        made = " or ".join(profile.materials)
        out.append({"kind": "material",
                    "text": f"made for {made}, this reel is {material} (reel.yaml material): "
                            "its currents, screens and tolerances are set for other parts",
                    "proceed": f"use a profile made for {material}{_shipped_for(material)}, "
                               "or copy this one and set its materials and numbers for "
                               "these parts"})
    seen = set()
    for item in [*profile.screens, *profile.dimensions] if tables is not None else []:
        key = (item.quantity, item.condition)
        if key in seen or item.condition is None:
            continue
        seen.add(key)
        span = _measured_span(item.quantity, tables)
        if span is not None and not span[0] * (1 - SPAN_SLACK) <= item.condition \
                <= span[1] * (1 + SPAN_SLACK):
            out.append(_range_misfit(item, span))
    return out


SPAN_SLACK = 1e-6       # relative slack on the measured span (rounding of the files)


def _shipped_for(material: str) -> str:
    """' (shipped: a, b)': the shipped profiles made for ``material`` (or for any)."""
    from kinset.io.config import read_yaml
    from kinset.io.profiles import shipped_profiles
    names = [n for n, path in sorted(shipped_profiles().items())
             if material in (read_yaml(path)[0].get("materials") or [material])]
    return f" (shipped: {', '.join(names)})" if names else ""


def _measured_span(quantity: str, tables: dict):
    """(lowest, highest) condition any part of the reel was measured at; None if unknown."""
    q = QUANTITIES[quantity]
    table = tables.get(q.dataset)
    if q.measured is None or table is None or not all(c in table for c in q.measured):
        return None
    lo, hi = (table[c].to_numpy(dtype=float) for c in q.measured)
    ok = (lo == lo) & (hi == hi)
    return (float(lo[ok].min()), float(hi[ok].max())) if ok.any() else None


def _range_misfit(item, span) -> dict:
    q = QUANTITIES[item.quantity]
    unit = CONDITION_UNITS[q.condition]
    low, high, at = si(span[0], unit), si(span[1], unit), si(item.condition, unit)
    label = BY_NAME[q.dataset].label
    what = "current" if unit == "A" else "reverse bias"
    return {"kind": "range",
            "text": f"{item.describe()}: outside every part's measured range ({label} "
                    f"{low}\u2013{high} on this reel): no part can be compared there",
            "proceed": f"measure the {label} to {at}, or set the profile's {what} inside "
                       f"{low}\u2013{high}"}


def suit_notice(application: str, found: list[dict]) -> Notice | None:
    """The notice of how a profile does not suit the reel (:func:`misfits`, as summary.json
    holds them); None when it suits."""
    if not found:
        return None
    return Notice(f"{application}: this profile does not suit this reel:",
                  tuple(f["text"] for f in found),
                  tuple(dict.fromkeys(f["proceed"] for f in found)))
