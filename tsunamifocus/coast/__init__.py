"""The coastline: from the grid, segmentation, and per-segment values from waves.
"""
