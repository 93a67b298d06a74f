"""Observation networks and operators (noise levels are traced settings, not part of an operator)."""
