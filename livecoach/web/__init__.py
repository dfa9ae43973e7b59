"""The crew web page: static files, the JSON the page reads, and the ``[web]``
ride-file section. The server itself is :mod:`livecoach.sinks.web`.

This package's ``__init__`` stays light: the ride-file loader imports
:mod:`.config` before anything else.
"""
