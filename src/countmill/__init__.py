"""countmill: turn data-logger raw codes into engineering units you can trust.

>>> import countmill
>>> df = countmill.read("day.parquet")  # doctest: +SKIP
"""

from importlib.metadata import PackageNotFoundError, version as _version

try:
    __version__ = _version("countmill")
except PackageNotFoundError:  # running from a source tree without install
    __version__ = "0.0.0+unknown"

from countmill import flags  # noqa: E402  (light: numpy only; ``countmill.flags.decode``)

__all__ = ["__version__", "flags", "read"]


def __getattr__(name: str):
    # ``read`` pulls in pandas; load it on first use so the command line starts fast
    if name == "read":
        from countmill.reading import read

        return read
    raise AttributeError(f"module 'countmill' has no attribute {name!r}")
