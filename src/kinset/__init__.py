"""kinset: characterise a reel of diodes and form matched sets for each application."""

from importlib.metadata import PackageNotFoundError, version as _version

try:
    __version__ = _version("kinset")
except PackageNotFoundError:  # running from a source tree that was never installed
    __version__ = "0+unknown"

__all__ = ["__version__"]
