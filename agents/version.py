"""Kiln's version string, as installed."""

from importlib.metadata import PackageNotFoundError, version

try:
    KILN_VERSION = version("kiln-sac")
except PackageNotFoundError:  # running from a source tree that was never installed
    KILN_VERSION = "0.0.0+source"
