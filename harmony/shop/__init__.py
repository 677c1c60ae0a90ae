"""Shop data: the catalogue, the SQLite palette store, the extraction engine (local processes or
Dask) and interaction logs.

May import :mod:`harmony.colour` and :mod:`harmony.photo`; never the rules, suggestions, report,
evaluation, demo or command line.
"""
