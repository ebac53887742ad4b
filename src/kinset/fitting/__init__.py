"""Fitting physical models to each device's data, vectorised across the reel."""
