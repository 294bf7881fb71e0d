"""prunetrail's headless core: instances, start tours, the recorded search, trails, re-checks.

Nothing here imports the viewer (`tui`); the viewer reads traces only through this package.
"""

__version__ = "0.1.0"
