"""Variational analyses: 3D-Var and strong-constraint 4D-Var."""
