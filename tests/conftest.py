"""Shared test set-up.

The tests mirror the package (``tests/photo`` for ``harmony.photo`` ...). The reference data
modules of this folder, and test modules that others borrow helpers from, are imported by module
name, so this folder and each subfolder are put on the import path once, in a fixed order.
"""

import sys
from pathlib import Path

TESTS_DIR = Path(__file__).resolve().parent
for _folder in [TESTS_DIR, *sorted(p for p in TESTS_DIR.iterdir() if p.is_dir() and p.name != "data")]:
    if str(_folder) not in sys.path:
        sys.path.append(str(_folder))
