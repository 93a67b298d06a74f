"""Joint state and parameter estimation by state augmentation (see augmented.py)."""
