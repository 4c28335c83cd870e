"""Model variants: response surfaces over a parameter study and parameter identification."""
