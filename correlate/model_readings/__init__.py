"""Model readings: what each gauge reads on the model (surface, locator, gauge operator, evaluation,
convention checks, the readings table).
"""
