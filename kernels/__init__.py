"""Data library of ``vsini``: tabulated kernels, calibrations and line sets (ECSV).

Installed as the package ``vsini.data``; modules read it with ``importlib.resources.files('vsini.data')``.
"""
