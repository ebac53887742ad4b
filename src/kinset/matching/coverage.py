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
"""

from __future__ import annotations

from dataclasses import dataclass

from kinset.matching.profile import Profile, Screen
from kinset.quantities import QUANTITIES
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
