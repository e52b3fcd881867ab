"""tiltopt: the command line and the report writers (explorer, build sheet)."""
__version__ = "0.1.0"
