"""Where the data library (the top-level ``kernels/`` folder) is found.

Installed, it is the package ``vsini.data``. When ``vsini`` is imported from a source tree that was not
installed (a worker process started in a clone, a test run without installing), that package does not
exist, and the ``kernels/`` folder beside the source is used instead.
"""

from __future__ import annotations

from pathlib import Path

from .errors import VsiniError

__all__ = ["data_folder", "data_path"]


def data_folder():
    """The folder (a path or importlib Traversable) holding the ECSV data files."""
    try:
        from importlib.resources import files

        return files("vsini.data")
    except ModuleNotFoundError:
        folder = Path(__file__).resolve().parent.parent / "kernels"
        if folder.is_dir():
            return folder
        raise VsiniError("the vsini data library (kernels/) is missing: reinstall the package") from None


def data_path(name):
    """The data file ``name`` (e.g. ``'lsf_example.ecsv'``) in :func:`data_folder`."""
    return data_folder().joinpath(name)
