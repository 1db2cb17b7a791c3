"""Helpers shared by the command-line modules: error guard, JSON output, headless plotting.

Only the CLI layer imports this module. Every :class:`~vsini.errors.VsiniError` becomes one line on
standard error and exit code 2; an unexpected exception becomes one line too (exit 3) unless
``VSINI_DEBUG=1`` asks for the traceback.
"""

from __future__ import annotations

import functools
import json
import math
import os

import typer

from .errors import VsiniError

__all__ = ["fail", "guarded", "json_safe", "print_json", "use_agg", "write_figure"]


def fail(message, code=2):
    """Print ``vsini: error: <message>`` on standard error and exit with ``code``."""
    typer.echo(f"vsini: error: {message}", err=True)
    raise typer.Exit(code)


def guarded(fn):
    """Decorator: turn library errors into one line and an exit code instead of a traceback."""

    @functools.wraps(fn)
    def wrapper(*args, **kwargs):
        try:
            return fn(*args, **kwargs)
        except (typer.Exit, typer.Abort, SystemExit, KeyboardInterrupt):
            raise
        except VsiniError as e:
            fail(str(e), 2)
        except Exception as e:  # a bug: still one line for the user
            if os.environ.get("VSINI_DEBUG"):
                raise
            fail(f"unexpected {type(e).__name__}: {e} (set VSINI_DEBUG=1 for the traceback)", 3)

    return wrapper


def use_agg():
    """Select matplotlib's non-interactive Agg backend (figures are only written to files)."""
    import matplotlib

    matplotlib.use("Agg")


def json_safe(obj):
    """Replace NaN/inf with None and numpy scalars with Python ones, so the output is valid JSON."""
    if isinstance(obj, dict):
        return {k: json_safe(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [json_safe(v) for v in obj]
    if hasattr(obj, "item") and not isinstance(obj, (str, bytes)):
        try:
            obj = obj.item()
        except (ValueError, AttributeError):
            pass
    if isinstance(obj, float) and not math.isfinite(obj):
        return None
    return obj


def print_json(obj):
    """Print ``obj`` as indented JSON (NaN written as null)."""
    typer.echo(json.dumps(json_safe(obj), indent=2, allow_nan=False))


def write_figure(draw, path, *, quiet=False):
    """Draw with ``draw()`` (returning a Figure, an Axes or a sequence of Axes), save to ``path``, say so.

    The figure is written headless (Agg) by :func:`vsini.plots.save_figure`; ``quiet`` suppresses the
    ``wrote PATH`` line (e.g. when the standard output carries JSON).
    """
    import numpy as np

    use_agg()
    from .plots import save_figure

    drawn = draw()
    fig = drawn if hasattr(drawn, "savefig") else np.ravel(np.asarray(drawn, dtype=object))[0].figure
    save_figure(fig, path)
    if not quiet:
        typer.echo(f"wrote {path}")
