"""CLI command modules; each adds its commands to :data:`tiltopt.cli.main`."""
