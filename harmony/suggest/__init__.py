"""Suggestions: the partner feed, room templates, the exact set search under a budget, and the
palette view of a room.

May import :mod:`harmony.colour`, :mod:`harmony.photo`, :mod:`harmony.shop` and
:mod:`harmony.rules`; never the report, evaluation, demo or command line.
"""
