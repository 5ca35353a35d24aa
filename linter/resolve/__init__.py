"""Resolve: a composed tree + key map + alias table -> `RunModel`, and the run's one arithmetic.
Imports: compose (node types), load, common."""
