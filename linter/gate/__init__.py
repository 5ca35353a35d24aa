"""Filter and gate: one file through the stages (runner, `--jobs`), acceptances, the accepted-findings file, only/skip, and the other runs of a
subset check. Imports: engine, resolve, load, common."""
