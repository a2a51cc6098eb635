"""The installed version of rigbench, from the package metadata (pyproject.toml holds the
one number; nothing in the source repeats it)."""

from __future__ import annotations

__all__ = ["package_version", "UNKNOWN"]

UNKNOWN = "0+unknown"  # a source tree put on sys.path without ever being installed


def package_version() -> str:
    from importlib.metadata import PackageNotFoundError, version

    try:
        return version("rigbench")
    except PackageNotFoundError:
        return UNKNOWN
