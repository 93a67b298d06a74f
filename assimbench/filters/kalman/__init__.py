"""Ensemble Kalman filters: the shared ensemble-space pieces, the inflation pieces, and one module per method."""
