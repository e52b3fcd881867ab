"""Plumbing every layer shares: the user-error type and file reading (:mod:`.errors`), ranges typed by
a user (:mod:`.units`), the safety caution (:mod:`.safety`) and the built-in data files
(:mod:`.resources`). It imports nothing from the rest of the package."""
