"""countmill: turn data-logger raw codes into engineering units you can trust."""

from importlib.metadata import PackageNotFoundError, version as _version

try:
    __version__ = _version("countmill")
except PackageNotFoundError:  # running from a source tree without install
    __version__ = "0.0.0+unknown"

__all__ = ["__version__"]
