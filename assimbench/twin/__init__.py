"""The twin experiment: cycling programs, diagnostics, summaries, and the runner that feeds chunks to sinks."""
