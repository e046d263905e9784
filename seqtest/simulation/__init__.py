"""Simulation: scenarios, and the Monte Carlo check of a plan on the same rules."""

#: Replicates per chunk: part of what makes a seeded run reproducible.
DEFAULT_CHUNK = 25_000
