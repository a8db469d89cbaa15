"""The installed version of famwise (read once from the package metadata)."""

from importlib.metadata import PackageNotFoundError, version as _version

try:
    __version__ = _version("famwise")
except PackageNotFoundError:  # running from a source tree without install
    __version__ = "0.0.0+unknown"
