"""Packaging, data library and docstring examples.

The README's test command installs the package non-editably, so these checks run against what a user
gets from ``pip install``: the data library must be inside it.
"""

import doctest
import importlib
import importlib.resources as resources
import pkgutil

import numpy as np
import pytest
from astropy.table import Table

import vsini

MODULES = sorted(m.name for m in pkgutil.iter_modules(vsini.__path__, "vsini.") if m.name != "vsini.data")


def test_data_library_is_installed_with_the_package():
    files = [p.name for p in resources.files("vsini.data").iterdir() if p.name.endswith(".ecsv")]
    assert "lsf_example.ecsv" in files


def test_every_data_table_states_its_source_and_how_to_regenerate_it():
    """Each ECSV in kernels/ carries provenance in its metadata (project convention, DESIGN.md)."""
    tables = [p for p in resources.files("vsini.data").iterdir() if p.name.endswith(".ecsv")]
    assert tables
    for path in tables:
        meta = {k.lower(): v for k, v in Table.read(str(path), format="ascii.ecsv").meta.items()}
        assert any(k in meta for k in ("source", "sources")), f"{path.name} has no source in its metadata"
        assert any(k.startswith("regenerat") for k in meta), f"{path.name} does not say how to regenerate it"


@pytest.mark.parametrize("name", MODULES)
def test_docstring_examples_run(name):
    module = importlib.import_module(name)
    result = doctest.testmod(module, optionflags=doctest.ELLIPSIS | doctest.NORMALIZE_WHITESPACE, verbose=False)
    assert result.failed == 0


@pytest.mark.parametrize("name", MODULES)
def test_every_module_declares_its_public_api(name):
    module = importlib.import_module(name)
    assert hasattr(module, "__all__"), f"{name} has no __all__"
    for item in module.__all__:
        assert hasattr(module, item), f"{name}.__all__ names {item!r}, which does not exist"


def test_physics_modules_do_not_import_matplotlib():
    """The library's physics never draws (DESIGN.md: nothing in the physics imports matplotlib)."""
    import ast
    from pathlib import Path

    for name in ("kernels", "limbdark", "model", "grid", "spectrum", "surface", "fourier", "ftransform", "fzerocheck", "fwindows", "detect",
                 "zeros", "fit", "fitlimits", "lines", "linesets", "linemodel", "inclination", "deprojection",
                 "sensitivity", "simulate", "compare"):
        path = Path(vsini.__file__).parent / f"{name}.py"
        if not path.exists():
            continue
        tree = ast.parse(path.read_text())
        for node in ast.walk(tree):
            if isinstance(node, (ast.Import, ast.ImportFrom)):
                names = [a.name for a in node.names] + [getattr(node, "module", "") or ""]
                assert not any(n.startswith("matplotlib") for n in names), f"vsini/{name}.py imports matplotlib"


def test_version_is_set():
    assert vsini.__version__ != "0.0.0+unknown"
    assert np.__version__  # the numerical stack imports


def test_flag_and_command_pages_are_current():
    """docs/flags.md is generated from vsini.flags; docs/commands.md names every command."""
    import importlib.util
    from pathlib import Path

    docs = Path(__file__).resolve().parents[1] / "docs"
    spec = importlib.util.spec_from_file_location("make_docs", docs / "make_docs.py")
    make_docs = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(make_docs)
    assert (docs / "flags.md").read_text() == make_docs.flags_page(), "run python docs/make_docs.py"
    page = (docs / "commands.md").read_text()
    from vsini.cli import app

    for full, _ in make_docs._commands(app, "vsini"):
        assert f"## `{full}`" in page, f"docs/commands.md lacks {full}: run python docs/make_docs.py"
