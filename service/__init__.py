"""gaitscape's HTTP API, command line and upload client.

``service`` only orchestrates: schemas, auth and thin routes over ``storage.repo``; numerics live
in ``measures`` and run in workers, never on the event loop.
"""

from __future__ import annotations

from importlib.metadata import PackageNotFoundError, version

try:
    __version__ = version("gaitscape")
except PackageNotFoundError:  # running from a source tree that was never installed
    __version__ = "0.0.0"

__all__ = ["__version__"]
