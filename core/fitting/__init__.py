"""Fitting claim-size and claim-count laws to loss data (numpy and scipy only)."""
