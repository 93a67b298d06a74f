"""Reference vectors: the analysis step recorded for a port to be checked against (assimbench-vectors)."""
