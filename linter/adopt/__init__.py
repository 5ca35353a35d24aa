"""Adoption commands: key-map drafts (map), safe fixes, the plain git hook. Imports: load, resolve,
common, report."""
