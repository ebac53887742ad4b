"""Forming matched pairs, quads and larger sets from devices' normalised criteria.

``graph``, ``packing``, ``heuristics``, ``polish`` and ``sets`` hold the pure algorithm:
which devices fit together within tolerance, and how to pick as many disjoint sets as
possible (or the tightest sets first); ``sets.form_sets`` is its entry point. They know
nothing about files, quantities or application profiles; the caller hands them each
device's criteria already divided by their tolerances. ``partners`` finds the best
partners of one device, or the parts that complete a set with its remaining members.
"""
