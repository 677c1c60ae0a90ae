"""Shop data: the catalogue, the SQLite palette store, the extraction engine (local processes or
Dask) and interaction logs.

May import :mod:`harmony.colour` and :mod:`harmony.photo`; never the rules, suggestions, report,
evaluation, demo or command line.
"""

__all__ = ["ENGINES", "DEFAULT_DB_NAME", "MAX_REMOVAL"]

#: Where extraction runs: local processes, or a Dask cluster.
ENGINES = ("local", "dask")
#: Name of the store file beside the catalogue when no path is given.
DEFAULT_DB_NAME = "harmony.db"
#: Largest share of the store's products one extraction may remove unless told otherwise (this
#: project's choice: a nightly export that lost a fifth of its rows is far likelier broken).
MAX_REMOVAL = 0.2
