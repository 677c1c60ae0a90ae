"""The invented demo shop: its generator, its simulated shoppers, ``harmony demo``, and synthetic
studio shots and colour charts for tests and benchmarks.

May import anything in harmony except the command line; nothing outside ``demo`` (and the
``demo`` command) imports it.
"""
