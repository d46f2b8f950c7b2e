"""The software version stamped on every measurement."""

from importlib.metadata import PackageNotFoundError, version

try:
    __version__ = version("heft")
except PackageNotFoundError:  # running from a source tree that was never installed
    __version__ = "0.0.0+src"
