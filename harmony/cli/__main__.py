"""``python -m harmony.cli``: the same as the ``harmony`` command."""

from harmony.cli import main

main()
