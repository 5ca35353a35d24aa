"""Rules engine: the rule API and registration, reward-code scanning.
Imports: resolve, compose, load, common; never the built-in rules themselves."""
