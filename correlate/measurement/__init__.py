"""Measurement: the test side (tare per sequence, channel corrections, channel health).
"""
