"""The ``famwise`` command line (a thin layer over the Python API)."""

from .commands import build_parser, main

__all__ = ["main", "build_parser"]
