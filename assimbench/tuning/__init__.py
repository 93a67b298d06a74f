"""Tuning on demand: traced settings searched by adaptive refinement on paired lanes."""
