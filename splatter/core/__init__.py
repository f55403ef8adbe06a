"""Leaf helpers every stage may use: the error types, numba flags, sRGB transfer."""
