"""reportgen: attribute agreement studies for inspection, from plan to archived report."""

from __future__ import annotations

from importlib.metadata import PackageNotFoundError, version

try:
    __version__ = version("reportgen")
except PackageNotFoundError:  # running from a checkout without install
    __version__ = "0.0.0+checkout"

__all__ = ["__version__"]
