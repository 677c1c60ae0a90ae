"""The live JSON API (``harmony serve``): partners, palettes, scores and room sets, answered from
an immutable snapshot of the store that is swapped when an extraction commits.

Sits above :mod:`harmony.suggest` and below :mod:`harmony.cli`: may import :mod:`harmony.colour`,
:mod:`harmony.photo`, :mod:`harmony.shop`, :mod:`harmony.rules` and :mod:`harmony.suggest`; never
the report, evaluation, demo or command line. Everything it takes from the suggestion stage goes
through :mod:`harmony.serve.engine`, so that one module follows when those stages change.
"""
