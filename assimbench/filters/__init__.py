"""Filters grouped by family: kalman/ (ensemble Kalman filters and their inflation), variational/,
particle/, and the reference runs. Each module ends with the spec of its filter."""
