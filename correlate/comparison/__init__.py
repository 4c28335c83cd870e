"""Comparison: test rows paired with model states, the pass rule, statistics, dispositions,
diagnosis, verdict and revision comparison.
"""
