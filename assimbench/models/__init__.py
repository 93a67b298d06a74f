"""Chaotic benchmark models: one module per model family, each ending in its spec."""
