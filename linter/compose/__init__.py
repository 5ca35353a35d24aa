"""Compose: bases, interpolation, overrides and launch scripts -> a composed tree whose leaves keep
their file and line. Imports: load, common."""
