"""Mechanics: pure formulas (tensors and Hooke, reference elements, the isoparametric map, rosette
reduction, the transverse-sensitivity relation).
"""
