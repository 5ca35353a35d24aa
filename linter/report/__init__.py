"""Views of an `Outcome`: text, JSON, SARIF 2.1.0, the audit page, explain. They never load a file
again or decide an exit status. Imports: the pipeline's Outcome and the stages below it."""
