"""The tiltopt test suite (a package, so its modules import shared helpers as ``tests.helpers``)."""
