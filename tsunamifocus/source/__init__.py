"""Earthquake sources: Okada (1985) displacement, faults, ruptures, point sources, uplift on a
grid, initial energy and the energy-weighted ray fan.
"""
