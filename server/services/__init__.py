"""Service functions: the work behind the API, the pages and the CLI.

Commands and lookups take the session and an :class:`~server.services.access.Actor` as
keyword arguments, own their commit and raise the errors of :mod:`server.services.errors`;
steps take them positionally and run inside a command's transaction. DEVELOPERS.md
("Layers and services") lists the kinds and the order the modules import in.
"""
