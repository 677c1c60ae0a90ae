"""Offline evaluation: how well rules files rank the partners shoppers really combined.

May import :mod:`harmony.colour`, :mod:`harmony.photo`, :mod:`harmony.shop` and
:mod:`harmony.rules`; never the report, demo or command line.
"""

from harmony.evaluation.core import Evaluation, MethodResult, evaluate
from harmony.colour.emd import emd, emd_one_to_many
from harmony.evaluation.methods import (
    ColourAttributeMethod,
    RandomMethod,
    RulesMethod,
    SameColoursMethod,
    standard_methods,
)
from harmony.evaluation.metrics import CUTOFF, auc, auc_table, hit_at_k, ideal_dcgs, metric_table, ndcg_at_k
from harmony.evaluation.page import (
    METRICS,
    READING_NOTE,
    render_html,
    result_table,
    write_html,
)
from harmony.evaluation.queries import Query, QuerySet, build_queries

__all__ = [
    "CUTOFF", "METRICS", "READING_NOTE", "ColourAttributeMethod", "Evaluation", "MethodResult",
    "Query", "QuerySet", "RandomMethod", "RulesMethod", "SameColoursMethod", "auc", "auc_table", "build_queries",
    "emd", "emd_one_to_many", "evaluate", "hit_at_k", "ideal_dcgs", "metric_table", "ndcg_at_k", "render_html", "result_table",
    "standard_methods", "write_html",
]
