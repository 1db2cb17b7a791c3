"""vsini: projected rotational velocities of stars from their spectra."""

from importlib.metadata import PackageNotFoundError, version

try:
    __version__ = version("vsini")
except PackageNotFoundError:  # pragma: no cover - running from a source tree without install
    __version__ = "0.0.0+unknown"

__all__ = ["__version__"]
