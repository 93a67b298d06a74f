"""Files: atomic write-then-rename, result files, spectrum files, provenance."""
