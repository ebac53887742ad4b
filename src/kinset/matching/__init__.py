"""Forming matched pairs, quads and larger sets from devices' normalised criteria.

``sets`` holds the pure algorithm: which devices fit together within tolerance, and
how to pick as many disjoint sets as possible (or the tightest sets first). It knows
nothing about files, quantities or application profiles; the caller hands it each
device's criteria already divided by their tolerances.
"""
