"""Particle filters."""
