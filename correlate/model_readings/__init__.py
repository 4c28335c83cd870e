"""model_readings."""
