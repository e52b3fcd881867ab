"""Built-in mechanisms, templates, shells, loads and run configs (package data: ``tiltopt.configs``)."""
