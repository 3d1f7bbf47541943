"""Propagation over the ocean: long-wave ray tracing and the linear long-wave solver (each with
its numba kernel).
"""
