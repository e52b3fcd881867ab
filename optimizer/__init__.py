"""Optimisation runs, batches and result files (built on :mod:`problems`)."""
