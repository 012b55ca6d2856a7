"""Jobs layer: one module per workflow stage's glue (prepare, fit, ancestral,
pairs) and the script runner. Calls the engine; the report layer sits above."""
