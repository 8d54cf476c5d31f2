"""Solvers: they take a Model and return sizes; they never read files or print."""
