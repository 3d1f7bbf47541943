"""Focusing: regularised energy, lensing and focusing factors, arrivals per segment, rankings,
the energy budget and random-medium theory.
"""
