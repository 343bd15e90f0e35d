"""The installed package's version, in a module of its own.

Kept apart from ``wavecal/__init__`` so that the pipeline modules (calibrate, apply, the night)
can stamp their products with it without importing the package's front door.
"""
from importlib.metadata import PackageNotFoundError, version

__all__ = ["__version__"]

try:
    __version__: str = version("wavecal")
except PackageNotFoundError:  # running from a source tree that is not installed
    __version__ = "0.0.0+unknown"
