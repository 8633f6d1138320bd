"""coldmargin planner: the tested library behind the protocol planner.

Domain modules (pure functions on SI floats or numpy arrays) sit beside the layers that are not physics:
the protocol model, the assessment, records, charts and the widget classes.
"""

from importlib.metadata import PackageNotFoundError, version

try:
    __version__ = version("coldmargin")
except PackageNotFoundError:  # running from a source tree that was never installed
    __version__ = "0.0.0+unknown"

__all__ = ["__version__"]
