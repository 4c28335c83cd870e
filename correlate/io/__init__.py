"""Readers: model results, gauge maps, readings. Each maps raw input to the package's conventions."""
