"""Service functions: the work behind the API, the pages and the CLI.

Each takes a session and an :class:`~server.services.access.Actor` as keyword arguments,
owns its commit, and raises the errors of :mod:`server.services.errors`.
"""
