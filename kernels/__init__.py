"""Data library of ``vsini``: tabulated kernels, calibrations and line sets (ECSV).

Installed as the package ``vsini.data``; read it through :func:`vsini.data_files.load_table`.
"""
