"""The reference circuits, one module per kind (a profile's ``circuit.kind``).

Each kind module holds, and nothing else is needed to add a kind:

``POSITIONS: int``
    How many diodes the circuit takes (the profile's ``set_size`` must equal it).
``PARAMETERS: dict[str, tuple[float, str]]``
    Every drive and load key a profile may give under ``circuit:`` (unit in the
    name, SI or dB/dBm, e.g. ``lo_frequency_Hz``), with its default and the reason
    for that default. A profile key not listed here is an error naming it.
``FIGURES: dict[str, str]``
    Every figure the kind computes: its ``circuit.csv`` column (unit in the name,
    e.g. ``lo_if_isolation_dB``) and what it means, in words for the report.
``deck(circuits, params, cards, temperature_C) -> str``
    One whole ngspice deck (title line first, a ``.control`` block that runs the
    analyses and writes every table with ``wrdata``) holding every circuit of
    ``circuits`` side by side, each on its own nodes. ``circuits`` is a sequence of
    :class:`Circuit`; ``params`` the profile's keys over the defaults; ``cards`` the
    ``.model`` lines the circuits name; ``temperature_C`` the profile's
    ``operating_temperature_C`` (the deck sets ``.options tnom=... temp=...``
    explicitly: the cards' parameters are at the reel's reference temperature).
``NEEDS: dict[str, str]`` (optional)
    Card parameters without which a figure would be made up (the simulator's default
    stands in for what was not measured), each with the reason; a set with a card that
    lacks one gets a note in ``circuit.csv`` and no figures.
``BETTER: dict[str, str]`` (optional)
    Which way each figure is better (``higher``, ``lower``, ``smaller_magnitude``); the
    report ranks sets by it.
``figures(result, circuits, params) -> list[dict[str, float]]``
    From :class:`kinset.circuit.ngspice.RunResult` of that deck, one dict of
    ``FIGURES`` values per circuit, in the order of ``circuits`` (NaN where the
    simulator's output does not give the figure).

Many circuits share one deck and one ngspice process: much faster than one process
per circuit (measured: see the project's findings).
"""

from __future__ import annotations

import importlib
from dataclasses import dataclass
from types import ModuleType

#: The kinds a profile's ``circuit.kind`` may name (the schema lists the same).
KINDS = ("ring_mixer", "clipper", "detector_pair", "sampling_bridge", "varactor_pair")


@dataclass(frozen=True)
class Circuit:
    """One circuit to simulate: a label for its nodes and rows, and its diodes' models.

    ``label`` is made of letters, digits and ``_`` (a node-name prefix); ``models``
    are ``.model`` names in the set's position order (``position`` in sets.csv).
    """

    label: str
    models: tuple[str, ...]


def kind_module(kind: str) -> ModuleType:
    """The module of a circuit kind; ``ValueError`` naming the kinds for an unknown one."""
    if kind not in KINDS:
        raise ValueError(f"unknown circuit kind {kind!r}; known: {', '.join(KINDS)}")
    return importlib.import_module(f"{__name__}.{kind}")
