"""Comparison of realizations: frequency grids, errors between responses, loop checks, verdicts."""
