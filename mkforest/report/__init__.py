"""Report layer: figures, the methods text and its citations, the manifest,
archive and verify. The top of the package: nothing below imports it."""
