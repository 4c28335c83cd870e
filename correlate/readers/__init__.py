"""readers."""
