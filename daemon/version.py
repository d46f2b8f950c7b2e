"""The software version stamped on every measurement.

The one place the version is written: pyproject.toml reads it from here (setuptools dynamic
version), so a run never pays for ``importlib.metadata`` at start-up.
"""

__version__ = "0.1.0"
