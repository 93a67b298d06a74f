"""One thin module per console script."""
