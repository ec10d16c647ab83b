"""Synthetic basket generators, a data-set CLI and naive benchmark baselines."""
