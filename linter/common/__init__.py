"""Shared by every stage: findings, scalar readings, settings and key-map types, the concept
vocabulary, masking, path confinement, time budgets, spill files. Imports only the standard library."""
