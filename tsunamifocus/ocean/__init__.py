"""Operations on depth grids: the one smoother, reference and flat oceans, perturbations, random
fields, long-wave speed, the invented demo sea floor.
"""
