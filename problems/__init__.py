"""Mechanism templates, objectives and constraints: thin adapters from design variables to the kernels."""
