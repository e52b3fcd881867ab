"""Data files: tube materials and the tube catalogue (a package so that installs carry them)."""
