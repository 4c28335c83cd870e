"""comparison."""
